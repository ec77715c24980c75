package main

import (
	"bytes"
	"encoding/json"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// planFixture is a small scene for the plan tests: the fixture's centre
// 64 x 64 (two bands restored, tiles of 20: 3 x 3 tiles, an iteration cap
// of 12 to keep the test fast) and restore's flags for it.
func planFixture(t *testing.T, dir string) (in string, flags []string) {
	t.Helper()
	return cropFixture(t, dir, 64), []string{"--psf", "gaussian:sigma=1.4", "--tile", "20", "--iterations", "12", "--bands", "1,3", "--workers", "2"}
}

func planRun(t *testing.T, args ...string) string {
	t.Helper()
	code, _, stderr := limpid(t, nil, args...)
	if code != 0 {
		t.Fatalf("limpid %s: exit %d: %s", strings.Join(args, " "), code, stderr)
	}
	return stderr
}

func sameFile(t *testing.T, want, got, what string) {
	t.Helper()
	a, err := os.ReadFile(want)
	if err != nil {
		t.Fatal(err)
	}
	b, err := os.ReadFile(got)
	if err != nil {
		t.Fatal(err)
	}
	if !bytes.Equal(a, b) {
		t.Fatalf("%s: %s (%d bytes) differs from the single run %s (%d bytes)", what, got, len(b), want, len(a))
	}
}

// The plan route and the shard route give the default restore's bytes
// (cmp): restore --plan, shards 0..2 of 3 merged (a shard run twice, as a
// retry, changes nothing), for the global choice and for --choose per-tile.
// Source: issue 15's contract (the single run is the reference; cmp(1)
// semantics: equal bytes).
func TestPlanShardMergeIdentical(t *testing.T) {
	for _, choose := range []string{"global", "per-tile"} {
		t.Run(choose, func(t *testing.T) {
			dir := t.TempDir()
			in, flags := planFixture(t, dir)
			flags = append(flags, "--choose", choose)
			plain := filepath.Join(dir, "plain.tif")
			planRun(t, append(append([]string{"restore"}, flags...), in, plain)...)
			pj := filepath.Join(dir, "scene.plan.json")
			planRun(t, append(append([]string{"plan"}, flags...), in, pj)...)
			via := filepath.Join(dir, "via.tif")
			planRun(t, "restore", "--plan", pj, in, via)
			sameFile(t, plain, via, "restore --plan")
			tiles := filepath.Join(dir, "tiles")
			for _, s := range []string{"0/3", "1/3", "2/3", "1/3"} {
				planRun(t, "restore", "--plan", pj, "--shard", s, in, tiles)
			}
			merged := filepath.Join(dir, "merged.tif")
			planRun(t, "merge", tiles, merged)
			sameFile(t, plain, merged, "merge")
		})
	}
}

// A retried shard skips the tiles already present (it says so), and the
// LIMPID_SHARD variable stands for --shard (Slurm's and Kubernetes' index
// drop in). Source: issue 15 (retries harmless; every flag from LIMPID_<FLAG>).
func TestShardRetryAndEnv(t *testing.T) {
	dir := t.TempDir()
	in, flags := planFixture(t, dir)
	pj := filepath.Join(dir, "p.json")
	planRun(t, append(append([]string{"plan"}, flags...), in, pj)...)
	tiles := filepath.Join(dir, "tiles")
	t.Setenv("LIMPID_SHARD", "0/1")
	first := planRun(t, "restore", "--plan", pj, in, tiles)
	again := planRun(t, "restore", "--plan", pj, in, tiles)
	if !strings.Contains(first, "9 of its 9 tiles restored") || !strings.Contains(again, "0 of its 9 tiles restored") || !strings.Contains(again, "9 already there") {
		t.Fatalf("first run: %q; retry: %q", first, again)
	}
}

// Bad input to plan, restore --plan/--shard and merge: one line, exit 2
// (usage), nothing at OUTPUT, and the tiles already in DIR stay. Source:
// project rule (one clear error line, nothing half-written), POSIX exit
// status convention for usage errors (2, common practice, no source).
func TestPlanBadInput(t *testing.T) {
	dir := t.TempDir()
	in, flags := planFixture(t, dir)
	pj := filepath.Join(dir, "p.json")
	planRun(t, append(append([]string{"plan"}, flags...), in, pj)...)
	tiles := filepath.Join(dir, "tiles")
	planRun(t, "restore", "--plan", pj, "--shard", "0/2", in, tiles)
	// Another input: the fixture's centre 48 x 48.
	other := filepath.Join(t.TempDir(), "crop.tif")
	os.Rename(cropFixture(t, filepath.Dir(other), 48), other)
	// Another plan (tile 48) with its own tiles.
	pj2 := filepath.Join(dir, "p2.json")
	planRun(t, "plan", "--psf", "gaussian:sigma=1.4", "--tile", "32", "--bands", "1", "--smooth", "0.2", "--stop", "change", in, pj2)
	tiles2 := filepath.Join(dir, "tiles2")
	planRun(t, "restore", "--plan", pj2, "--shard", "0/1", in, tiles2)
	v9 := filepath.Join(dir, "v9.json")
	b, _ := os.ReadFile(pj)
	os.WriteFile(v9, bytes.Replace(b, []byte(`"version": 1`), []byte(`"version": 9`), 1), 0o644)
	out := filepath.Join(dir, "out.tif")
	cases := []struct {
		name string
		args []string
		want string
	}{
		{"shard without plan", []string{"restore", "--shard", "0/2", in, out}, "needs --plan"},
		{"I >= N", []string{"restore", "--plan", pj, "--shard", "2/2", in, out}, "between 0 and 1"},
		{"N < 1", []string{"restore", "--plan", pj, "--shard", "0/0", in, out}, "at least 1"},
		{"not I/N", []string{"restore", "--plan", pj, "--shard", "x", in, out}, "I/N"},
		{"other input", []string{"restore", "--plan", pj, other, out}, "another input"},
		{"version", []string{"restore", "--plan", v9, in, out}, "version 9"},
		{"not a plan", []string{"restore", "--plan", in, in, out}, "not a plan"},
		{"DIR of another plan", []string{"restore", "--plan", pj, "--shard", "1/2", in, tiles2}, "another plan"},
		{"missing tiles", []string{"merge", tiles, out}, "missing"},
		{"not a shard DIR", []string{"merge", dir, out}, "no plan.json"},
		{"particle plan", []string{"plan", "--psf", "gaussian:sigma=1.4", "--method", "particle", in, out}, "particle"},
	}
	for _, tc := range cases {
		code, stdout, stderr := limpid(t, nil, tc.args...)
		if code != exitUsage || strings.Count(stderr, "\n") != 1 || !strings.Contains(stderr, tc.want) || stdout != "" {
			t.Errorf("%s: exit %d, stderr %q (want exit 2, one line with %q)", tc.name, code, stderr, tc.want)
		}
		if _, err := os.Stat(out); err == nil {
			t.Fatalf("%s: something was written at OUTPUT", tc.name)
		}
	}
	// A tile cut short refuses the merge and names the tile.
	planRun(t, "restore", "--plan", pj, "--shard", "1/2", in, tiles)
	names, _ := filepath.Glob(filepath.Join(tiles, "tile-*.tif"))
	if len(names) != 9 {
		t.Fatalf("%d tile files, want 9", len(names))
	}
	tb, _ := os.ReadFile(names[0])
	os.WriteFile(names[0], tb[:len(tb)/2], 0o644)
	code, _, stderr := limpid(t, nil, "merge", tiles, out)
	if code != exitUsage || strings.Count(stderr, "\n") != 1 || !strings.Contains(stderr, filepath.Base(names[0])) {
		t.Errorf("cut tile: exit %d, stderr %q", code, stderr)
	}
	if _, err := os.Stat(out); err == nil {
		t.Fatal("cut tile: something was written at OUTPUT")
	}
	// A foreign tile in DIR refuses the merge; nothing in DIR is removed.
	foreign, _ := filepath.Glob(filepath.Join(tiles2, "tile-*.tif"))
	fb, _ := os.ReadFile(foreign[0])
	os.WriteFile(filepath.Join(tiles, filepath.Base(foreign[0])), fb, 0o644)
	code, _, stderr = limpid(t, nil, "merge", tiles, out)
	if code != exitUsage || !strings.Contains(stderr, "another plan") {
		t.Errorf("foreign tile: exit %d, stderr %q", code, stderr)
	}
	if left, _ := filepath.Glob(filepath.Join(tiles, "tile-*.tif")); len(left) != 10 {
		t.Errorf("DIR holds %d tile files after the refusals, want 10 (nothing lost)", len(left))
	}
}

// A tile stream packed with the plan restores with the plan's automatic
// choice: pack --plan | restore --input-format arrow --output-format arrow
// | unpack gives the default raster route's bytes; a stream without a plan
// and without --psf is refused in one line. Source: issue 15 (streams with
// the automatic choice); the raster route is the reference.
func TestPlanStreamIdentical(t *testing.T) {
	dir := t.TempDir()
	in, flags := planFixture(t, dir)
	plain := filepath.Join(dir, "plain.tif")
	planRun(t, append(append([]string{"restore"}, flags...), in, plain)...)
	pj := filepath.Join(dir, "p.json")
	planRun(t, append(append([]string{"plan"}, flags...), in, pj)...)
	code, packed, stderr := limpid(t, nil, "tiles", "pack", "--plan", pj, in, "-")
	if code != 0 {
		t.Fatalf("pack --plan: exit %d: %s", code, stderr)
	}
	code, restored, stderr := limpid(t, []byte(packed), "restore", "--input-format", "arrow", "--output-format", "arrow", "--workers", "2", "-", "-")
	if code != 0 {
		t.Fatalf("restore of the stream: exit %d: %s", code, stderr)
	}
	out := filepath.Join(dir, "stream.tif")
	if code, _, stderr := limpid(t, []byte(restored), "tiles", "unpack", "-", out); code != 0 {
		t.Fatalf("unpack: exit %d: %s", code, stderr)
	}
	sameFile(t, plain, out, "pack --plan | restore | unpack")
	code, bare, _ := limpid(t, nil, "tiles", "pack", "--tile", "32", in, "-")
	if code != 0 {
		t.Fatal("pack without a plan failed")
	}
	code, _, stderr = limpid(t, []byte(bare), "restore", "--input-format", "arrow", "-", filepath.Join(dir, "x.tif"))
	if code != exitUsage || strings.Count(stderr, "\n") != 1 || !strings.Contains(stderr, "--psf is required") {
		t.Errorf("stream without a plan and --psf: exit %d, %q", code, stderr)
	}
	code, _, stderr = limpid(t, nil, "tiles", "pack", "--plan", pj, "--tile", "64", in, filepath.Join(dir, "y.arrows"))
	if code != exitUsage || !strings.Contains(stderr, "tiles of 20") {
		t.Errorf("pack --plan with another --tile: exit %d, %q", code, stderr)
	}
}

// A plan edited by hand or cut short is refused with one line and exit 2,
// never a panic. Source: project rule (user input never panics).
func TestPlanDamaged(t *testing.T) {
	dir := t.TempDir()
	in, flags := planFixture(t, dir)
	pj := filepath.Join(dir, "p.json")
	planRun(t, append(append([]string{"plan"}, flags...), in, pj)...)
	good, err := os.ReadFile(pj)
	if err != nil {
		t.Fatal(err)
	}
	edit := func(f func(m map[string]any)) []byte {
		var m map[string]any
		if err := json.Unmarshal(good, &m); err != nil {
			t.Fatal(err)
		}
		f(m)
		b, _ := json.Marshal(m)
		return b
	}
	settings := func(m map[string]any) map[string]any { return m["settings"].(map[string]any) }
	cases := map[string][]byte{
		"cut short":        good[:len(good)/2],
		"not an object":    []byte("[]"),
		"even kernel":      edit(func(m map[string]any) { settings(m)["psf_kernel"].(map[string]any)["W"] = 4 }),
		"no kernel":        edit(func(m map[string]any) { delete(settings(m), "psf_kernel") }),
		"band too high":    edit(func(m map[string]any) { m["bands"] = []int{7, 8} }),
		"no decisions":     edit(func(m map[string]any) { delete(m, "decided") }),
		"unknown rule":     edit(func(m map[string]any) { m["decided"].([]any)[0].(map[string]any)["rule"] = "guess" }),
		"tiles cut":        edit(func(m map[string]any) { m["tiles"] = m["tiles"].([]any)[:3] }),
		"zero width":       edit(func(m map[string]any) { m["output"].(map[string]any)["width"] = 0 }),
		"tiny tile":        edit(func(m map[string]any) { settings(m)["tile"] = 3 }),
		"negative overlap": edit(func(m map[string]any) { settings(m)["overlap"] = -7 }),
	}
	for name, b := range cases {
		p := filepath.Join(dir, "bad.json")
		if err := os.WriteFile(p, b, 0o644); err != nil {
			t.Fatal(err)
		}
		out := filepath.Join(dir, "out.tif")
		for _, args := range [][]string{{"restore", "--plan", p, in, out}, {"restore", "--plan", p, "--shard", "0/2", in, filepath.Join(dir, "t")}, {"tiles", "pack", "--plan", p, in, filepath.Join(dir, "s.arrows")}} {
			code, _, stderr := limpid(t, nil, args...)
			if code != exitUsage || strings.Count(stderr, "\n") != 1 {
				t.Errorf("%s: %s: exit %d, %q", name, args[0]+" "+args[1], code, stderr)
			}
			if _, err := os.Stat(out); err == nil {
				t.Fatalf("%s: something was written at OUTPUT", name)
			}
		}
	}
}
