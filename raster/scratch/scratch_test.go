package scratch

import (
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"syscall"
	"testing"
	"time"
)

// deadPID returns the id of a process that has exited and been reaped.
func deadPID(t *testing.T) int {
	t.Helper()
	c := exec.Command("true")
	if err := c.Run(); err != nil {
		t.Skipf("cannot run true: %v", err)
	}
	return c.Process.Pid
}

func touch(t *testing.T, p string, n int) {
	t.Helper()
	if err := os.WriteFile(p, make([]byte, n), 0o644); err != nil {
		t.Fatal(err)
	}
}

// Stale finds the temporaries of a process that is gone and started before
// this one, on this host; never those of a live process (this one's parent),
// of a later start, of another host, or other names. Source: POSIX.1-2017
// kill(): a null signal to a pid with no process fails with ESRCH.
func TestStale(t *testing.T) {
	dir := t.TempDir()
	dead := deadPID(t)
	old := start.Add(-time.Hour).UnixMilli()
	name := func(h string, p int, ms int64) string {
		return filepath.Join(dir, fmt.Sprintf(".limpid-%s-%d-%d-123.tif", h, p, ms))
	}
	want := name(host, dead, old)
	touch(t, want, 10)
	os.Mkdir(name(host, dead, old-1), 0o700)
	touch(t, filepath.Join(name(host, dead, old-1), "product.tif"), 5)
	touch(t, name(host, os.Getppid(), old), 1)                      // alive
	touch(t, name(host, dead, start.Add(time.Hour).UnixMilli()), 1) // later than this run
	touch(t, name("0badc0de", dead, old), 1)                        // another host
	touch(t, filepath.Join(dir, ".limpid-123456.tif"), 1)           // old naming, owner unknown
	touch(t, filepath.Join(dir, "scene.tif"), 1)
	got, err := Stale(dir)
	if err != nil {
		t.Fatal(err)
	}
	if len(got) != 2 {
		t.Fatalf("Stale found %d entries, want 2: %+v", len(got), got)
	}
	sizes := map[string]int64{}
	for _, e := range got {
		sizes[e.Path] = e.Size
		if e.PID != dead {
			t.Errorf("%s: pid %d, want %d", e.Path, e.PID, dead)
		}
	}
	if sizes[want] != 10 || sizes[name(host, dead, old-1)] != 5 {
		t.Errorf("sizes %v, want 10 for the file and 5 for the directory", sizes)
	}
	if err := syscall.Kill(dead, 0); err != syscall.ESRCH {
		t.Fatalf("kill(%d, 0) = %v, want ESRCH (the process is gone)", dead, err)
	}
}

// A temporary is created exclusively: a symbolic link planted at a name is
// never followed (O_EXCL), and names carry this run's host, pid and start.
// Source: POSIX.1-2017 open(): "If O_CREAT and O_EXCL are set, open() shall
// fail if the file exists ... If O_EXCL and O_CREAT are set, and path names
// a symbolic link, open() shall fail with [EEXIST]".
func TestCreateTempNames(t *testing.T) {
	dir := t.TempDir()
	f, err := CreateTemp(dir, ".json")
	if err != nil {
		t.Fatal(err)
	}
	f.Close()
	base := filepath.Base(f.Name())
	prefix := fmt.Sprintf(".limpid-%s-%d-%d-", host, os.Getpid(), start.UnixMilli())
	if !strings.HasPrefix(base, prefix) || !strings.HasSuffix(base, ".json") {
		t.Errorf("temporary %s, want %s*.json", base, prefix)
	}
	if m := nameRE.FindStringSubmatch(base); m == nil || m[1] != host {
		t.Errorf("Stale's pattern does not read %s", base)
	}
	if !contains(Tracked(), f.Name()) {
		t.Errorf("%s is not tracked", f.Name())
	}
	Remove(f.Name())
	if _, err := os.Stat(f.Name()); !os.IsNotExist(err) || contains(Tracked(), f.Name()) {
		t.Errorf("Remove left %s (stat %v)", f.Name(), err)
	}
	// A link at the exact name os.CreateTemp would pick cannot be planted
	// in advance (the name is random), but an existing file of a pattern's
	// name must fail, not be reused: exercise O_EXCL through os.OpenFile as
	// os.CreateTemp does.
	victim := filepath.Join(dir, "victim")
	touch(t, victim, 3)
	link := filepath.Join(dir, "planted")
	os.Symlink(victim, link)
	if _, err := os.OpenFile(link, os.O_RDWR|os.O_CREATE|os.O_EXCL, 0o600); !os.IsExist(err) {
		t.Errorf("O_EXCL on a planted link: %v, want EEXIST", err)
	}
}

