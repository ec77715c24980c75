package main

import (
	"context"
	"encoding/binary"
	"encoding/json"
	"flag"
	"fmt"
	"log"
	"math"
	"os"
	"path/filepath"
	"strings"

	"limpid/psf"
	"limpid/raster"
	"limpid/scripts/internal/tunescene"
	"limpid/step"
	"limpid/step/assess"
	"limpid/step/conv"
)

const n, margin, maxIt = 192, 16, 200

// geometry is one valid-area shape: valid reports whether pixel (x, y) of
// the n x n scene holds data; tile is the restore's tile size (0: default).
type geometry struct {
	name  string
	valid func(x, y int) bool
	tile  int
}

func collar(c int) func(x, y int) bool {
	return func(x, y int) bool { return x >= c && y >= c && x < n-c && y < n-c }
}

// turned is the footprint of a square scene turned by deg about the centre
// and inscribed in the n x n grid (corners outside it are nodata).
func turned(deg float64) func(x, y int) bool {
	a := deg * math.Pi / 180
	half := float64(n) / 2 / (math.Abs(math.Cos(a)) + math.Abs(math.Sin(a)))
	return func(x, y int) bool {
		u, v := float64(x)+0.5-float64(n)/2, float64(y)+0.5-float64(n)/2
		ru, rv := u*math.Cos(a)+v*math.Sin(a), -u*math.Sin(a)+v*math.Cos(a)
		return math.Abs(ru) <= half && math.Abs(rv) <= half
	}
}

var geometries = []geometry{
	{"full", func(int, int) bool { return true }, 0},
	{"collar 1", collar(1), 0},
	{"collar 3", collar(3), 0},
	{"collar 8", collar(8), 0},
	{"collar 16", collar(16), 0},
	{"turned 5", turned(5), 0},
	{"turned 15", turned(15), 0},
	{"turned 30", turned(30), 0},
	{"collar 8, tiles of 96", collar(8), 96},
}

type caseResult struct {
	geom       string
	oracle     float64
	auto, loss float64
}

func main() {
	out := flag.String("out", "", "also write the markdown table to this file")
	only := flag.String("scenes", "-s1.5-n0", "measure only the scenes whose name contains this")
	rlDir := flag.String("rl", "", "write the cases for scripts/rl_psnr_masked.py into this directory")
	flag.Parse()
	log.SetFlags(0)
	scenes, err := tunescene.Scenes(n)
	if err != nil {
		log.Fatal(err)
	}
	var md strings.Builder
	fmt.Fprintf(&md, "| scene | geometry | invalid %% | oracle dB (eps, k) | auto dB (eps, k) | loss dB |\n|---|---|---|---|---|---|\n")
	var res []caseResult
	var rlCases []map[string]any
	for _, s := range scenes {
		if !strings.Contains(s.Name, *only) {
			continue
		}
		for _, g := range geometries {
			r, invalid, oe, ok, ae, ak, err := measure(s, g)
			if err != nil {
				log.Fatal(err)
			}
			res = append(res, r)
			fmt.Fprintf(&md, "| %s | %s | %.1f | %.2f (%.1f, %d) | %.2f (%.1f, %d) | %.2f |\n", s.Name, g.name, invalid, r.oracle, oe, ok, r.auto, ae, ak, r.loss)
			log.Printf("%s %s: loss %.2f dB", s.Name, g.name, r.loss)
			if *rlDir != "" && g.tile == 0 {
				name := strings.ReplaceAll(s.Name+"-"+g.name, " ", "")
				if err := writeRLCase(*rlDir, name, s, g); err != nil {
					log.Fatal(err)
				}
				rlCases = append(rlCases, map[string]any{"name": name, "width": n, "height": n, "psf_sigma": s.Sigma, "geometry": g.name, "oracle": r.oracle, "auto": r.auto})
			}
		}
	}
	summary(&md, res)
	if *rlDir != "" {
		b, _ := json.MarshalIndent(rlCases, "", " ")
		if err := os.WriteFile(filepath.Join(*rlDir, "cases.json"), b, 0o644); err != nil {
			log.Fatal(err)
		}
	}
	fmt.Print(md.String())
	if *out != "" {
		if err := os.WriteFile(*out, []byte(md.String()), 0o644); err != nil {
			log.Fatal(err)
		}
	}
}

// scored marks the pixels the PSNR is computed on: valid and at least
// margin from the scene border.
func scored(g geometry) []bool {
	in := tunescene.Interior(n, margin)
	for i := range in {
		in[i] = in[i] && g.valid(i%n, i/n)
	}
	return in
}

