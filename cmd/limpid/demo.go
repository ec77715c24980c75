package main

import (
	"fmt"
	"io"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"

	"github.com/urfave/cli/v2"

	"limpid/psf"
	"limpid/raster"
	"limpid/raster/gdal"
	"limpid/step"
	"limpid/step/assess"
	"limpid/step/conv"
	"limpid/step/scene"
)

// The demo scenario: Brannock Vale, an invented farming valley. The
// location, CRS zone and every feature are fictional test content.
const (
	demoPSF       = "gaussian:sigma=1.4"
	demoEPSG      = 32632 // WGS 84 / UTM zone 32N (a real projected CRS; the place is invented)
	demoOriginX   = 438200.0
	demoOriginY   = 5287600.0
	demoPixel     = 10.0
	demoDataMax   = 4095 // 12-bit data in a UInt16 container
	demoGain      = 0.4  // DN per electron
	demoReadNoise = 3.0  // DN
)

func demoCommand(stderr, stdout io.Writer) *cli.Command {
	return &cli.Command{
		Name:  "demo",
		Usage: "make a blurred scene of an invented valley, restore it, and compare with the truth",
		Description: `Writes DIR/reference.tif (the sharp truth), DIR/observed.tif (blurred with ` + demoPSF + `,
Poisson + read noise, UInt16 12-bit, nodata 0), DIR/restored.tif, its noise error map
DIR/noise_error.tif, DIR/quicklook.png and DIR/report.json, then prints PSNR and SSIM of observed
and restored against the reference and the mean noise error per band.

` + caution,
		Flags: []cli.Flag{
			&cli.StringFlag{Name: "out", Value: "limpid-demo", Usage: "output directory (created)"},
			&cli.IntFlag{Name: "size", Value: 768, Usage: "scene width and height in pixels (64-4096)"},
			&cli.IntFlag{Name: "workers", Value: 0, Usage: "parallel tile workers (0 = number of CPUs)"},
			&cli.IntFlag{Name: "particles-per-pixel", Value: step.DefaultPerPixel, Usage: "also restore the photon-limited harbour scene with the grid and the particle method (K particles per pixel) and print them side by side (0 = skip it)"},
		},
		Action: func(c *cli.Context) error {
			n := c.Int("size")
			if n < 64 || n > 4096 {
				return usagef("--size %d must be between 64 and 4096", n)
			}
			if w := c.Int("workers"); w < 0 {
				return usagef("--workers %d must be >= 0", w)
			}
			if k := c.Int("particles-per-pixel"); k < 0 || k > 1024 {
				return usagef("--particles-per-pixel %d must be between 0 and 1024", k)
			}
			return runDemo(c, c.String("out"), n, c.Int("workers"), stdout, stderr)
		},
	}
}

// DemoScene writes the valley's reference and observation as GeoTIFFs.
func DemoScene(dir string, n int) (refPath, obsPath string, err error) {
	ref, valid := scene.ValleyReference(n, n)
	k, err := psf.Parse(demoPSF, psf.Env{})
	if err != nil {
		return "", "", err
	}
	H := conv.New(k)
	rng := rand.New(rand.NewPCG(2026, 12))
	obs := make([][]float32, len(ref))
	for b := range ref {
		obs[b] = scene.Degrade(ref[b], valid, n, n, H, scene.Sensor{Gain: demoGain, Read: demoReadNoise}, rng)
		for i, v := range obs[b] {
			if valid[i] {
				obs[b][i] = float32(math.Min(demoDataMax, math.Max(1, math.Round(float64(v)))))
			} else {
				ref[b][i] = float32(math.NaN())
			}
		}
	}
	wkt, err := gdal.EPSGToWKT(demoEPSG)
	if err != nil {
		return "", "", err
	}
	meta := raster.Meta{Width: n, Height: n, DataType: "UInt16",
		Geo:      raster.Geo{Transform: [6]float64{demoOriginX, demoPixel, 0, demoOriginY, 0, -demoPixel}, HasTransform: true, WKT: wkt},
		Metadata: map[string]string{"SCENE": "Brannock Vale (invented demo scene)", "LIMPID_DEMO_PSF": demoPSF}}
	interp := []string{"Blue", "Green", "Red", "Undefined"}
	for i, name := range scene.ValleyBands {
		meta.Bands = append(meta.Bands, raster.BandInfo{Description: name, ColorInterp: interp[i], NoData: 0, HasNoData: true})
	}
	refMeta := meta
	refMeta.DataType = "Float32"
	refPath = filepath.Join(dir, "reference.tif")
	obsPath = filepath.Join(dir, "observed.tif")
	if err := gdal.WriteFloat32(refPath, refMeta, ref, gdal.WriteOptions{Format: gdal.GTiff, DataType: "Float32", NoData: math.NaN(), HasNoData: true}); err != nil {
		return "", "", err
	}
	if err := gdal.WriteFloat32(obsPath, meta, obs, gdal.WriteOptions{Format: gdal.GTiff, DataType: "UInt16", NoData: 0, HasNoData: true}); err != nil {
		return "", "", err
	}
	return refPath, obsPath, nil
}

