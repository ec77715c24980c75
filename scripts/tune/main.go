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
	"os/exec"
	"path/filepath"
	"sort"
	"strings"

	"limpid/psf"
	"limpid/scripts/internal/tunescene"
	"limpid/step"
	"limpid/step/assess"
	"limpid/step/conv"
)

const n, margin, maxIt = 160, 16, 100

// epss are the candidate bandwidths; iterations the candidate counts.
var (
	epss       = []float64{0, 0.1, 0.15, 0.2, 0.25, 0.3, 0.4, 0.5, 0.7}
	iterations = []int{5, 8, 10, 15, 20, 25, 30, 40, 50, 60, 80, 100}
)

func main() {
	out := flag.String("out", "", "also write the markdown tables to this file")
	script := flag.String("rl", "scripts/rl_psnr.py", "path of rl_psnr.py")
	python := flag.String("python", "/usr/bin/python3", "Debian's python3 (with python3-skimage)")
	flag.Parse()
	log.SetFlags(0)
	scenes, err := tunescene.Scenes(n)
	if err != nil {
		log.Fatal(err)
	}
	rl, err := runRL(scenes, *python, *script)
	if err != nil {
		log.Fatal(err)
	}
	interior := tunescene.Interior(n, margin)
	curves := make([][][]float64, len(scenes))
	for si, s := range scenes {
		if curves[si], err = limpidCurves(s, interior); err != nil {
			log.Fatal(err)
		}
	}
	var md strings.Builder
	candidateTable(&md, scenes, rl, curves)
	met := sceneTable(&md, scenes, rl, curves, interior)
	fmt.Print(md.String())
	if met {
		fmt.Println("\nThe defaults meet the target on every scene.")
	} else {
		fmt.Println("\nThe defaults miss the target (>= RL@20 and within 0.5 dB of RL best) on some scene.")
	}
	if *out != "" {
		if err := os.WriteFile(*out, []byte(md.String()), 0o644); err != nil {
			log.Fatal(err)
		}
	}
}

// runRL writes the scenes for rl_psnr.py and returns its PSNR per iteration
// and scene.
func runRL(scenes []tunescene.Scene, python, script string) (map[string][]float64, error) {
	dir, err := os.MkdirTemp("", "limpid-tune-")
	if err != nil {
		return nil, err
	}
	defer os.RemoveAll(dir)
	var list []map[string]any
	for _, s := range scenes {
		if err := writeF32(filepath.Join(dir, s.Name+".obs.f32"), s.Obs); err != nil {
			return nil, err
		}
		if err := writeF32(filepath.Join(dir, s.Name+".ref.f32"), s.Ref); err != nil {
			return nil, err
		}
		list = append(list, map[string]any{"name": s.Name, "width": n, "height": n, "psf_sigma": s.Sigma, "margin": margin})
	}
	b, _ := json.Marshal(list)
	if err := os.WriteFile(filepath.Join(dir, "scenes.json"), b, 0o644); err != nil {
		return nil, err
	}
	out, err := exec.Command(python, script, dir, fmt.Sprint(maxIt)).Output()
	if err != nil {
		return nil, fmt.Errorf("rl_psnr.py: %w", err)
	}
	var rl map[string][]float64
	return rl, json.Unmarshal(out, &rl)
}

func writeF32(path string, v []float32) error {
	b := make([]byte, 4*len(v))
	for i, x := range v {
		binary.LittleEndian.PutUint32(b[4*i:], math.Float32bits(x))
	}
	return os.WriteFile(path, b, 0o644)
}

// limpidCurves returns, per candidate bandwidth, grid EMS's PSNR per
// iteration, stopped by step.DefaultTolerance (later entries repeat the
// stopped value).
func limpidCurves(s tunescene.Scene, interior []bool) ([][]float64, error) {
	k, err := psf.GaussianIso(s.Sigma)
	if err != nil {
		return nil, err
	}
	out := make([][]float64, len(epss))
	for ei, eps := range epss {
		curve := make([]float64, 0, maxIt)
		stopped := false
		g := &step.GridEMS{H: conv.New(k), Iterations: maxIt}
		if sk := conv.SmoothingKernel(eps); sk != nil {
			g.S = conv.NewSeparable(sk, sk)
		}
		g.Observe = func(it int, f []float32, change float64) {
			if stopped {
				curve = append(curve, curve[len(curve)-1])
				return
			}
			curve = append(curve, assess.PSNR(s.Ref, f, interior, 4095))
			if change < step.DefaultTolerance {
				stopped = true
			}
		}
		p := &step.Problem{D: append([]float32(nil), s.Obs...), Mask: tunescene.Ones(n * n), W: n, H: n}
		var ws step.Workspace
		if _, err := g.Solve(context.Background(), &ws, p, make([]float32, n*n)); err != nil {
			return nil, err
		}
		out[ei] = curve
	}
	return out, nil
}