func measure(s tunescene.Scene, g geometry) (r caseResult, invalid, oe float64, ok int, ae float64, ak int, err error) {
	r.geom = g.name
	k, err := psf.GaussianIso(s.Sigma)
	if err != nil {
		return
	}
	mask := make([]float32, n*n)
	obs := make([]float32, n*n)
	nInvalid := 0
	for i := range obs {
		if g.valid(i%n, i/n) {
			mask[i] = 1
			obs[i] = float32(math.Max(1, float64(s.Obs[i])))
		} else {
			nInvalid++
		}
	}
	invalid = 100 * float64(nInvalid) / float64(n*n)
	sc := scored(g)
	// Oracle: every candidate to maxIt on the whole scene.
	r.oracle = math.Inf(-1)
	for _, eps := range step.AutoSmooths {
		ge := &step.GridEMS{H: conv.New(k), Iterations: maxIt}
		if sk := conv.SmoothingKernel(eps); sk != nil {
			ge.S = conv.NewSeparable(sk, sk)
		}
		ge.Observe = func(it int, f []float32, _ float64) {
			if v := assess.PSNR(s.Ref, f, sc, 4095); v > r.oracle {
				r.oracle, oe, ok = v, eps, it
			}
		}
		p := &step.Problem{D: append([]float32(nil), obs...), Mask: append([]float32(nil), mask...), W: n, H: n}
		if _, err = ge.Solve(context.Background(), &step.Workspace{}, p, make([]float32, n*n)); err != nil {
			return
		}
	}
	src := raster.NewMem(raster.Meta{Width: n, Height: n, DataType: "UInt16", Bands: []raster.BandInfo{{NoData: 0, HasNoData: true}}})
	copy(src.Bands[0], obs)
	dst := raster.NewMem(src.M)
	cfg := step.Config{PSF: k, Workers: 2, SmoothAuto: true, Stop: step.StopAuto, Iterations: step.AutoCap, Tile: g.tile}
	rep, err := step.Restore(context.Background(), src, []int{0}, dst, cfg)
	if err != nil {
		return
	}
	r.auto = assess.PSNR(s.Ref, dst.Bands[0], sc, 4095)
	r.loss = r.oracle - r.auto
	ch := rep.Bands[0].Choice
	return r, invalid, oe, ok, ch.Smooth, ch.Iterations, nil
}

// writeRLCase writes NAME.obs.f32 (nodata filled with the valid mean),
// NAME.ref.f32 and NAME.score.u8 (1 where scored).
func writeRLCase(dir, name string, s tunescene.Scene, g geometry) error {
	var mean float64
	var nv int
	for i, v := range s.Obs {
		if g.valid(i%n, i/n) {
			mean += math.Max(1, float64(v))
			nv++
		}
	}
	mean /= float64(nv)
	obs := make([]float32, n*n)
	for i, v := range s.Obs {
		obs[i] = float32(mean)
		if g.valid(i%n, i/n) {
			obs[i] = float32(math.Max(1, float64(v)))
		}
	}
	write := func(ext string, data any) error {
		f, err := os.Create(filepath.Join(dir, name+ext))
		if err != nil {
			return err
		}
		if err := binary.Write(f, binary.LittleEndian, data); err != nil {
			f.Close()
			return err
		}
		return f.Close()
	}
	sc := scored(g)
	u8 := make([]uint8, len(sc))
	for i, b := range sc {
		if b {
			u8[i] = 1
		}
	}
	if err := write(".obs.f32", obs); err != nil {
		return err
	}
	if err := write(".ref.f32", s.Ref); err != nil {
		return err
	}
	return write(".score.u8", u8)
}

// summary writes the mean and worst loss per geometry and overall.
func summary(md *strings.Builder, res []caseResult) {
	fmt.Fprintf(md, "\n| geometry | cases | mean loss dB | worst loss dB |\n|---|---|---|---|\n")
	var all []float64
	for _, g := range geometries {
		var sum, worst float64
		var c int
		for _, r := range res {
			if r.geom == g.name {
				sum += r.loss
				worst = math.Max(worst, r.loss)
				c++
				all = append(all, r.loss)
			}
		}
		if c > 0 {
			fmt.Fprintf(md, "| %s | %d | %.3f | %.3f |\n", g.name, c, sum/float64(c), worst)
		}
	}
	var sum, worst float64
	for _, v := range all {
		sum += v
		worst = math.Max(worst, v)
	}
	if len(all) > 0 {
		fmt.Fprintf(md, "| all | %d | %.3f | %.3f |\n", len(all), sum/float64(len(all)), worst)
	}
}
