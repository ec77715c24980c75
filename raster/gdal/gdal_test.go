package gdal

import (
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"testing"

	"limpid/raster"
)

// TestCacheMax checks that Init bounds GDAL's block cache to DefaultCacheMax
// and leaves a GDAL_CACHEMAX given by the user alone. Each case runs in a
// child process (the cache size is set once per process).
func TestCacheMax(t *testing.T) {
	for _, c := range []struct {
		env  string
		want int64
	}{
		// limpid's own bound (DefaultCacheMax).
		{"", DefaultCacheMax},
		// Source: https://gdal.org/user/configoptions.html: GDAL_CACHEMAX
		// gives the block cache size in megabytes.
		{"32", 32 << 20},
	} {
		cmd := exec.Command(os.Args[0], "-test.run=^TestCacheMaxChild$", "-test.v")
		env := []string{"LIMPID_CACHE_CHILD=1"}
		for _, e := range os.Environ() {
			if !strings.HasPrefix(e, "GDAL_CACHEMAX=") {
				env = append(env, e)
			}
		}
		if c.env != "" {
			env = append(env, "GDAL_CACHEMAX="+c.env)
		}
		cmd.Env = env
		out, err := cmd.CombinedOutput()
		if err != nil {
			t.Fatalf("GDAL_CACHEMAX=%q: child: %v\n%s", c.env, err, out)
		}
		_, after, ok := strings.Cut(string(out), "cachemax=")
		if !ok {
			t.Fatalf("GDAL_CACHEMAX=%q: child printed no cache size:\n%s", c.env, out)
		}
		got, err := strconv.ParseInt(strings.Fields(after)[0], 10, 64)
		if err != nil || got != c.want {
			t.Errorf("GDAL_CACHEMAX=%q: GDALGetCacheMax64 after Init = %q, want %d", c.env, strings.Fields(after)[0], c.want)
		}
	}
}

// TestCacheMaxChild prints the cache size after Init (TestCacheMax runs it).
func TestCacheMaxChild(t *testing.T) {
	if os.Getenv("LIMPID_CACHE_CHILD") == "" {
		t.Skip("run by TestCacheMax")
	}
	Init()
	t.Logf("cachemax=%d", CacheMax())
}

// TestWriteRowsChunks writes rows in more than one chunk of writeChunk
// pixels and reads them back: integer outputs rounded half to even and
// clamped, NaN to the nodata value, every row in its place.
func TestWriteRowsChunks(t *testing.T) {
	const w, h = 1100, 1000 // 1.1 Mpixel: two chunks of 953 and 47 rows
	if w*h <= writeChunk {
		t.Fatalf("the scene must span more than one chunk of %d pixels", writeChunk)
	}
	meta := raster.Meta{Width: w, Height: h, DataType: "UInt16", Bands: []raster.BandInfo{{}}}
	src := make([]float32, w*h)
	want := make([]float32, w*h)
	for i := range src {
		x, y := i%w, i/w
		v := float32(x+y) + 0.5 // halves round to even
		src[i] = v
		// Source: Go's math.RoundToEven documentation (ties to even).
		want[i] = float32(math.RoundToEven(float64(v)))
		switch {
		case x == 7:
			src[i], want[i] = float32(math.NaN()), 9 // nodata
		case x == 8:
			src[i], want[i] = 70000, 65535 // clamped to UInt16
		case x == 9:
			src[i], want[i] = -3, 0
		}
	}
	path := filepath.Join(t.TempDir(), "chunks.tif")
	if err := WriteFloat32(path, meta, [][]float32{src}, WriteOptions{Format: GTiff, DataType: "UInt16", NoData: 9, HasNoData: true}); err != nil {
		t.Fatal(err)
	}
	r, err := Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer r.Close()
	got := [][]float32{make([]float32, w*h)}
	if err := r.ReadRows(0, h, []int{0}, got); err != nil {
		t.Fatal(err)
	}
	for i, v := range got[0] {
		if v != want[i] {
			t.Fatalf("pixel (%d,%d) = %v, want %v", i%w, i/w, v, want[i])
		}
	}
}
