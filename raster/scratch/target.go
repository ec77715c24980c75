package scratch

import (
	"errors"
	"fmt"
	"io/fs"
	"os"
	"path/filepath"
	"syscall"
)

// Kind is what an output path names.
type Kind int

const (
	// New: nothing is there yet; the output is written under a temporary
	// name in the directory and renamed.
	New Kind = iota
	// File: an existing regular file (possibly through symbolic links),
	// replaced the same way at its resolved path.
	File
	// Stream: a FIFO or a character device, written directly (never
	// replaced by a file).
	Stream
)

// Target is an output path as found before any work.
type Target struct {
	Given string // the path as given
	Path  string // where the output goes: Given with symbolic links resolved for a File
	Kind  Kind
	Info  os.FileInfo // what is there (nil for New)
	// DirInfo is Path's directory (for New and File).
	DirInfo os.FileInfo
}

// Inspect classifies the output path p. A directory, a socket or a block
// device cannot be an output; a missing directory is an error too.
func Inspect(p string) (Target, error) {
	t := Target{Given: p, Path: p}
	st, err := os.Stat(p)
	switch {
	case err == nil:
		t.Info = st
		m := st.Mode()
		switch {
		case m.IsRegular():
			t.Kind = File
			if r, err := filepath.EvalSymlinks(p); err == nil {
				t.Path = r
			}
		case m.IsDir():
			return t, errors.New("is a directory")
		case m&fs.ModeNamedPipe != 0 || (m&fs.ModeDevice != 0 && m&fs.ModeCharDevice != 0):
			t.Kind = Stream
			return t, nil
		case m&fs.ModeSocket != 0:
			return t, errors.New("is a socket: give a file, a FIFO, a character device or -")
		default:
			return t, errors.New("is a block device or another special file: give a file, a FIFO, a character device or -")
		}
	case errors.Is(err, fs.ErrNotExist):
		t.Kind = New
		if _, lerr := os.Lstat(p); lerr == nil {
			// A dangling symbolic link: the output replaces the link.
			t.Info = nil
		}
	default:
		return t, Reason(err)
	}
	dir := filepath.Dir(t.Path)
	ds, err := os.Stat(dir)
	if err != nil {
		if errors.Is(err, fs.ErrNotExist) {
			return t, fmt.Errorf("directory %s does not exist", dir)
		}
		return t, fmt.Errorf("directory %s: %v", dir, Reason(err))
	}
	if !ds.IsDir() {
		return t, fmt.Errorf("%s is not a directory", dir)
	}
	t.DirInfo = ds
	return t, nil
}

// CheckWritable makes and removes a temporary in the directory of a New or
// File target: the surest check that the output can be committed there.
func (t Target) CheckWritable() error {
	if t.Kind == Stream {
		return nil
	}
	dir := filepath.Dir(t.Path)
	f, err := CreateTemp(dir, ".check")
	if err != nil {
		return fmt.Errorf("cannot create a file in %s: %v", dir, Reason(err))
	}
	f.Close()
	Remove(f.Name())
	return nil
}

// Same reports whether targets a and b are one file: the same existing file
// (os.SameFile), or the same name in the same directory for files not yet
// there.
func Same(a, b Target) bool {
	if a.Info != nil || b.Info != nil {
		return a.Info != nil && b.Info != nil && os.SameFile(a.Info, b.Info)
	}
	return a.DirInfo != nil && b.DirInfo != nil && os.SameFile(a.DirInfo, b.DirInfo) &&
		filepath.Base(a.Path) == filepath.Base(b.Path)
}

// IsNull reports whether the target is the null device (outputs may share
// it: nothing written there is kept).
func (t Target) IsNull() bool {
	if t.Kind != Stream {
		return false
	}
	n, err := os.Stat(os.DevNull)
	return err == nil && os.SameFile(n, t.Info)
}

// Reason is the operating system's message of err without the path of an
// os.PathError or os.LinkError (callers name the path the user gave, not a
// temporary).
func Reason(err error) error {
	var pe *fs.PathError
	if errors.As(err, &pe) {
		return pe.Err
	}
	var le *os.LinkError
	if errors.As(err, &le) {
		return le.Err
	}
	return err
}

// StreamWriter writes into a Stream target, opened at the first Write (a
// FIFO's open blocks until a reader comes). Name is recorded with Started
// and, on Close after a complete write, Written.
type StreamWriter struct {
	Path, Name string
	f          *os.File
	done       bool
}

func (s *StreamWriter) open() error {
	if s.f != nil {
		return nil
	}
	f, err := os.OpenFile(s.Path, os.O_WRONLY, 0)
	if err != nil {
		return err
	}
	s.f = f
	Started(s.Name)
	return nil
}

// Write implements io.Writer.
func (s *StreamWriter) Write(p []byte) (int, error) {
	if err := s.open(); err != nil {
		return 0, err
	}
	return s.f.Write(p)
}

// Close finishes a complete output (opening the stream if nothing was
// written, so that its reader sees the end) and records it as written.
func (s *StreamWriter) Close() error {
	if err := s.open(); err != nil {
		return err
	}
	err := s.f.Close()
	s.f = nil
	if err == nil {
		s.done = true
		Written(s.Name)
	}
	return err
}

// Release ends an incomplete output: the stream is closed; a FIFO never
// opened is opened without blocking and closed at once when a reader
// waits, so that the reader sees the end instead of waiting for ever. It
// does nothing after a successful Close.
func (s *StreamWriter) Release() {
	if s.done {
		return
	}
	s.done = true
	if s.f != nil {
		s.f.Close()
		s.f = nil
		return
	}
	if f, err := os.OpenFile(s.Path, os.O_WRONLY|syscall.O_NONBLOCK, 0); err == nil {
		f.Close()
	}
}
