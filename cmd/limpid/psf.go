package main

import (
	"errors"
	"fmt"
	"io"
	"math"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"text/tabwriter"

	"github.com/urfave/cli/v2"

	"limpid/psf"
	"limpid/raster"
	"limpid/raster/gdal"
)

// psfCommand groups the PSF toolkit: build kernels from sensor models and
// measure the PSF from a scene.
func psfCommand(stdin io.Reader, stdout, stderr io.Writer) *cli.Command {
	return &cli.Command{
		Name:  "psf",
		Usage: "PSF toolkit: build kernel files from sensor models, measure the PSF from edges and point targets",
		Subcommands: []*cli.Command{
			psfBuildCommand(stderr),
			psfMeasureCommand(stdin, stdout, stderr),
		},
	}
}

func psfBuildCommand(stderr io.Writer) *cli.Command {
	return &cli.Command{
		Name:      "build",
		Usage:     "write the kernel of a --psf specification and its MTF curve",
		ArgsUsage: "SPEC OUTPUT",
		Description: `Writes the kernel SPEC names to OUTPUT: a one-band Float32 GeoTIFF when OUTPUT
ends in .tif or .tiff, otherwise a text matrix (one row per line; read back with
--psf kernel:OUTPUT). Next to it, OUTPUT without its extension + "_mtf.csv" holds
the MTF curve along x (columns) and y (rows) from 0 to 0.5 cycles/pixel:
kernel_* is the kernel's own transfer function, model_* the product of the
spec's parts (empty for kernel: and measured:), system_* the kernel times the
pixel aperture |sinc f| (what an edge measurement of this system reports).

` + psfHelp() + `

Examples:
   limpid psf build 'diffraction:wavelength=0.65,fnumber=8,pitch=10*motion:length=0.8,angle=90' psf.txt
   limpid psf build gaussian-mtf:across=0.12,along=0.09 psf.tif`,
		Action: func(c *cli.Context) error {
			return psfBuild(c.Args().Get(0), c.Args().Get(1), stderr)
		},
	}
}

func psfBuild(spec, out string, stderr io.Writer) error {
	if out == "-" {
		return usagef("OUTPUT -: psf build writes two files; give a path")
	}
	if err := checkPaths("-", out); err != nil {
		return err
	}
	csvOut := strings.TrimSuffix(out, filepath.Ext(out)) + "_mtf.csv"
	if err := checkOutputs(nil, stderr, psfInputs(spec), []namedPath{{"OUTPUT", out}, {"OUTPUT's curves", csvOut}}); err != nil {
		return err
	}
	k, err := psf.Parse(spec, psfEnv())
	if err != nil {
		return usageError{fmt.Errorf("SPEC %w", err)}
	}
	var model *psf.System
	if sys, err := psf.ParseTransfer(spec); err == nil {
		model = &sys
	}
	csvPath := strings.TrimSuffix(out, filepath.Ext(out)) + "_mtf.csv"
	if err := writeKernel(out, k, spec); err != nil {
		return err
	}
	if err := writeAtomic("OUTPUT", csvPath, func(w io.Writer) error { return writeMTFCSV(w, k, model) }); err != nil {
		os.Remove(out)
		return err
	}
	vx, vy := k.Variance()
	fmt.Fprintf(stderr, "limpid: wrote %s (%dx%d kernel, variance x %.4g y %.4g px^2, MTF at Nyquist x %.4f y %.4f) and %s\n",
		out, k.W, k.H, vx, vy, math.Abs(psf.KernelTransfer(k, 0.5, 0)), math.Abs(psf.KernelTransfer(k, 0, 0.5)), csvPath)
	return nil
}

func psfEnv() psf.Env { return psf.Env{LoadRaster: gdal.LoadKernel} }

// writeKernel writes a kernel as a Float32 GeoTIFF (.tif, .tiff) or a text
// matrix, through a temporary name.
func writeKernel(path string, k *psf.Kernel, spec string) error {
	switch strings.ToLower(filepath.Ext(path)) {
	case ".tif", ".tiff":
		plane := make([]float32, len(k.Data))
		for i, v := range k.Data {
			plane[i] = float32(v)
		}
		meta := raster.Meta{Width: k.W, Height: k.H, DataType: "Float32",
			Bands:    []raster.BandInfo{{Description: "PSF weights", ColorInterp: "Gray"}},
			Metadata: map[string]string{"LIMPID_PSF": spec, "LIMPID_PSF_CONVENTION": "pixel aperture not included; weights sum to 1"}}
		return gdal.WriteFloat32(path, meta, [][]float32{plane}, gdal.WriteOptions{Format: gdal.GTiff, DataType: "Float32"})
	}
	return writeAtomic("OUTPUT", path, func(w io.Writer) error {
		fmt.Fprintf(w, "# limpid PSF kernel %dx%d, weights sum to 1, pixel aperture not included\n# spec: %s\n", k.W, k.H, strings.ReplaceAll(spec, "\n", " "))
		for j := 0; j < k.H; j++ {
			for i := 0; i < k.W; i++ {
				if i > 0 {
					io.WriteString(w, " ")
				}
				fmt.Fprintf(w, "%.9g", k.Data[j*k.W+i])
			}
			io.WriteString(w, "\n")
		}
		return nil
	})
}