func contains(s []string, x string) bool {
	for _, v := range s {
		if v == x {
			return true
		}
	}
	return false
}

// Inspect tells files, streams and impossible outputs apart; Same compares
// existing files by identity and new ones by directory identity and name.
// Source: POSIX.1-2017 <sys/stat.h> file types (S_ISFIFO, S_ISCHR, S_ISDIR,
// S_ISSOCK); Go os.SameFile (device and inode).
func TestInspectAndSame(t *testing.T) {
	dir := t.TempDir()
	file := filepath.Join(dir, "a.tif")
	touch(t, file, 1)
	fifo := filepath.Join(dir, "p")
	if err := syscall.Mkfifo(fifo, 0o644); err != nil {
		t.Fatal(err)
	}
	link := filepath.Join(dir, "link.tif")
	os.Symlink(file, link)
	for _, c := range []struct {
		path string
		kind Kind
		err  string
	}{
		{file, File, ""}, {link, File, ""}, {filepath.Join(dir, "new.tif"), New, ""},
		{fifo, Stream, ""}, {os.DevNull, Stream, ""},
		{dir, 0, "is a directory"}, {filepath.Join(dir, "no", "x.tif"), 0, "does not exist"},
		{filepath.Join(file, "x.tif"), 0, "not a directory"},
	} {
		tg, err := Inspect(c.path)
		switch {
		case c.err != "" && (err == nil || !strings.Contains(err.Error(), c.err)):
			t.Errorf("Inspect(%s): %v, want an error with %q", c.path, err, c.err)
		case c.err == "" && err != nil:
			t.Errorf("Inspect(%s): %v", c.path, err)
		case c.err == "" && tg.Kind != c.kind:
			t.Errorf("Inspect(%s): kind %d, want %d", c.path, tg.Kind, c.kind)
		}
	}
	a, _ := Inspect(link)
	b, _ := Inspect(file)
	if !Same(a, b) || a.Path != b.Path {
		t.Errorf("a link and its file: Same %v, paths %s %s", Same(a, b), a.Path, b.Path)
	}
	n1, _ := Inspect(filepath.Join(dir, "new.tif"))
	os.Mkdir(filepath.Join(dir, "sub"), 0o755)
	n2, _ := Inspect(filepath.Join(dir, "sub", "..", "new.tif"))
	n3, _ := Inspect(filepath.Join(dir, "other.tif"))
	if !Same(n1, n2) || Same(n1, n3) || Same(n1, b) {
		t.Errorf("new files: same name %v (want true), other name %v, existing file %v (want false)", Same(n1, n2), Same(n1, n3), Same(n1, b))
	}
	null, _ := Inspect(os.DevNull)
	if !null.IsNull() {
		t.Errorf("%s is not the null device", os.DevNull)
	}
}

// RemoveAll removes what is tracked and refuses new temporaries and
// commits (a process about to exit on a signal).
func TestRemoveAllStops(t *testing.T) {
	defer func() { registry.Lock(); registry.stopping = false; registry.Unlock() }()
	dir := t.TempDir()
	d, err := MkdirTemp(dir)
	if err != nil {
		t.Fatal(err)
	}
	touch(t, filepath.Join(d, "product.tif"), 4)
	RemoveAll()
	if _, err := os.Stat(d); !os.IsNotExist(err) {
		t.Errorf("RemoveAll left %s", d)
	}
	if _, err := CreateTemp(dir, ".x"); err != ErrStopping {
		t.Errorf("CreateTemp after RemoveAll: %v, want ErrStopping", err)
	}
	if err := Commit(filepath.Join(dir, "a"), filepath.Join(dir, "b"), dir); err != ErrStopping {
		t.Errorf("Commit after RemoveAll: %v, want ErrStopping", err)
	}
}

// The record of outputs since a mark: finished ones, started streams not
// finished, retracted ones left out (the one line of an interrupted run
// must not claim a file that was taken back). Project rule, no outside
// source.
func TestOutputsSince(t *testing.T) {
	Written("before")
	m := Mark()
	Written("a.tif")
	Started("stdout")
	Written("r.json")
	Retract("r.json")
	w, inc := OutputsSince(m)
	if len(w) != 1 || w[0] != "a.tif" || len(inc) != 1 || inc[0] != "stdout" {
		t.Errorf("written %v incomplete %v, want [a.tif] [stdout]", w, inc)
	}
	Written("stdout")
	if _, inc := OutputsSince(m); len(inc) != 0 {
		t.Errorf("a finished stream is still incomplete: %v", inc)
	}
}
