package scratch

import (
	"errors"
	"fmt"
	"hash/fnv"
	"os"
	"sync"
	"time"
)

// Prefix starts the name of every temporary limpid makes.
const Prefix = ".limpid-"

var (
	// start is this run's start; temporaries of runs that started earlier
	// and whose process is gone are stale.
	start = time.Now()
	pid   = os.Getpid()
	host  = hostTag()
)

// hostTag is eight hex digits of the FNV-1a hash of the host name: a
// temporary made on another host sharing the directory (NFS) is never taken
// for a leftover, since its process cannot be checked from here.
func hostTag() string {
	h, _ := os.Hostname()
	f := fnv.New32a()
	f.Write([]byte(h))
	return fmt.Sprintf("%08x", f.Sum32())
}

// Pattern is the os.CreateTemp pattern of this run's temporaries ending in
// suffix.
func Pattern(suffix string) string {
	return fmt.Sprintf("%s%s-%d-%d-*%s", Prefix, host, pid, start.UnixMilli(), suffix)
}

// ErrStopping is returned for a temporary asked for after RemoveAll: the
// process is about to exit.
var ErrStopping = errors.New("the run is stopping")

// registry is the process's list of temporaries and of finished outputs.
var registry = struct {
	sync.Mutex
	paths    map[string]bool
	stopping bool
	written  []string
	started  []string
}{paths: map[string]bool{}}

// CreateTemp creates a new temporary file in dir (os.TempDir() when dir is
// "") named by Pattern(suffix), exclusively, and tracks it. The file is
// created with mode 0600.
func CreateTemp(dir, suffix string) (*os.File, error) {
	registry.Lock()
	defer registry.Unlock()
	if registry.stopping {
		return nil, ErrStopping
	}
	f, err := os.CreateTemp(dir, Pattern(suffix))
	if err != nil {
		return nil, err
	}
	registry.paths[f.Name()] = true
	return f, nil
}

// MkdirTemp creates a new private (0700) temporary directory in dir and
// tracks it: files inside it cannot be planted by other users, whatever
// names the code that writes there (GDAL) chooses.
func MkdirTemp(dir string) (string, error) {
	registry.Lock()
	defer registry.Unlock()
	if registry.stopping {
		return "", ErrStopping
	}
	d, err := os.MkdirTemp(dir, Pattern(".d"))
	if err != nil {
		return "", err
	}
	registry.paths[d] = true
	return d, nil
}

// Remove removes a tracked temporary (a file, or a directory with all it
// holds) and forgets it.
func Remove(path string) {
	registry.Lock()
	defer registry.Unlock()
	os.RemoveAll(path)
	delete(registry.paths, path)
}

// Commit moves src (a file inside the tracked temporary tracked, or tracked
// itself) to final, records final as written and removes what is left of
// tracked. It fails, leaving nothing at final, once RemoveAll has run.
func Commit(src, final, tracked string) error {
	registry.Lock()
	defer registry.Unlock()
	if registry.stopping {
		return ErrStopping
	}
	if err := os.Rename(src, final); err != nil {
		return err
	}
	if tracked != src {
		os.RemoveAll(tracked)
	}
	delete(registry.paths, tracked)
	registry.written = append(registry.written, final)
	return nil
}

// RemoveAll removes every tracked temporary and refuses new ones and
// commits from then on; it returns the paths it removed. It is meant for a
// process about to exit on a signal while other goroutines may still run.
func RemoveAll() []string {
	registry.Lock()
	defer registry.Unlock()
	registry.stopping = true
	var out []string
	for p := range registry.paths {
		// A writer still running (GDAL inside a cgo call) may add a file
		// between RemoveAll's listing and its rmdir: try again.
		for try := 0; try < 3; try++ {
			if err := os.RemoveAll(p); err == nil {
				out = append(out, p)
				break
			}
		}
		delete(registry.paths, p)
	}
	return out
}

// Started records that bytes of an output went to the stream name (stdout,
// a FIFO, a device).
func Started(name string) {
	registry.Lock()
	defer registry.Unlock()
	registry.started = append(registry.started, name)
}

// Written records that the output name is complete (a stream fully written,
// a side file written into a device).
func Written(name string) {
	registry.Lock()
	defer registry.Unlock()
	registry.written = append(registry.written, name)
}

// Retract takes back a finished output that was removed again (a run that
// failed after writing it).
func Retract(name string) {
	registry.Lock()
	defer registry.Unlock()
	for i, x := range registry.written {
		if x == name {
			registry.written[i] = ""
		}
	}
}

// Marker is a point in the record of outputs (Mark).
type Marker struct{ written, started int }

// Mark returns the current end of the record of outputs: a run that starts
// there later asks for its own outputs with OutputsSince.
func Mark() Marker {
	registry.Lock()
	defer registry.Unlock()
	return Marker{len(registry.written), len(registry.started)}
}

// OutputsSince returns the outputs finished since m and the streams started
// since m but not finished (the zero Marker: since the process started).
func OutputsSince(m Marker) (written, incomplete []string) {
	registry.Lock()
	defer registry.Unlock()
	done := map[string]bool{}
	for _, x := range registry.written[m.written:] {
		if x != "" { // "": retracted
			written = append(written, x)
			done[x] = true
		}
	}
	for _, s := range registry.started[m.started:] {
		if !done[s] {
			incomplete = append(incomplete, s)
			done[s] = true
		}
	}
	return written, incomplete
}

// Tracked returns the temporaries the process holds now (for tests).
func Tracked() []string {
	registry.Lock()
	defer registry.Unlock()
	var out []string
	for p := range registry.paths {
		out = append(out, p)
	}
	return out
}