// mtfSamples is the number of frequencies of the CSV curves (0 to Nyquist).
const mtfSamples = 65

func writeMTFCSV(w io.Writer, k *psf.Kernel, model *psf.System) error {
	fmt.Fprintln(w, "frequency_cycles_per_pixel,kernel_x,kernel_y,model_x,model_y,system_x,system_y")
	for i := 0; i < mtfSamples; i++ {
		f := 0.5 * float64(i) / float64(mtfSamples-1)
		kx, ky := math.Abs(psf.KernelTransfer(k, f, 0)), math.Abs(psf.KernelTransfer(k, 0, f))
		mx, my := "", ""
		if model != nil {
			mx = fmt.Sprintf("%.6f", math.Abs(model.At(f, 0)))
			my = fmt.Sprintf("%.6f", math.Abs(model.At(0, f)))
		}
		ap := math.Abs(psf.Sinc(f))
		fmt.Fprintf(w, "%.6f,%.6f,%.6f,%s,%s,%.6f,%.6f\n", f, kx, ky, mx, my, kx*ap, ky*ap)
	}
	return nil
}

func psfMeasureCommand(stdin io.Reader, stdout, stderr io.Writer) *cli.Command {
	return &cli.Command{
		Name:      "measure",
		Usage:     "measure the PSF from slanted edges (ISO 12233 e-SFR) and point targets in the scene (flags come before INPUT)",
		ArgsUsage: "INPUT",
		Description: `Windows are in pixels of INPUT (0-based column, row; X1, Y1 exclusive).

--edge X0,Y0,X1,Y1 (repeatable) holds one straight edge between two uniform
regions, 2-10 degrees off the pixel axes, crossing the middle of the window;
the outer two thirds across the edge must be flat. Each edge gives the system
e-SFR as ISO 12233 defines it (pixel aperture included: mtf_nyquist, mtf50,
fwhm; mtf_nyquist with the noise floor mtf_nyquist_floor removed) and the
restoration sigma with the aperture removed (sigma: the fit of
exp(-2 pi^2 s^2 f^2)|sinc f| to the e-SFR, run through the same binning,
derivative and window as the measurement). Near-vertical edges give sigma_x,
near-horizontal ones sigma_y.

--point X,Y fits a pixel-integrated 2-D Gaussian plus background to a
point-like target in the --point-window square centred there.

--auto searches the band for straight high-contrast edges 2-10 degrees off
the axes with uniform sides and measures each (see the README for the rule).
Without --band it measures every band: the table per band on stdout, and
--json lists them under "bands" (band, sigma, sigma_x, sigma_y, mtf_nyquist,
mtf50, fwhm, edges; null sigmas for a band without usable edges), the
top-level keys staying those of the first band measured.

Several edges of one orientation combine by their median; edges whose sigma
is more than 3 x 1.4826 x MAD (and 10 %) from the median are rejected as
outliers. sigma is the geometric mean of sigma_x and sigma_y when both are
measured.

The summary table goes to stdout; --json writes it in full (read it back with
--psf measured:FILE), --csv PREFIX writes PREFIX_edgeN_esf.csv (ESF and LSF)
and PREFIX_edgeN_mtf.csv (e-SFR and the fitted model), --kernel FILE a kernel
file (text, or GeoTIFF by extension) usable as --psf kernel:FILE, --png FILE a
plot of the e-SFR curves with their fitted models and of the ESF/LSF.

Examples:
   limpid psf measure --edge 168,30,200,82 --json psf.json scene.tif
   limpid restore --psf measured:psf.json scene.tif restored.tif`,
		Flags: []cli.Flag{
			&cli.StringSliceFlag{Name: "edge", Usage: "edge window X0,Y0,X1,Y1 in pixels (repeatable)"},
			&cli.StringFlag{Name: "point", Usage: "point target centre X,Y in pixels"},
			&cli.IntFlag{Name: "point-window", Value: 21, Usage: "side of the point target's window in pixels (odd, 7-101)"},
			&cli.BoolFlag{Name: "auto", Usage: "search the band for usable edges; without --band every band (--json then lists them under \"bands\"; the top-level keys, --kernel, --csv and --png are the first measured band's)"},
			&cli.IntFlag{Name: "band", Value: 1, Usage: "1-based band to measure", DefaultText: "1; every band with --auto"},
			&cli.StringFlag{Name: "json", Usage: "write the summary to this JSON file"},
			&cli.StringFlag{Name: "csv", Usage: "write ESF/LSF and MTF curves to PREFIX_edgeN_*.csv"},
			&cli.StringFlag{Name: "kernel", Usage: "write the measured Gaussian kernel to this file (.tif/.tiff: GeoTIFF, else text)"},
			&cli.StringFlag{Name: "png", Usage: "plot the edges' e-SFR with the fitted model, and their ESF/LSF, to this PNG file"},
		},
		Action: func(c *cli.Context) error { return psfMeasure(c, stdin, stdout, stderr) },
	}
}

