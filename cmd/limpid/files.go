package main

import (
	"bufio"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"strings"
	"syscall"

	"limpid/raster/gdal"
	"limpid/raster/scratch"
)

// Side files (JSON reports and summaries, CSV curves, kernels, PNG plots and
// quicklooks, HTML reports), the checks of every output path before any work,
// and the stdin spool. Products (rasters, tile streams) have writers of their
// own that commit the same way (raster/gdal, streamOutput in tiles.go); all
// temporaries come from limpid/raster/scratch, named .limpid-HOST-PID-START-*.

// umask is the process's file mode creation mask (read once: the call that
// reads it also sets it, so it is set straight back).
var umask = func() os.FileMode {
	m := syscall.Umask(0)
	syscall.Umask(m)
	return os.FileMode(m)
}()

// sideFileError says which stage of writeSideFile failed; Err is the
// operating system's (or fill's) reason, without the path.
type sideFileError struct {
	Op  string // "create", "write" or "rename"
	Err error
}

func (e *sideFileError) Error() string { return e.Err.Error() }
func (e *sideFileError) Unwrap() error { return e.Err }

// writeSideFile writes a side file atomically. A path naming a FIFO or a
// character device (/dev/stdout, /dev/null) is written directly and never
// replaced; otherwise fill writes into a new temporary file of a unique name
// created exclusively in the target's directory (a file or symbolic link
// planted at a predictable name is never followed), which is renamed to the
// path (to the end of its symbolic links) once complete. On any failure the
// temporary is removed and nothing appears at path. perm is the mode before
// the umask. Errors are *sideFileError.
func writeSideFile(path string, perm os.FileMode, fill func(io.Writer) error) error {
	t, err := scratch.Inspect(path)
	if err != nil {
		return &sideFileError{Op: "create", Err: err}
	}
	if t.Kind == scratch.Stream {
		sw := &scratch.StreamWriter{Path: path, Name: path}
		bw := bufio.NewWriter(sw)
		err := fill(bw)
		if err == nil {
			err = bw.Flush()
		}
		if err == nil {
			err = sw.Close()
		}
		if err != nil {
			sw.Release()
			if errors.Is(err, syscall.EPIPE) {
				err = gdal.StreamError(path, err)
			}
			return &sideFileError{Op: "write", Err: scratch.Reason(err)}
		}
		return nil
	}
	f, err := scratch.CreateTemp(filepath.Dir(t.Path), filepath.Ext(t.Path))
	if err != nil {
		return &sideFileError{Op: "create", Err: scratch.Reason(err)}
	}
	tmp := f.Name()
	bw := bufio.NewWriter(f)
	err = f.Chmod(perm &^ umask)
	if err == nil {
		err = fill(bw)
	}
	if err == nil {
		err = bw.Flush()
	}
	if cerr := f.Close(); err == nil {
		err = cerr
	}
	if err != nil {
		scratch.Remove(tmp)
		return &sideFileError{Op: "write", Err: scratch.Reason(err)}
	}
	if err := scratch.Commit(tmp, t.Path, tmp); err != nil {
		scratch.Remove(tmp)
		return &sideFileError{Op: "rename", Err: scratch.Reason(err)}
	}
	return nil
}

// The three front ends below differ only in the error lines their callers
// have always printed (and in the file mode: os.Create's 0666 for the PSF
// toolkit's files, 0644 for the others); all write through writeSideFile.
// A path that cannot be created is a usage error (exit 2); a failure while
// writing (disk full) is not (exit 1).

// writeJSON writes v as indented JSON and a newline to the file of flag
// (--report, --json): errors read "FLAG PATH: reason".
func writeJSON(flag, path string, v any) error {
	b, err := json.MarshalIndent(v, "", "  ")
	if err != nil {
		return fmt.Errorf("%s %s: %v", flag, path, err)
	}
	err = writeSideFile(path, 0o644, func(w io.Writer) error {
		_, err := w.Write(append(b, '\n'))
		return err
	})
	var se *sideFileError
	if !errors.As(err, &se) {
		return err
	}
	if se.Op == "create" {
		return usagef("%s %s: %v", flag, path, se.Err)
	}
	return fmt.Errorf("%s %s: %w", flag, path, se.Err)
}

