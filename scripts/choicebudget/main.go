package main

import (
	"flag"
	"fmt"
	"log"
	"os"
	"strings"
	"time"

	"limpid/psf"
	"limpid/scripts/internal/tunescene"
	"limpid/step"
	"limpid/step/assess"
)

const margin = 16

func main() {
	n := flag.Int("n", 1024, "scene side, pixels")
	tile := flag.Int("tile", 256, "tile side, pixels")
	budget := flag.Int("budget", 16*128*128, "pixel budget per band of the budgeted run")
	only := flag.String("scenes", "", "measure only the scenes whose name contains this")
	out := flag.String("out", "", "also write the markdown table to this file")
	flag.Parse()
	log.SetFlags(0)
	scenes, err := tunescene.Scenes(*n)
	if err != nil {
		log.Fatal(err)
	}
	interior := tunescene.Interior(*n, margin)
	var md strings.Builder
	fmt.Fprintf(&md, "| scene | whole tiles dB (eps, k) | budget dB (eps, k) | loss dB | time budget / whole |\n|---|---|---|---|---|\n")
	var losses, ratios []float64
	for _, s := range scenes {
		if !strings.Contains(s.Name, *only) {
			continue
		}
		k, err := psf.GaussianIso(s.Sigma)
		if err != nil {
			log.Fatal(err)
		}
		cfg := step.Config{PSF: k, Workers: 1, Tile: *tile, SmoothAuto: true, Stop: step.StopAuto, Iterations: step.AutoCap, IterationLimit: step.AutoHardCap}
		var psnr [2]float64
		var ch [2]step.Choice
		var wall [2]time.Duration
		for i, b := range []int{-1, *budget} {
			cfg.ChoiceBudget = b
			f, rep, d, err := tunescene.Restore(s.Obs, *n, cfg)
			if err != nil {
				log.Fatal(err)
			}
			psnr[i], ch[i], wall[i] = assess.PSNR(s.Ref, f, interior, 4095), *rep.Bands[0].Choice, d
		}
		loss, ratio := psnr[0]-psnr[1], wall[1].Seconds()/wall[0].Seconds()
		losses, ratios = append(losses, loss), append(ratios, ratio)
		fmt.Fprintf(&md, "| %s | %.2f (%.1f, %d) | %.2f (%.1f, %d) | %.3f | %.2f |\n", s.Name,
			psnr[0], ch[0].Smooth, ch[0].Iterations, psnr[1], ch[1].Smooth, ch[1].Iterations, loss, ratio)
		log.Printf("%s: loss %.3f dB, time ratio %.2f", s.Name, loss, ratio)
	}
	if len(losses) > 0 {
		ml, wl, mr, wr := meanWorst(losses, ratios)
		fmt.Fprintf(&md, "\nLoss of the budgeted choice against whole tiles (dB), mean / worst over %d scenes: %.3f / %.3f. Time ratio mean / worst: %.2f / %.2f.\n", len(losses), ml, wl, mr, wr)
	}
	fmt.Print(md.String())
	if *out != "" {
		if err := os.WriteFile(*out, []byte(md.String()), 0o644); err != nil {
			log.Fatal(err)
		}
	}
}

// meanWorst returns the mean and largest of the losses and of the ratios.
func meanWorst(losses, ratios []float64) (ml, wl, mr, wr float64) {
	wl, wr = losses[0], ratios[0]
	for i := range losses {
		ml += losses[i]
		mr += ratios[i]
		wl, wr = max(wl, losses[i]), max(wr, ratios[i])
	}
	return ml / float64(len(losses)), wl, mr / float64(len(ratios)), wr
}