// edgeSummary is one measured edge in the JSON summary.
type edgeSummary struct {
	Window      [4]int   `json:"window"`
	Source      string   `json:"source"`
	Orientation string   `json:"orientation"`
	Axis        string   `json:"axis"`
	AngleDeg    float64  `json:"edge_angle_deg"`
	Sigma       float64  `json:"sigma"`
	SigmaLSF    float64  `json:"sigma_lsf"`
	FitRMS      float64  `json:"fit_rms"`
	FitMaxFreq  float64  `json:"fit_max_frequency"`
	MTFNyquist  float64  `json:"mtf_nyquist"`
	NyqFloor    float64  `json:"mtf_nyquist_floor"`
	NyqRaw      float64  `json:"mtf_nyquist_raw"`
	MTF50       *float64 `json:"mtf50"`
	FWHM        float64  `json:"fwhm"`
	RowsUsed    int      `json:"rows_used"`
	Contrast    float64  `json:"contrast"`
	SNR         float64  `json:"snr"`
	Used        bool     `json:"used"`
	Rejected    string   `json:"rejected,omitempty"`
	Warnings    []string `json:"warnings,omitempty"`
	res         *psf.EdgeResult
	centreX     float64
	centreY     float64
	description string
}

type pointSummary struct {
	X float64 `json:"x"`
	Y float64 `json:"y"`
	*psf.PointResult
}

type measureSummary struct {
	Input        string        `json:"input"`
	Band         int           `json:"band"`
	Convention   string        `json:"convention"`
	Sigma        *float64      `json:"sigma"`
	SigmaX       *float64      `json:"sigma_x"`
	SigmaY       *float64      `json:"sigma_y"`
	SigmaFrom    string        `json:"sigma_from"`
	MTFNyquist   *float64      `json:"mtf_nyquist"`
	NyqFloor     *float64      `json:"mtf_nyquist_floor"`
	MTF50        *float64      `json:"mtf50"`
	FWHM         *float64      `json:"fwhm"`
	EdgeAngleDeg *float64      `json:"edge_angle_deg"`
	CombineRule  string        `json:"combine_rule"`
	Edges        []edgeSummary `json:"edges"`
	Point        *pointSummary `json:"point,omitempty"`
	Spec         string        `json:"psf_spec"`
	// Bands: --auto without --band measures every band (the top-level
	// keys are the first band's).
	Bands []bandSummary `json:"bands,omitempty"`
}

// bandSummary is one band's measurement in psf measure --auto's "bands".
type bandSummary struct {
	Band       int           `json:"band"`
	Sigma      *float64      `json:"sigma"`
	SigmaX     *float64      `json:"sigma_x"`
	SigmaY     *float64      `json:"sigma_y"`
	MTFNyquist *float64      `json:"mtf_nyquist"`
	MTF50      *float64      `json:"mtf50"`
	FWHM       *float64      `json:"fwhm"`
	Edges      []edgeSummary `json:"edges"`
	Spec       string        `json:"psf_spec"`
	sigmaFrom  string
}

func parseInts(flag, s string, n int) ([]int, error) {
	f := strings.Split(s, ",")
	if len(f) != n {
		return nil, usagef("%s %q: give %d comma-separated whole numbers", flag, s, n)
	}
	out := make([]int, n)
	for i, v := range f {
		x, err := strconv.Atoi(strings.TrimSpace(v))
		if err != nil {
			return nil, usagef("%s %q: %q is not a whole number of pixels", flag, s, v)
		}
		out[i] = x
	}
	return out, nil
}