// writeFileAtomic writes data to the file of flag (--quicklook,
// --report-html, the demo's quicklook); errors read "FLAG PATH: reason".
func writeFileAtomic(flag, path string, data []byte) error {
	err := writeSideFile(path, 0o644, func(w io.Writer) error {
		_, err := w.Write(data)
		return err
	})
	if err != nil {
		return fmt.Errorf("%s %s: %w", flag, path, err)
	}
	return nil
}

// writeAtomic writes what fill produces to the file named by what (OUTPUT,
// --csv, --png of the PSF toolkit). A file that cannot be created is a usage
// error "WHAT PATH: cannot create: reason"; later failures read
// "writing PATH: error".
func writeAtomic(what, path string, fill func(io.Writer) error) error {
	err := writeSideFile(path, 0o666, fill)
	var se *sideFileError
	if !errors.As(err, &se) {
		return err
	}
	if se.Op == "create" {
		return usagef("%s %s: cannot create: %v", what, path, se.Err)
	}
	return fmt.Errorf("writing %s: %w", path, se.Err)
}

// namedPath is a path from the command line with the argument or flag that
// gave it ("OUTPUT", "--report").
type namedPath struct{ name, path string }

// checkOutputs checks every output path of a command before any work
// starts: each names a new file in a directory that exists and takes new
// files, an existing regular file, a FIFO or a character device (not a
// directory, a socket or a block device); no output names an input (after
// symbolic links: os.SameFile) and no two outputs name the same file (for
// files not there yet: the same name in the same directory, os.SameFile of
// the directories), except the null device. "-" is stdout for an output (its
// file is compared when stdout is one) and stdin for an input; "" is not
// given. A failed check is a usage error naming both paths. stderr gets
// one line about stale temporaries of killed runs in the outputs'
// directories and TMPDIR (staleNote).
func checkOutputs(stdout, stderr io.Writer, ins, outs []namedPath) error {
	type target struct {
		namedPath
		t scratch.Target
	}
	var its, ots []target
	for _, in := range ins {
		if in.path == "" || in.path == "-" {
			continue
		}
		if st, err := os.Stat(in.path); err == nil {
			its = append(its, target{in, scratch.Target{Given: in.path, Path: in.path, Kind: scratch.File, Info: st}})
		} // a missing input is named by its reader
	}
	dirs := []string{os.TempDir()}
	for _, o := range outs {
		switch o.path {
		case "":
			continue
		case "-":
			if f, ok := stdout.(*os.File); ok {
				if st, err := f.Stat(); err == nil {
					ots = append(ots, target{namedPath{o.name, "- (stdout)"}, scratch.Target{Given: "-", Kind: scratch.Stream, Info: st}})
				}
			}
			continue
		}
		t, err := scratch.Inspect(o.path)
		if err != nil {
			if strings.HasPrefix(err.Error(), "is ") {
				return usagef("%s %s %v", o.name, o.path, err)
			}
			return usagef("%s %s: %v", o.name, o.path, err)
		}
		if err := t.CheckWritable(); err != nil {
			return usagef("%s %s: %v", o.name, o.path, err)
		}
		if t.Kind != scratch.Stream {
			dirs = append(dirs, filepath.Dir(t.Path))
		}
		ots = append(ots, target{o, t})
	}
	for i, o := range ots {
		for _, in := range its {
			if scratch.Same(o.t, in.t) {
				return usagef("%s %s is the %s %s: write to another file and keep the input", o.name, o.path, in.name, in.path)
			}
		}
		for _, p := range ots[:i] {
			if scratch.Same(o.t, p.t) && !o.t.IsNull() {
				return usagef("%s %s and %s %s are the same file: give each output its own", p.name, p.path, o.name, o.path)
			}
		}
	}
	staleNote(stderr, dirs)
	return nil
}

