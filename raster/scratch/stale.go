package scratch

import (
	"io/fs"
	"os"
	"path/filepath"
	"regexp"
	"strconv"
	"time"
)

// nameRE matches a temporary's name: host, pid, start (Unix ms).
var nameRE = regexp.MustCompile(`^\.limpid-([0-9a-f]{8})-([0-9]+)-([0-9]+)-`)

// Entry is a stale temporary.
type Entry struct {
	Path  string
	PID   int
	Start time.Time
	Size  int64 // bytes, with everything inside for a directory
}

// Stale lists the temporaries in dir (not below it) made on this host by a
// run that started before this one and whose process is gone. A process id
// taken again by another process counts as alive: such leftovers are missed,
// never a live run's temporaries removed.
func Stale(dir string) ([]Entry, error) {
	ents, err := os.ReadDir(dir)
	if err != nil {
		return nil, err
	}
	var out []Entry
	for _, e := range ents {
		m := nameRE.FindStringSubmatch(e.Name())
		if m == nil || m[1] != host {
			continue
		}
		p, err1 := strconv.Atoi(m[2])
		ms, err2 := strconv.ParseInt(m[3], 10, 64)
		if err1 != nil || err2 != nil || p <= 0 || p == pid {
			continue
		}
		st := time.UnixMilli(ms)
		if !st.Before(start) || alive(p) {
			continue
		}
		path := filepath.Join(dir, e.Name())
		out = append(out, Entry{Path: path, PID: p, Start: st, Size: size(path)})
	}
	return out, nil
}

// size is the bytes of a file, or of everything inside a directory
// (symbolic links are not followed).
func size(path string) int64 {
	var n int64
	filepath.WalkDir(path, func(_ string, d fs.DirEntry, err error) error {
		if err == nil && d.Type().IsRegular() {
			if fi, err := d.Info(); err == nil {
				n += fi.Size()
			}
		}
		return nil
	})
	return n
}