// readWindow reads a window of one band as float32 with nodata as NaN.
func readWindow(src raster.Reader, band, x0, y0, x1, y1 int) ([]float32, error) {
	m := src.Meta()
	rows := make([]float32, (y1-y0)*m.Width)
	if err := src.ReadRows(y0, y1, []int{band}, [][]float32{rows}); err != nil {
		return nil, err
	}
	bi := m.Bands[band]
	out := make([]float32, 0, (x1-x0)*(y1-y0))
	for y := 0; y < y1-y0; y++ {
		for x := x0; x < x1; x++ {
			v := rows[y*m.Width+x]
			if bi.HasNoData && float64(v) == bi.NoData {
				v = float32(math.NaN())
			}
			out = append(out, v)
		}
	}
	return out, nil
}

// measureArgs are psf measure's checked arguments.
type measureArgs struct {
	in                        string
	windows                   [][4]int
	point                     []int
	pointWindow               int
	auto                      bool
	band                      int
	allBands                  bool // --auto without --band: every band
	json, csv, kernel, pngOut string
}

func psfMeasure(c *cli.Context, stdin io.Reader, stdout, stderr io.Writer) error {
	args, err := parseMeasureArgs(c)
	if err != nil {
		return err
	}
	outs := []namedPath{{"--json", args.json}, {"--kernel", args.kernel}, {"--png", args.pngOut}}
	if err := checkOutputs(stdout, stderr, []namedPath{{"INPUT", args.in}}, outs); err != nil {
		return err
	}
	path, done, err := spoolInput(args.in, stdin)
	if err != nil {
		return err
	}
	defer done()
	src, err := gdal.Open(path)
	if err != nil {
		return err
	}
	defer src.Close()
	sum, err := measureBands(src, args)
	if err != nil {
		return err
	}
	if len(sum.Bands) > 1 {
		for _, b := range sum.Bands {
			fmt.Fprintf(stdout, "band %d:\n", b.Band)
			bs := measureSummary{Sigma: b.Sigma, SigmaX: b.SigmaX, SigmaY: b.SigmaY, MTFNyquist: b.MTFNyquist, MTF50: b.MTF50, Edges: b.Edges, Spec: b.Spec, SigmaFrom: b.sigmaFrom}
			if b.Sigma == nil {
				bs.SigmaFrom = "no usable edge"
			}
			printSummary(stdout, &bs)
		}
	} else {
		printSummary(stdout, &sum)
	}
	bands := []bandSummary{{Edges: sum.Edges}}
	if len(sum.Bands) > 1 {
		bands = sum.Bands
	}
	for _, b := range bands {
		where := ""
		if b.Band > 0 {
			where = fmt.Sprintf("band %d ", b.Band)
		}
		for _, e := range b.Edges {
			for _, w := range e.Warnings {
				fmt.Fprintf(stderr, "limpid: warning: %sedge %v: %s\n", where, e.Window, w)
			}
		}
	}
	if sum.Point != nil {
		for _, w := range sum.Point.Warnings {
			fmt.Fprintf(stderr, "limpid: warning: point: %s\n", w)
		}
	}
	return writeMeasureOutputs(args, &sum)
}

// parseMeasureArgs reads and checks psf measure's flags and INPUT (before
// INPUT is opened).
func parseMeasureArgs(c *cli.Context) (measureArgs, error) {
	var a measureArgs
	a.in = c.Args().Get(0)
	a.auto, a.band, a.pointWindow = c.Bool("auto"), c.Int("band"), c.Int("point-window")
	a.allBands = a.auto && !c.IsSet("band")
	a.json, a.csv, a.kernel, a.pngOut = c.String("json"), c.String("csv"), c.String("kernel"), c.String("png")
	if len(c.StringSlice("edge")) == 0 && c.String("point") == "" && !a.auto {
		return a, usagef("psf measure needs --edge X0,Y0,X1,Y1, --point X,Y or --auto")
	}
	for _, e := range c.StringSlice("edge") {
		v, err := parseInts("--edge", e, 4)
		if err != nil {
			return a, err
		}
		if v[2] <= v[0] || v[3] <= v[1] {
			return a, usagef("--edge %q: X1 and Y1 must be larger than X0 and Y0 (the window is X0,Y0,X1,Y1, X1 and Y1 exclusive)", e)
		}
		a.windows = append(a.windows, [4]int{v[0], v[1], v[2], v[3]})
	}
	if p := c.String("point"); p != "" {
		v, err := parseInts("--point", p, 2)
		if err != nil {
			return a, err
		}
		a.point = v
	}
	if pw := a.pointWindow; pw < 7 || pw > 101 || pw%2 == 0 {
		return a, usagef("--point-window %d must be odd, 7 to 101", pw)
	}
	for _, o := range []struct{ flag, path string }{{"--json", a.json}, {"--kernel", a.kernel}, {"--png", a.pngOut}} {
		if o.path != "" {
			if err := checkPaths(a.in, o.path); err != nil {
				return a, usagef("%s: %v", o.flag, err)
			}
		}
	}
	if p := a.csv; p != "" {
		if st, err := os.Stat(filepath.Dir(p + "_x")); err != nil || !st.IsDir() {
			return a, usagef("--csv %s: directory %s does not exist", p, filepath.Dir(p+"_x"))
		}
	}
	return a, nil
}