// staleNote prints one line when dirs hold temporaries left by killed
// limpid runs on this host (scratch.Stale), with the command that removes
// them.
func staleNote(stderr io.Writer, dirs []string) {
	var n int
	var size int64
	var where []string
	seen := map[string]bool{}
	for _, d := range dirs {
		a, err := filepath.Abs(d)
		if err != nil || seen[a] {
			continue
		}
		seen[a] = true
		st, _ := scratch.Stale(a)
		for _, e := range st {
			n++
			size += e.Size
		}
		if len(st) > 0 {
			where = append(where, a)
		}
	}
	if n == 0 {
		return
	}
	fmt.Fprintf(stderr, "limpid: note: %s of killed limpid runs (%s) in %s; remove them with: limpid clean %s\n",
		temporaries(n), byteSize(size), strings.Join(where, ", "), strings.Join(where, " "))
}

func temporaries(n int) string {
	if n == 1 {
		return "1 temporary"
	}
	return fmt.Sprintf("%d temporaries", n)
}

// byteSize writes n bytes in binary units.
func byteSize(n int64) string {
	switch {
	case n >= 1<<30:
		return fmt.Sprintf("%.1f GiB", float64(n)/(1<<30))
	case n >= 1<<20:
		return fmt.Sprintf("%.1f MiB", float64(n)/(1<<20))
	case n >= 1<<10:
		return fmt.Sprintf("%.1f KiB", float64(n)/(1<<10))
	}
	return fmt.Sprintf("%d B", n)
}

// psfInputs names the file a --psf kernel:PATH or measured:PATH reads.
func psfInputs(spec string) []namedPath {
	for _, p := range []string{"kernel:", "measured:"} {
		if rest, ok := strings.CutPrefix(spec, p); ok {
			return []namedPath{{"--psf " + p, rest}}
		}
	}
	return nil
}

// spoolInput returns a path GDAL can open for INPUT: in itself, or for "-"
// stdin copied to a temporary file in TMPDIR (GDAL's /vsistdin/ reads
// forward only). done removes the copy (and does nothing for a path): call
// it once the raster is closed. The copy stops when stdin does (a stdin
// from run is interruptible: see interruptible).
func spoolInput(in string, stdin io.Reader) (path string, done func(), err error) {
	if in != "-" {
		return in, func() {}, nil
	}
	f, err := scratch.CreateTemp("", ".stdin")
	if err != nil {
		return "", func() {}, err
	}
	p := f.Name()
	n, err := io.Copy(f, stdin)
	if cerr := f.Close(); err == nil {
		err = cerr
	}
	if err != nil {
		scratch.Remove(p)
		if errors.Is(err, context.Canceled) {
			return "", func() {}, err
		}
		return "", func() {}, fmt.Errorf("reading stdin: %w", err)
	}
	if n == 0 {
		scratch.Remove(p)
		return "", func() {}, usagef("INPUT -: stdin is empty")
	}
	return p, func() { scratch.Remove(p) }, nil
}

// openRaster opens a raster INPUT (stdin is spooled to a temporary file);
// cleanup removes the spool. A stdin that GDAL cannot read is a usage error
// naming "INPUT - (stdin)", not the spool's temporary name.
func openRaster(in string, stdin io.Reader) (*gdal.Reader, func(), error) {
	path, cleanup, err := spoolInput(in, stdin)
	if err != nil {
		return nil, cleanup, err
	}
	src, err := gdal.Open(path)
	if err != nil {
		cleanup()
		if in == "-" {
			return nil, func() {}, usagef("INPUT - (stdin) is not a raster GDAL can read")
		}
		return nil, func() {}, err
	}
	return src, cleanup, nil
}
