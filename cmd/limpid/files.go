package main

import (
	"bufio"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"os"

	"limpid/raster/gdal"
)

// Side files (JSON reports and summaries, CSV curves, kernels, PNG plots and
// quicklooks, HTML reports) and the stdin spool. Products (rasters, tile
// streams) have writers of their own that commit the same way.

// sideFileError says which stage of writeSideFile failed; Err is the
// operating system's (or fill's) error, unchanged.
type sideFileError struct {
	Op  string // "create", "write" or "rename"
	Err error
}

func (e *sideFileError) Error() string { return e.Err.Error() }
func (e *sideFileError) Unwrap() error { return e.Err }

// writeSideFile writes a side file atomically: fill writes into path+".tmp"
// (created with perm before the umask, in path's directory so that the
// rename stays on one file system), which is renamed to path once it is
// complete. On any failure the temporary file is removed and nothing
// appears at path. Errors are *sideFileError.
func writeSideFile(path string, perm os.FileMode, fill func(io.Writer) error) error {
	tmp := path + ".tmp"
	f, err := os.OpenFile(tmp, os.O_WRONLY|os.O_CREATE|os.O_TRUNC, perm)
	if err != nil {
		return &sideFileError{Op: "create", Err: err}
	}
	bw := bufio.NewWriter(f)
	err = fill(bw)
	if err == nil {
		err = bw.Flush()
	}
	if cerr := f.Close(); err == nil {
		err = cerr
	}
	if err != nil {
		os.Remove(tmp)
		return &sideFileError{Op: "write", Err: err}
	}
	if err := os.Rename(tmp, path); err != nil {
		os.Remove(tmp)
		return &sideFileError{Op: "rename", Err: err}
	}
	return nil
}

// The three front ends below differ only in the error lines their callers
// have always printed (and in the file mode: os.Create's 0666 for the PSF
// toolkit's files, 0644 for the others); all write through writeSideFile.

// writeJSON writes v as indented JSON and a newline to the file of flag
// (--report, --json). A file that cannot be created or written is a usage
// error (exit 2) "FLAG PATH: reason".
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
	if errors.As(err, &se) && se.Op == "rename" {
		return se.Err
	}
	if err != nil {
		return usagef("%s %s: %v", flag, path, errors.Unwrap(se.Err))
	}
	return nil
}

// writeFileAtomic writes data to the file of flag (--quicklook,
// --report-html, the demo's quicklook); errors read "FLAG PATH: error".
func writeFileAtomic(flag, path string, data []byte) error {
	err := writeSideFile(path, 0o644, func(w io.Writer) error {
		_, err := w.Write(data)
		return err
	})
	if err != nil {
		return fmt.Errorf("%s %s: %w", flag, path, errors.Unwrap(err))
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
		return usagef("%s %s: cannot create: %v", what, path, errors.Unwrap(se.Err))
	}
	return fmt.Errorf("writing %s: %w", path, se.Err)
}

// spoolInput returns a path GDAL can open for INPUT: in itself, or for "-"
// stdin copied to a temporary file (GDAL's /vsistdin/ reads forward only).
// done removes the copy (and does nothing for a path): call it once the
// raster is closed.
func spoolInput(in string, stdin io.Reader) (path string, done func(), err error) {
	if in != "-" {
		return in, func() {}, nil
	}
	f, err := os.CreateTemp("", "limpid-stdin-*")
	if err != nil {
		return "", func() {}, err
	}
	n, err := io.Copy(f, stdin)
	if cerr := f.Close(); err == nil {
		err = cerr
	}
	if err != nil {
		os.Remove(f.Name())
		return "", func() {}, fmt.Errorf("reading stdin: %w", err)
	}
	if n == 0 {
		os.Remove(f.Name())
		return "", func() {}, usagef("INPUT -: stdin is empty")
	}
	p := f.Name()
	return p, func() { os.Remove(p) }, nil
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