// best returns a curve's maximum and its iteration (1-based).
func best(c []float64) (float64, int) {
	bi := 0
	for i, v := range c {
		if v > c[bi] {
			bi = i
		}
	}
	return c[bi], bi + 1
}

// candidateTable writes the 12 best (eps, iterations) pairs by mean margin
// against RL at its best iteration per scene.
func candidateTable(md *strings.Builder, scenes []tunescene.Scene, rl map[string][]float64, curves [][][]float64) {
	type cand struct {
		eps                     float64
		it                      int
		mean, worstVs20         float64
		meanVsBest, worstVsBest float64
	}
	var cands []cand
	for ei, eps := range epss {
		for _, it := range iterations {
			c := cand{eps: eps, it: it, worstVs20: math.Inf(1), worstVsBest: math.Inf(1)}
			for si, s := range scenes {
				v := curves[si][ei][it-1]
				rb, _ := best(rl[s.Name])
				c.mean += v - rl[s.Name][19]
				c.worstVs20 = math.Min(c.worstVs20, v-rl[s.Name][19])
				c.worstVsBest = math.Min(c.worstVsBest, v-rb)
				c.meanVsBest += (v - rb) / float64(len(scenes))
			}
			c.mean /= float64(len(scenes))
			cands = append(cands, c)
		}
	}
	sort.Slice(cands, func(i, j int) bool { return cands[i].meanVsBest > cands[j].meanVsBest })
	fmt.Fprintf(md, "Candidates (eps, iterations), sorted by mean margin against scikit-image RL at its best iteration per scene (dB):\n\n")
	fmt.Fprintf(md, "| eps | iterations | mean vs RL@20 | worst vs RL@20 | mean vs RL best | worst vs RL best |\n|---|---|---|---|---|---|\n")
	for _, c := range cands[:12] {
		fmt.Fprintf(md, "| %.2f | %d | %+.2f | %+.2f | %+.2f | %+.2f |\n", c.eps, c.it, c.mean, c.worstVs20, c.meanVsBest, c.worstVsBest)
	}
}

// sceneTable writes the per-scene table at the defaults and reports whether
// they meet the target on every scene.
func sceneTable(md *strings.Builder, scenes []tunescene.Scene, rl map[string][]float64, curves [][][]float64, interior []bool) bool {
	var dei int
	for i, e := range epss {
		if e == step.DefaultSmooth {
			dei = i
		}
	}
	fmt.Fprintf(md, "\nPer scene at the defaults (eps %.1f, %d iterations, tolerance %g), PSNR in dB over the interior:\n\n", step.DefaultSmooth, step.DefaultIterations, step.DefaultTolerance)
	fmt.Fprintf(md, "| scene | observed | RL@20 | RL best (iter) | limpid default | default - RL@20 | default - RL best | limpid best (eps, iter) |\n|---|---|---|---|---|---|---|---|\n")
	met := true
	for si, s := range scenes {
		rb, rbi := best(rl[s.Name])
		v := curves[si][dei][step.DefaultIterations-1]
		ob := assess.PSNR(s.Ref, s.Obs, interior, 4095)
		lb, le, li := math.Inf(-1), 0.0, 0
		for ei := range epss {
			if b, bi := best(curves[si][ei]); b > lb {
				lb, le, li = b, epss[ei], bi
			}
		}
		fmt.Fprintf(md, "| %s | %.2f | %.2f | %.2f (%d) | %.2f | %+.2f | %+.2f | %.2f (%.1f, %d) |\n",
			s.Name, ob, rl[s.Name][19], rb, rbi, v, v-rl[s.Name][19], v-rb, lb, le, li)
		if v < rl[s.Name][19] || v < rb-0.5 {
			met = false
		}
	}
	return met
}
