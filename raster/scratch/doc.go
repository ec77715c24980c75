// Package scratch names, tracks and removes the temporary files and
// directories behind limpid's outputs, and says what kind of thing an output
// path is.
//
// Every temporary is created exclusively (O_EXCL, so a file or symbolic link
// already at the name is never followed or reused) under a name that carries
// the host, the process id and the start time of the run that made it:
//
//	.limpid-<host>-<pid>-<start>-<random><suffix>
//
// where host is eight hex digits of a hash of the host name, pid is decimal
// and start is the run's start in Unix milliseconds. A later run on the same
// host can thus tell the leftovers of a killed run (kill -9, power loss) from
// the temporaries of a run still going: Stale lists those whose process is
// gone and that are older than the current run.
//
// The package keeps a list of the temporaries the process holds (Track,
// Forget); RemoveAll removes them all and refuses new ones, for a process
// that is about to exit on a signal. Written and Started record which outputs
// are finished and which streams have begun, for the one line the command
// prints when it is interrupted.
//
// Target classifies an output path: a new file, an existing regular file
// (written under a temporary name and renamed), a stream (a FIFO or a
// character device such as /dev/null or /dev/stdout: written directly, never
// replaced) or something that cannot be an output (a directory, a socket, a
// block device).
//
// Pure Go, no dependency inside the module.
package scratch