// measureBands is measureScene of --band, or with --auto and no --band of
// every band: then Bands lists them and the top level is the first band
// with a usable measurement (a band without usable edges is listed with
// null sigmas).
func measureBands(src raster.Reader, args measureArgs) (measureSummary, error) {
	if !args.allBands {
		return measureScene(src, args)
	}
	var top *measureSummary
	var bands []bandSummary
	for b := 1; b <= len(src.Meta().Bands); b++ {
		a := args
		a.band = b
		sum, err := measureScene(src, a)
		var u usageError
		if errors.As(err, &u) && strings.Contains(err.Error(), "no usable") && len(src.Meta().Bands) > 1 {
			bands = append(bands, bandSummary{Band: b, Edges: []edgeSummary{}})
			continue
		} else if err != nil {
			return measureSummary{}, err
		}
		bands = append(bands, bandSummary{Band: b, Sigma: sum.Sigma, SigmaX: sum.SigmaX, SigmaY: sum.SigmaY,
			MTFNyquist: sum.MTFNyquist, MTF50: sum.MTF50, FWHM: sum.FWHM, Edges: sum.Edges, Spec: sum.Spec, sigmaFrom: sum.SigmaFrom})
		if top == nil {
			top = &sum
		}
	}
	if top == nil {
		return measureSummary{}, usagef("--auto: no usable edge in any band of %s (straight, high-contrast, 2-10 degrees off the axes, uniform sides); give --edge or --point windows", args.in)
	}
	top.Bands = bands
	return *top, nil
}

// measureScene measures the --edge windows, the --auto edges and the
// --point target of one band of src and combines them (psf.Combine).
func measureScene(src raster.Reader, args measureArgs) (measureSummary, error) {
	meta := src.Meta()
	if args.band < 1 || args.band > len(meta.Bands) {
		return measureSummary{}, usagef("--band %d does not exist (INPUT has %d bands)", args.band, len(meta.Bands))
	}
	b := args.band - 1
	edges, err := measureWindows(src, b, args.windows)
	if err != nil {
		return measureSummary{}, err
	}
	if args.auto {
		found, err := autoEdges(src, args.in, b)
		if err != nil {
			return measureSummary{}, err
		}
		if len(found.Edges) == 0 && len(args.windows) == 0 && args.point == nil {
			return measureSummary{}, usagef("--auto: no usable edge in band %d of %s (straight, high-contrast, 2-10 degrees off the axes, uniform sides); give --edge or --point windows", args.band, args.in)
		}
		for _, e := range found.Edges {
			w := e.Window
			edges = append(edges, summarizeEdge(e.Result, [4]int{w.X0, w.Y0, w.X1, w.Y1}, "--auto"))
		}
	}
	sum := measureSummary{Input: args.in, Band: args.band, Edges: edges,
		Convention:  "mtf_nyquist, mtf50 and fwhm are the system e-SFR/LSF (ISO 12233, pixel aperture included; mtf_nyquist with the noise floor mtf_nyquist_floor removed); sigma, sigma_x and sigma_y are restoration sigmas in pixels (pixel aperture removed), for --psf gaussian:sx=SIGMA_X,sy=SIGMA_Y",
		CombineRule: psf.CombineRule}
	if args.point != nil {
		p, err := measurePointTarget(src, b, args.point, args.pointWindow)
		if err != nil {
			return measureSummary{}, err
		}
		sum.Point = p
	}
	combine(&sum)
	if sum.Sigma == nil {
		return measureSummary{}, usagef("psf measure: no usable measurement (every edge was rejected)")
	}
	sum.Spec, _ = psf.Measured{Sigma: sum.Sigma, SigmaX: sum.SigmaX, SigmaY: sum.SigmaY}.Spec()
	return sum, nil
}