func readAll(path string) (raster.Meta, [][]float32, error) {
	r, err := gdal.Open(path)
	if err != nil {
		return raster.Meta{}, nil, err
	}
	defer r.Close()
	m := r.Meta()
	lim, err := raster.LimitsFrom(os.Getenv)
	if err == nil {
		err = lim.CheckWhole("input "+path, fmt.Sprintf("every band (%d)", len(m.Bands)), m.Width, m.Height, len(m.Bands))
	}
	if err != nil {
		return m, nil, err
	}
	bands := make([]int, len(m.Bands))
	planes := make([][]float32, len(m.Bands))
	for i := range bands {
		bands[i] = i
		planes[i] = make([]float32, m.Width*m.Height)
	}
	return m, planes, r.ReadRows(0, m.Height, bands, planes)
}

func runDemo(c *cli.Context, dir string, n, workers int, stdout, stderr io.Writer) error {
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return usagef("--out %s: %v", dir, err)
	}
	refPath, obsPath, err := DemoScene(dir, n)
	if err != nil {
		return err
	}
	k, _ := psf.Parse(demoPSF, psf.Env{})
	// The grid run uses restore's defaults: smoothing and stop chosen per
	// band by the risk estimate.
	cfg := step.Config{PSF: k, PSFSpec: demoPSF, Smooth: step.DefaultSmooth, SmoothAuto: true, Stop: step.StopAuto,
		Iterations: step.AutoCap, Tolerance: step.DefaultTolerance, Tile: step.DefaultTile, Workers: workers, Seed: 1}
	if err := cfg.Resolve(); err != nil {
		return err
	}
	resPath, uncPath := filepath.Join(dir, "restored.tif"), filepath.Join(dir, "noise_error.tif")
	j := &restoreJob{in: obsPath, out: resPath, format: gdal.GTiff, outType: "float32", cfg: cfg,
		reportPath: filepath.Join(dir, "report.json"), uncPath: uncPath}
	fmt.Fprintf(stderr, "limpid demo: Brannock Vale %dx%d, 4 bands, PSF %s, restoring with grid EMS (smoothing and stop chosen per band)\n",
		n, n, demoPSF)
	rep, err := runRestore(c.Context, j, nil, stdout, stderr)
	if err != nil {
		return err
	}
	_, ref, err := readAll(refPath)
	if err != nil {
		return err
	}
	_, obs, err := readAll(obsPath)
	if err != nil {
		return err
	}
	_, res, err := readAll(resPath)
	if err != nil {
		return err
	}
	part, err := demoParticle(c, dir, n, workers, c.Int("particles-per-pixel"), stdout, stderr)
	if err != nil {
		return err
	}
	valid := make([]bool, n*n)
	for i := range valid {
		valid[i] = !math.IsNaN(float64(ref[0][i]))
	}
	fmt.Fprintf(stdout, "Brannock Vale demo (invented scene), PSF %s, grid EMS with the automatic choice, %.1f s\n",
		demoPSF, rep.WallSeconds)
	for i, b := range rep.Bands {
		if b.Choice != nil && b.Noise != nil {
			fmt.Fprintf(stdout, "  %-5s noise var = %.3f DN + %.1f; chosen smooth %g, %d iterations; mean noise error %.2f DN\n",
				scene.ValleyBands[i], b.Noise.A, b.Noise.B, b.Choice.Smooth, b.Choice.Iterations, b.NoiseSE)
		}
	}
	fmt.Fprintf(stdout, "%-6s %14s %14s %13s %13s\n", "band", "PSNR observed", "PSNR restored", "SSIM observed", "SSIM restored")
	for b, name := range scene.ValleyBands {
		fmt.Fprintf(stdout, "%-6s %11.2f dB %11.2f dB %13.4f %13.4f\n", name,
			assess.PSNR(ref[b], obs[b], valid, demoDataMax), assess.PSNR(ref[b], res[b], valid, demoDataMax),
			assess.SSIM(ref[b], obs[b], valid, n, n, demoDataMax), assess.SSIM(ref[b], res[b], valid, n, n, demoDataMax))
	}
	if part != nil {
		part.printSideBySide(stdout)
	}
	ql := filepath.Join(dir, "quicklook.png")
	if err := quicklook(ql, obsPath, resPath, uncPath, len(obs)); err != nil {
		return err
	}
	fmt.Fprintf(stdout, "wrote %s, %s, %s, %s, %s (restored product: keep the observed original)\n", refPath, obsPath, resPath, uncPath, ql)
	return nil
}

// quicklook writes the demo's observed | restored | noise error quicklook
// (quicklook.go: the same code as restore --quicklook).
func quicklook(path, obsPath, resPath, uncPath string, nBands int) error {
	bands := make([]int, nBands)
	for i := range bands {
		bands[i] = i
	}
	s, err := cropScene(obsPath, bands, resPath, uncPath, qlInfo{Scene: "demo: " + filepath.Base(obsPath), PSF: "PSF " + demoPSF, Method: "EMS grid", Error: errorTitle("grid")})
	if err != nil {
		return err
	}
	b, err := encodePNG(s.render())
	if err != nil {
		return err
	}
	return writeFileAtomic("quicklook", path, b)
}
