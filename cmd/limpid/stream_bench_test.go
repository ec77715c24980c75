package main

import (
	"bufio"
	"io"
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"syscall"
	"testing"

	"limpid/arrowio"
	"limpid/raster"
	"limpid/step/stream"
)

// synthScene is a raster.Reader that makes its rows on the fly (an invented
// pattern of fields and roads), so a large stream costs the generator no
// file and little memory.
type synthScene struct{ m raster.Meta }

func (s synthScene) Meta() raster.Meta { return s.m }

func (s synthScene) ReadRows(y0, y1 int, bands []int, dst [][]float32) error {
	W := s.m.Width
	for i := range bands {
		for y := y0; y < y1; y++ {
			row := dst[i][(y-y0)*W : (y-y0+1)*W]
			for x := range row {
				row[x] = float32(1500 + 700*math.Sin(float64(x)/9)*math.Cos(float64(y)/13) + 40*float64((x/37+y/23)%3))
			}
		}
	}
	return nil
}

// feedStream writes the observed stream of the synthetic scene meta, cut as
// h says, to w and closes w.
func feedStream(w io.WriteCloser, meta raster.Meta, h *arrowio.Header) error {
	defer w.Close()
	bw := bufio.NewWriterSize(w, 1<<20)
	tiler, err := stream.NewSceneTiler(synthScene{meta}, []int{0}, h)
	if err != nil {
		return err
	}
	aw, err := arrowio.NewWriter(bw, h)
	if err != nil {
		return err
	}
	var t arrowio.Tile
	for {
		ok, err := tiler.Next(&t)
		if err != nil {
			return err
		}
		if !ok {
			break
		}
		if err := aw.Write(&t); err != nil {
			return err
		}
	}
	if err := aw.Close(); err != nil {
		return err
	}
	return bw.Flush()
}

// countTiles reads a restored stream to its end and counts its tiles.
func countTiles(r io.Reader) (int, error) {
	rd, err := arrowio.NewReader(bufio.NewReaderSize(r, 1<<20))
	if err != nil {
		return 0, err
	}
	defer rd.Release()
	n := 0
	var t arrowio.Tile
	for {
		ok, err := rd.Next(&t)
		if err != nil {
			return n, err
		}
		if !ok {
			return n, nil
		}
		n++
	}
}

// BenchmarkStreamRSS200 restores a stream of 200 tiles of 512 x 512 (a
// 10240 x 5120 band, overlap 16: buffers up to 544 x 544) through the limpid
// binary as a child process, feeding its stdin and draining its stdout, and
// reports the child's peak RSS (getrusage ru_maxrss). Target (issue): below
// 300 MiB. Needs LIMPID_BENCH_STREAM=1 (about half a minute on 2 cores);
// `make bench` sets it.
func BenchmarkStreamRSS200(b *testing.B) {
	if os.Getenv("LIMPID_BENCH_STREAM") == "" {
		b.Skip("set LIMPID_BENCH_STREAM=1")
	}
	dir := b.TempDir()
	bin := filepath.Join(dir, "limpid")
	if out, err := exec.Command("go", "build", "-o", bin, ".").CombinedOutput(); err != nil {
		b.Fatalf("build: %v %s", err, out)
	}
	meta := raster.Meta{Width: 20 * 512, Height: 10 * 512, DataType: "UInt16", Bands: []raster.BandInfo{{Description: "pan"}}}
	h, err := stream.ObservedHeader(meta, []int{0}, "glenmorrow-strip", 512, 16)
	if err != nil {
		b.Fatal(err)
	}
	for i := 0; i < b.N; i++ {
		cmd := exec.Command(bin, "restore", "--input-format", "arrow", "--output-format", "arrow",
			"--psf", "gaussian:sigma=0.7", "--smooth", "0.2", "--stop", "change", "--iterations", "10", "--tolerance", "0", "--workers", "2", "-", "-")
		stdin, _ := cmd.StdinPipe()
		stdout, _ := cmd.StdoutPipe()
		cmd.Stderr = os.Stderr
		if err := cmd.Start(); err != nil {
			b.Fatal(err)
		}
		feedErr := make(chan error, 1)
		go func() { feedErr <- feedStream(stdin, meta, h) }()
		n, err := countTiles(stdout)
		if err != nil {
			b.Fatal(err)
		}
		if err := <-feedErr; err != nil {
			b.Fatal(err)
		}
		if err := cmd.Wait(); err != nil {
			b.Fatal(err)
		}
		if n != 200 {
			b.Fatalf("%d tiles restored, want 200", n)
		}
		rss := float64(cmd.ProcessState.SysUsage().(*syscall.Rusage).Maxrss) / 1024
		b.ReportMetric(rss, "MiB-peak-rss")
		b.Logf("200 tiles of 512x512: peak RSS %.0f MiB", rss)
		if rss >= 300 {
			b.Errorf("peak RSS %.0f MiB, target < 300 MiB", rss)
		}
	}
}