// measureWindows measures the --edge windows of band b (0-based).
func measureWindows(src raster.Reader, b int, windows [][4]int) ([]edgeSummary, error) {
	meta := src.Meta()
	var edges []edgeSummary
	for i, wnd := range windows {
		if wnd[0] < 0 || wnd[1] < 0 || wnd[2] > meta.Width || wnd[3] > meta.Height {
			return nil, usagef("--edge %d,%d,%d,%d: the window is outside the raster (%dx%d pixels)", wnd[0], wnd[1], wnd[2], wnd[3], meta.Width, meta.Height)
		}
		win, err := readWindow(src, b, wnd[0], wnd[1], wnd[2], wnd[3])
		if err != nil {
			return nil, fmt.Errorf("--edge %d,%d,%d,%d: %w", wnd[0], wnd[1], wnd[2], wnd[3], err)
		}
		r, err := psf.MeasureEdge(win, wnd[2]-wnd[0], wnd[3]-wnd[1])
		if err != nil {
			return nil, usagef("--edge %d,%d,%d,%d (edge %d): %v", wnd[0], wnd[1], wnd[2], wnd[3], i+1, strings.TrimPrefix(err.Error(), "psf: cannot measure: "))
		}
		edges = append(edges, summarizeEdge(r, wnd, "--edge"))
	}
	return edges, nil
}

// measurePointTarget fits the --point target of band b (0-based) in the
// pw x pw window centred on point.
func measurePointTarget(src raster.Reader, b int, point []int, pw int) (*pointSummary, error) {
	meta := src.Meta()
	h := pw / 2
	x0, y0 := point[0]-h, point[1]-h
	if x0 < 0 || y0 < 0 || x0+pw > meta.Width || y0+pw > meta.Height {
		return nil, usagef("--point %d,%d: the %dx%d window around it is outside the raster (%dx%d pixels)", point[0], point[1], pw, pw, meta.Width, meta.Height)
	}
	win, err := readWindow(src, b, x0, y0, x0+pw, y0+pw)
	if err != nil {
		return nil, fmt.Errorf("--point %d,%d: %w", point[0], point[1], err)
	}
	r, err := psf.MeasurePoint(win, pw, pw)
	if err != nil {
		return nil, usagef("--point %d,%d: %v", point[0], point[1], strings.TrimPrefix(err.Error(), "psf: cannot measure: "))
	}
	return &pointSummary{X: float64(x0) + r.X, Y: float64(y0) + r.Y, PointResult: r}, nil
}

// writeMeasureOutputs writes the --csv, --kernel, --png and --json files;
// on an error it removes those already written.
func writeMeasureOutputs(args measureArgs, sum *measureSummary) error {
	var written []string
	cleanup := func() {
		for _, p := range written {
			os.Remove(p)
		}
	}
	if p := args.csv; p != "" {
		for i, e := range sum.Edges {
			esfPath := fmt.Sprintf("%s_edge%d_esf.csv", p, i+1)
			mtfPath := fmt.Sprintf("%s_edge%d_mtf.csv", p, i+1)
			if err := writeAtomic("--csv", esfPath, func(w io.Writer) error { return writeESFCSV(w, e.res) }); err != nil {
				cleanup()
				return err
			}
			written = append(written, esfPath)
			if err := writeAtomic("--csv", mtfPath, func(w io.Writer) error { return writeEdgeMTFCSV(w, e.res, e.Sigma) }); err != nil {
				cleanup()
				return err
			}
			written = append(written, mtfPath)
		}
	}
	if p := args.kernel; p != "" {
		k, err := psf.Parse(sum.Spec, psf.Env{})
		if err != nil {
			cleanup()
			return usagef("--kernel: the measured PSF gives no kernel: %v", err)
		}
		if err := writeKernel(p, k, sum.Spec+" (measured from "+args.in+")"); err != nil {
			cleanup()
			return err
		}
		written = append(written, p)
	}
	if p := args.pngOut; p != "" {
		if len(sum.Edges) == 0 {
			cleanup()
			return usagef("--png %s: plots edge measurements; no edge was measured", p)
		}
		if err := writeAtomic("--png", p, func(w io.Writer) error { return writePlot(w, sum.Edges) }); err != nil {
			cleanup()
			return err
		}
		written = append(written, p)
	}
	if p := args.json; p != "" {
		if err := writeJSON("--json", p, *sum); err != nil {
			cleanup()
			return err
		}
	}
	return nil
}

func summarizeEdge(r *psf.EdgeResult, wnd [4]int, source string) edgeSummary {
	e := edgeSummary{Window: wnd, Source: source, AngleDeg: r.AngleDeg, Sigma: r.Sigma, SigmaLSF: r.SigmaLSF, FitRMS: r.FitRMS,
		FitMaxFreq: r.FitMax, MTFNyquist: r.MTFNyquist, NyqFloor: r.MTFNyquistFloor, NyqRaw: r.MTFNyquistRaw, FWHM: r.FWHM, RowsUsed: r.Rows, Contrast: math.Abs(r.High - r.Low),
		SNR: r.SNR, Used: true, Warnings: r.Warnings, res: r}
	if !math.IsNaN(r.MTF50) {
		v := r.MTF50
		e.MTF50 = &v
	}
	e.Orientation, e.Axis = "near-vertical", "x"
	if !r.Vertical {
		e.Orientation, e.Axis = "near-horizontal", "y"
	}
	e.centreX, e.centreY = float64(wnd[0]+wnd[2])/2, float64(wnd[1]+wnd[3])/2
	return e
}

// combine applies psf.Combine (psf.CombineRule) to the summary's edges and
// point and fills its headline values.
func combine(s *measureSummary) {
	results := make([]*psf.EdgeResult, len(s.Edges))
	for i, e := range s.Edges {
		results[i] = e.res
	}
	var point *psf.PointResult
	if s.Point != nil {
		point = s.Point.PointResult
	}
	est := psf.Combine(results, point)
	for i := range s.Edges {
		s.Edges[i].Used, s.Edges[i].Rejected = est.Used[i], est.Rejected[i]
	}
	s.Sigma, s.SigmaX, s.SigmaY, s.SigmaFrom = est.Sigma, est.SigmaX, est.SigmaY, est.SigmaFrom
	s.MTFNyquist, s.MTF50, s.FWHM, s.EdgeAngleDeg = est.MTFNyquist, est.MTF50, est.FWHM, est.EdgeAngleDeg
	s.NyqFloor = est.MTFNyquistFloor
}

func fmtPtr(v *float64, format string) string {
	if v == nil {
		return "-"
	}
	return fmt.Sprintf(format, *v)
}

func printSummary(w io.Writer, s *measureSummary) {
	tw := tabwriter.NewWriter(w, 0, 0, 2, ' ', tabwriter.AlignRight)
	fmt.Fprintln(tw, "edge\twindow\taxis\tangle deg\tsigma px\tfit rms\te-SFR Nyquist\tMTF50 c/px\tFWHM px\tlines\tSNR\tused\t")
	for i, e := range s.Edges {
		used := "yes"
		if !e.Used {
			used = "no (outlier)"
		}
		fmt.Fprintf(tw, "%d\t%d,%d,%d,%d\t%s\t%.2f\t%.3f\t%.4f\t%.3f\t%s\t%.2f\t%d\t%.3g\t%s\t\n", i+1, e.Window[0], e.Window[1], e.Window[2], e.Window[3],
			e.Axis, e.AngleDeg, e.Sigma, e.FitRMS, e.MTFNyquist, fmtPtr(e.MTF50, "%.3f"), e.FWHM, e.RowsUsed, e.SNR, used)
	}
	tw.Flush()
	if s.Point != nil {
		fmt.Fprintf(w, "point at %.2f,%.2f: sigma_x %.3f sigma_y %.3f px, fit rms %.3g (noise %.3g)\n", s.Point.X, s.Point.Y, s.Point.SigmaX, s.Point.SigmaY, s.Point.RMS, s.Point.Noise)
	}
	fmt.Fprintf(w, "sigma %s px (sigma_x %s, sigma_y %s; %s); e-SFR at Nyquist %s, MTF50 %s cycles/pixel; --psf %s\n",
		fmtPtr(s.Sigma, "%.3f"), fmtPtr(s.SigmaX, "%.3f"), fmtPtr(s.SigmaY, "%.3f"), s.SigmaFrom, fmtPtr(s.MTFNyquist, "%.3f"), fmtPtr(s.MTF50, "%.3f"), s.Spec)
}

func writeESFCSV(w io.Writer, r *psf.EdgeResult) error {
	fmt.Fprintln(w, "distance_px,esf,lsf")
	c := float64(len(r.ESF)) / 2
	for i := range r.ESF {
		fmt.Fprintf(w, "%.4f,%.6g,%.6g\n", (float64(i)-c)*r.ESFStep, r.ESF[i], r.LSF[i])
	}
	return nil
}

func writeEdgeMTFCSV(w io.Writer, r *psf.EdgeResult, sigma float64) error {
	fmt.Fprintln(w, "frequency_cycles_per_pixel,esfr,fitted_model_exp(-2pi^2s^2f^2)sinc(f)")
	for k, f := range r.Freq {
		if f > 1 {
			break
		}
		fmt.Fprintf(w, "%.6f,%.6f,%.6f\n", f, r.MTF[k], psf.MTFGaussian(f, sigma)*math.Abs(psf.Sinc(f)))
	}
	return nil
}

// autoEdges is the --auto search: psf.MeasureAuto on the whole band
// (nodata as NaN). No usable edge is not an error here: the result then
// holds no edge.
func autoEdges(src raster.Reader, name string, band int) (psf.AutoResult, error) {
	m := src.Meta()
	lim, err := raster.LimitsFrom(os.Getenv)
	if err == nil {
		err = lim.CheckWhole("input "+name, fmt.Sprintf("band %d (the --auto edge search)", band+1), m.Width, m.Height, 1)
	}
	if err != nil {
		return psf.AutoResult{}, err
	}
	plane, err := readWindow(src, band, 0, 0, m.Width, m.Height)
	if err != nil {
		return psf.AutoResult{}, err
	}
	res, err := psf.MeasureAuto(plane, m.Width, m.Height, psf.AutoOptions{})
	if err != nil && !errors.Is(err, psf.ErrNoEdge) {
		return res, err
	}
	return res, nil
}

// psfProductHelp ends psfHelp: the product syntax and the kernel rule.
const psfProductHelp = `
      Products: PART*PART*... of gaussian, gaussian-mtf, diffraction, detector and motion
        parts (system MTF = product of the parts' MTFs; kernel = their convolution), e.g.
        'diffraction:wavelength=0.65,fnumber=8,pitch=10*detector:fill=0.9*gaussian:sigma=0.4'
      Kernels exclude the pixel aperture; model kernels hold >= 99.9 % of the weight.
      A PSF per band: repeat --psf BAND=SPEC (BAND the 1-based input band, restored);
        a --psf SPEC without a band covers the other bands. LIMPID_PSF: values separated by ';'.
      auto: measured from INPUT itself (restore only), as gaussian:sx=..,sy=..: every restored
        band from the edges limpid psf measure --auto finds in it (a band without usable edges
        takes the median of the measured bands' sigmas; the report says so); BAND=auto one band;
        auto:band=N measures band N for every band`

// restorePSF reads restore's --psf: a psf spec, or auto[:band=N], which
// measures the PSF from INPUT's edges (psf measure --auto) before restoring.
func restorePSF(c *cli.Context) (*psf.Kernel, string, error) {
	spec := psfPlain(c)
	name, rest, _ := strings.Cut(spec, ":")
	if name != "auto" {
		k, err := psf.Parse(spec, psfEnv())
		if err != nil {
			return nil, "", usageError{fmt.Errorf("--psf %w", err)}
		}
		return k, spec, nil
	}
	in := c.Args().Get(0)
	if in == "-" {
		return nil, "", usagef("--psf auto measures the PSF from INPUT, which must then be a file (stdin can be read only once)")
	}
	src, err := gdal.Open(in)
	if err != nil {
		return nil, "", err
	}
	defer src.Close()
	meta := src.Meta()
	band := 0
	if bs, err := parseBands(c.String("bands"), len(meta.Bands)); err == nil && len(bs) > 0 {
		band = bs[0]
	}
	if rest != "" {
		k, v, ok := strings.Cut(rest, "=")
		n, err := strconv.Atoi(v)
		if !ok || k != "band" || err != nil {
			return nil, "", usagef("--psf %q: use auto or auto:band=N (1-based band to measure)", spec)
		}
		if n < 1 || n > len(meta.Bands) {
			return nil, "", usagef("--psf %q: band %d does not exist (INPUT has %d bands)", spec, n, len(meta.Bands))
		}
		band = n - 1
	}
	found, err := autoEdges(src, in, band)
	if err != nil {
		return nil, "", err
	}
	est := found.Estimate
	if est.Sigma == nil {
		return nil, "", usagef("--psf auto: no usable edge in band %d of %s (straight, high-contrast, 2-10 degrees off the axes, uniform sides); measure the PSF elsewhere (limpid psf measure) and pass it as --psf", band+1, in)
	}
	gs, err := est.Spec()
	if err != nil {
		return nil, "", usagef("--psf auto: %v", err)
	}
	k, err := psf.Parse(gs, psf.Env{})
	if err != nil {
		return nil, "", usageError{fmt.Errorf("--psf auto gave %s: %w", gs, err)}
	}
	return k, fmt.Sprintf("%s (auto: %d edges in band %d, %s)", gs, est.NumUsed(), band+1, est.SigmaFrom), nil
}
