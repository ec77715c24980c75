package main

import (
	"bufio"
	"context"
	"errors"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"syscall"

	"github.com/urfave/cli/v2"

	"limpid/arrowio"
	"limpid/raster"
	"limpid/raster/gdal"
	"limpid/raster/scratch"
	"limpid/step"
	"limpid/step/product"
	"limpid/step/stream"
)

// DefaultPackOverlap is the halo limpid tiles pack cuts when --overlap is not
// given: restore's automatic halo for PSFs up to sigma 1.5 with the default
// smoothing (4 x (6 + 1) = 28, rounded up to 32).
const DefaultPackOverlap = 32

func tilesCommand(stdin io.Reader, stdout, stderr io.Writer) *cli.Command {
	return &cli.Command{
		Name:  "tiles",
		Usage: "convert between rasters and Arrow IPC tile streams (see README, \"Arrow tile streams\")",
		Subcommands: []*cli.Command{
			{
				Name:      "pack",
				Usage:     "cut a raster into an Arrow IPC tile stream (flags come before INPUT OUTPUT)",
				ArgsUsage: "INPUT OUTPUT",
				Description: `INPUT is any GDAL-readable raster or - for stdin; OUTPUT is a path or - for stdout.
One row (and one record batch) per band and tile; invalid pixels become NaN.

Examples:
   limpid tiles pack --tile 512 --overlap 32 scene.tif scene.arrows
   limpid tiles pack --bands 3,2,1 scene.tif - | limpid restore --input-format arrow --output-format arrow --psf gaussian:sigma=0.7 --smooth 0.2 --stop change - - | limpid tiles unpack - restored.tif`,
				Flags: []cli.Flag{
					&cli.IntFlag{Name: "tile", Value: step.DefaultTile, Usage: "tile core size in pixels (16-16384)"},
					&cli.IntFlag{Name: "overlap", Value: DefaultPackOverlap, Usage: "halo in pixels around each tile (restore needs at least 4 x (PSF radius + smoothing radius))"},
					&cli.StringFlag{Name: "bands", Usage: "1-based bands to pack, in stream order (default: all)"},
					&cli.StringFlag{Name: "scene-id", Usage: "scene identifier written to every row (default: INPUT's base name without extension; stdin for -)"},
					&cli.StringFlag{Name: "compress", Value: "none", Usage: "IPC buffer compression: none, zstd or lz4 (the JavaScript Arrow reader cannot decompress)"},
					&cli.StringFlag{Name: "plan", Usage: "carry a scene plan (limpid plan) in the stream's metadata (limpid.plan): its tiling and bands, and restore --input-format arrow then needs no --psf and makes the plan's automatic choice"},
				},
				Action: func(c *cli.Context) error { return packAction(c, stdin, stdout) },
			},
			{
				Name:      "unpack",
				Usage:     "write the scene of an Arrow IPC tile stream as a GeoTIFF or COG (flags come before INPUT OUTPUT)",
				ArgsUsage: "INPUT OUTPUT",
				Description: `INPUT is a tile stream file or - for stdin; OUTPUT is a path or - for stdout.
Restored streams are blended with restore's weights (the result equals restore's raster output);
observed streams give back the packed bands.`,
				Flags: []cli.Flag{
					&cli.StringFlag{Name: "format", Value: "gtiff", Usage: "output container: gtiff or cog"},
					&cli.StringFlag{Name: "output-type", Value: "same", Usage: "same (the stream's source data type, rounded and clamped) or float32"},
				},
				Action: func(c *cli.Context) error { return unpackAction(c, stdin, stdout) },
			},
		},
	}
}

// streamFlags are restore's tile-stream flags.
func streamFlags() []cli.Flag {
	return []cli.Flag{
		&cli.StringFlag{Name: "input-format", Value: "raster", Usage: "raster (anything GDAL reads) or arrow (a tile stream from limpid tiles pack or any Arrow writer)"},
		&cli.StringFlag{Name: "output-format", Value: "raster", Usage: "raster (see --format) or arrow (a restored tile stream, tiles in input order)"},
		&cli.StringFlag{Name: "compress", Value: "none", Usage: "arrow output: IPC buffer compression none, zstd or lz4"},
		&cli.StringFlag{Name: "scene-id", Usage: "raster input, arrow output: the scene identifier (default: INPUT's base name)"},
	}
}

func sceneID(flag, in string) string {
	if flag != "" {
		return flag
	}
	if in == "-" {
		return "stdin"
	}
	b := filepath.Base(in)
	return strings.TrimSuffix(b, filepath.Ext(b))
}

func checkCompress(s string) error {
	switch s {
	case "none", "zstd", "lz4":
		return nil
	}
	return usagef("--compress %q: use none, zstd or lz4", s)
}

// openStream opens a tile-stream INPUT and reads its schema.
func openStream(in string, stdin io.Reader) (*arrowio.Reader, func(), error) {
	var r io.Reader
	closeFn := func() {}
	if in == "-" {
		r = bufio.NewReaderSize(stdin, 1<<20)
	} else {
		f, err := os.Open(in)
		if err != nil {
			return nil, closeFn, usagef("INPUT %s: %v", in, errors.Unwrap(err))
		}
		if st, err := f.Stat(); err == nil && st.IsDir() {
			f.Close()
			return nil, closeFn, usagef("INPUT %s is a directory", in)
		}
		closeFn = func() { f.Close() }
		r = bufio.NewReaderSize(f, 1<<20)
	}
	rd, err := arrowio.NewReader(r)
	if err != nil {
		closeFn()
		return nil, func() {}, streamErr(in, err)
	}
	return rd, func() { rd.Release(); closeFn() }, nil
}

// streamErr names the input of a stream error.
func streamErr(in string, err error) error {
	if errors.Is(err, arrowio.ErrStream) {
		name := in
		if in == "-" {
			name = "- (stdin)"
		}
		return fmt.Errorf("INPUT %s: %w", name, err)
	}
	return err
}

// streamOutput is an arrow OUTPUT: stdout (buffered), a FIFO or character
// device written directly, or a temporary file in the target directory
// renamed on commit.
type streamOutput struct {
	w     io.Writer
	bw    *bufio.Writer
	f     *os.File // the temporary of a file OUTPUT
	final string   // where the temporary goes
	sw    *scratch.StreamWriter
	std   *notedWriter
	name  string
}

// notedWriter records the first byte written to stdout (scratch.Started).
type notedWriter struct {
	w       io.Writer
	name    string
	started bool
}

func (n *notedWriter) Write(p []byte) (int, error) {
	if !n.started {
		n.started = true
		scratch.Started(n.name)
	}
	return n.w.Write(p)
}

func createStreamOutput(out string, stdout io.Writer) (*streamOutput, error) {
	if out == "-" {
		nw := &notedWriter{w: stdout, name: "stdout"}
		bw := bufio.NewWriterSize(nw, 1<<20)
		return &streamOutput{w: bw, bw: bw, std: nw, name: "stdout"}, nil
	}
	t, err := scratch.Inspect(out)
	if err != nil {
		return nil, usagef("OUTPUT %s: %v", out, err)
	}
	if t.Kind == scratch.Stream {
		sw := &scratch.StreamWriter{Path: out, Name: out}
		bw := bufio.NewWriterSize(sw, 1<<20)
		return &streamOutput{w: bw, bw: bw, sw: sw, name: out}, nil
	}
	dir := filepath.Dir(t.Path)
	f, err := scratch.CreateTemp(dir, ".arrows")
	if err != nil {
		return nil, usagef("OUTPUT %s: cannot create a file in %s: %v", out, dir, scratch.Reason(err))
	}
	f.Chmod(0o644 &^ umask)
	bw := bufio.NewWriterSize(f, 1<<20)
	return &streamOutput{w: bw, bw: bw, f: f, final: t.Path, name: out}, nil
}

func (o *streamOutput) commit() error {
	if err := o.bw.Flush(); err != nil {
		o.abort()
		return gdal.StreamError(o.name, err)
	}
	switch {
	case o.sw != nil:
		if err := o.sw.Close(); err != nil {
			o.sw.Release()
			return gdal.StreamError(o.name, err)
		}
		return nil
	case o.f == nil:
		scratch.Written(o.name)
		return nil
	}
	if err := o.f.Close(); err != nil {
		scratch.Remove(o.f.Name())
		return fmt.Errorf("writing the stream: %w", err)
	}
	if err := scratch.Commit(o.f.Name(), o.final, o.f.Name()); err != nil {
		scratch.Remove(o.f.Name())
		return fmt.Errorf("moving the stream to %s: %w", o.name, err)
	}
	return nil
}

// fail aborts the output after err and returns err, said in words when the
// stream's reader went away (EPIPE).
func (o *streamOutput) fail(err error) error {
	o.abort()
	if errors.Is(err, syscall.EPIPE) {
		return gdal.StreamError(o.name, err)
	}
	return err
}

// abort: on stdout or an open FIFO or device, the complete batches already
// buffered are flushed (no end-of-stream marker follows, so the reader
// sees a truncated stream); a file output is removed.
func (o *streamOutput) abort() {
	switch {
	case o.sw != nil:
		o.bw.Flush()
		o.sw.Release()
	case o.f == nil:
		o.bw.Flush()
	default:
		o.f.Close()
		scratch.Remove(o.f.Name())
	}
}

func packAction(c *cli.Context, stdin io.Reader, stdout io.Writer) error {
	in, out := c.Args().Get(0), c.Args().Get(1) // count checked by checkOperands (cli.go)
	if err := checkCompress(c.String("compress")); err != nil {
		return err
	}
	if err := checkPaths(in, out); err != nil {
		return err
	}
	if err := checkOutputs(stdout, c.App.ErrWriter, []namedPath{{"INPUT", in}}, []namedPath{{"OUTPUT", out}}); err != nil {
		return err
	}
	if c.Int("overlap") < 0 {
		return usagef("--overlap %d must be >= 0", c.Int("overlap"))
	}
	if t := c.Int("tile"); t < 16 || t > 16384 {
		return usagef("--tile %d must be between 16 and 16384", t)
	}
	src, cleanup, err := openRaster(in, stdin)
	if err != nil {
		return err
	}
	defer cleanup()
	defer src.Close()
	meta := src.Meta()
	bands, err := parseBands(c.String("bands"), len(meta.Bands))
	if err != nil {
		return err
	}
	tile, overlap, planJSON := c.Int("tile"), c.Int("overlap"), ""
	if c.String("plan") != "" {
		if bands, tile, overlap, planJSON, err = packPlan(c, meta); err != nil { // planstream.go
			return err
		}
	}
	hdr, err := stream.ObservedHeader(meta, bands, sceneID(c.String("scene-id"), in), tile, overlap)
	if err != nil {
		return err
	}
	hdr.Plan = planJSON
	tiler, err := stream.NewSceneTiler(src, bands, hdr)
	if err != nil {
		return err
	}
	o, err := createStreamOutput(out, stdout)
	if err != nil {
		return err
	}
	w, err := arrowio.NewWriter(o.w, hdr, arrowio.WithCompression(c.String("compress")))
	if err != nil {
		return o.fail(err)
	}
	var t arrowio.Tile
	for {
		err := c.Context.Err()
		ok := false
		if err == nil {
			ok, err = tiler.Next(&t)
		}
		if err == nil && ok {
			err = w.Write(&t)
		}
		if err != nil {
			w.Abandon()
			return o.fail(err)
		}
		if !ok {
			break
		}
	}
	if err := w.Close(); err != nil {
		return o.fail(err)
	}
	return o.commit()
}

// metaFromHeader is the raster description of a stream's scene.
func metaFromHeader(h *arrowio.Header) raster.Meta {
	m := raster.Meta{Width: h.Width, Height: h.Height, DataType: h.DataType, Geo: h.Geo, Metadata: h.Metadata}
	for _, b := range h.Bands {
		m.Bands = append(m.Bands, b.BandInfo)
	}
	return m
}

// createRasterFor prepares the raster OUTPUT of a stream's scene exactly as
// restore would for the same source (type, nodata rule, metadata).
func createRasterFor(h *arrowio.Header, out string, format gdal.Format, outType string, hasSaturated bool, stdout io.Writer) (*gdal.Writer, error) {
	meta := metaFromHeader(h)
	all := make([]int, len(meta.Bands))
	for i := range all {
		all[i] = i
	}
	om := product.Meta(meta, all, outType == "float32")
	wopts := gdal.WriteOptions{Format: format, DataType: om.DataType}
	wopts.NoData, wopts.HasNoData = product.NoData(meta, all, outType == "float32", hasSaturated)
	if out == "-" {
		wopts.Stdout = stdout
	}
	return gdal.Create(out, om, wopts)
}

func unpackAction(c *cli.Context, stdin io.Reader, stdout io.Writer) error {
	in, out := c.Args().Get(0), c.Args().Get(1) // count checked by checkOperands (cli.go)
	format := gdal.Format(c.String("format"))
	if format != gdal.GTiff && format != gdal.COG {
		return usagef("--format %q: use gtiff or cog", c.String("format"))
	}
	outType := c.String("output-type")
	if outType != "same" && outType != "float32" {
		return usagef("--output-type %q: use same or float32", outType)
	}
	if err := checkPaths(in, out); err != nil {
		return err
	}
	if err := checkOutputs(stdout, c.App.ErrWriter, []namedPath{{"INPUT", in}}, []namedPath{{"OUTPUT", out}}); err != nil {
		return err
	}
	r, closeIn, err := openStream(in, stdin)
	if err != nil {
		return err
	}
	defer closeIn()
	h := r.Header()
	var rep *step.Report
	if h.Kind == arrowio.KindRestored {
		if rep, err = stream.ReportFromHeader(h); err != nil {
			return streamErr(in, err)
		}
	}
	dst, err := createRasterFor(h, out, format, outType, rep != nil && rep.Saturated != nil, stdout)
	if err != nil {
		return err
	}
	asm, err := stream.NewAssembler(h, dst)
	if err != nil {
		dst.Abort()
		return err
	}
	asm.Report = rep
	var t arrowio.Tile
	for {
		ok, err := r.Next(&t)
		if err == nil && ok {
			err = asm.Write(&t)
		}
		if err != nil {
			dst.Abort()
			return streamErr(in, err)
		}
		if !ok {
			break
		}
	}
	if err := asm.Finish(); err != nil {
		dst.Abort()
		return streamErr(in, err)
	}
	if rep != nil {
		if err := record(dst, product.Metadata(rep)); err != nil {
			dst.Abort()
			return err
		}
	}
	return dst.CommitContext(c.Context)
}

// runStreamRestore is restore with a tile stream on either side: the flag
// checks, the input (a stream, or a raster cut into tiles), then the tiles
// restored to a stream or assembled into a raster.
func runStreamRestore(ctx context.Context, c *cli.Context, j *restoreJob, stdin io.Reader, stdout, stderr io.Writer) error {
	if err := checkStreamJob(c, j); err != nil {
		return err
	}
	in, err := openStreamInput(c, j, stdin, stderr)
	if err != nil {
		return err
	}
	defer in.close()
	bgs, err := stream.StreamBackgrounds(in.cfg, in.hdr, in.raster, in.bands)
	if err != nil {
		return err
	}
	outHdr, err := stream.RestoredHeader(in.hdr, in.cfg, bgs)
	if err != nil {
		return err
	}
	tiles := 0
	in.cfg.Progress = func(done, _ int) { tiles = done }
	if c.String("output-format") == "arrow" {
		err = restoreToStream(ctx, c, j, in, bgs, outHdr, stdout)
	} else {
		err = restoreToRaster(ctx, j, in, bgs, outHdr, stdout)
	}
	if err != nil {
		return err
	}
	fmt.Fprintf(stderr, "limpid: restored %d tiles\n", tiles)
	return nil
}

// checkStreamJob refuses the flags and settings a tile stream cannot honour.
func checkStreamJob(c *cli.Context, j *restoreJob) error {
	inFmt, outFmt := c.String("input-format"), c.String("output-format")
	if err := checkCompress(c.String("compress")); err != nil {
		return err
	}
	if c.IsSet("compress") && outFmt != "arrow" {
		return usagef("--compress applies to --output-format arrow only")
	}
	if c.IsSet("scene-id") && (inFmt == "arrow" || outFmt != "arrow") {
		return usagef("--scene-id applies to a raster INPUT restored to --output-format arrow (a stream keeps its own scene id)")
	}
	if j.reportPath != "" {
		return usagef("--report is available only with raster input and output (a tile stream carries each tile's iterations and final change instead)")
	}
	// A stream is restored tile by tile without the rest of the scene, so
	// the scene-wide noise fit and choice cannot run there.
	if j.cfg.SmoothAuto || j.cfg.Stop == step.StopAuto {
		return usagef("--smooth auto and --stop auto need the whole scene and cannot run on a tile stream: give --smooth EPS with --stop change, or --stop discrepancy with --noise a=...,b=... (limpid noise prints them)")
	}
	if j.cfg.Stop == step.StopDiscrepancy && j.cfg.Noise == nil {
		return usagef("--stop discrepancy on a tile stream needs --noise a=...,b=... (the noise fit needs the whole scene; limpid noise prints it)")
	}
	if inFmt == "arrow" && c.IsSet("bands") {
		return usagef("--bands: a tile stream is restored whole; choose the bands when packing (limpid tiles pack --bands)")
	}
	return nil
}

// streamInput is the observed side of a stream restore.
type streamInput struct {
	cfg    step.Config
	hdr    *arrowio.Header
	src    stream.TileSource
	raster raster.Reader // the scene, for a raster INPUT (else nil)
	bands  []int
	closes []func()
}

func (in *streamInput) close() {
	for i := len(in.closes) - 1; i >= 0; i-- {
		in.closes[i]()
	}
}

// openStreamInput opens INPUT as an observed stream, or cuts a raster
// INPUT into one, and sets the job's tiling from it.
func openStreamInput(c *cli.Context, j *restoreJob, stdin io.Reader, stderr io.Writer) (*streamInput, error) {
	in := &streamInput{cfg: j.cfg}
	if c.String("input-format") == "arrow" {
		r, closeIn, err := openStream(j.in, stdin)
		if err != nil {
			return nil, err
		}
		in.closes = append(in.closes, closeIn)
		in.hdr, in.src = r.Header(), r
		if err := in.streamTiling(c, j, stderr); err != nil {
			in.close()
			return nil, err
		}
		return in, nil
	}
	s, cleanup, err := openRaster(j.in, stdin)
	if err != nil {
		return nil, err
	}
	in.closes = append(in.closes, cleanup, func() { s.Close() })
	meta := s.Meta()
	if in.bands, err = parseBands(j.bandSpec, len(meta.Bands)); err == nil {
		in.hdr, err = stream.ObservedHeader(meta, in.bands, sceneID(c.String("scene-id"), j.in), in.cfg.Tile, in.cfg.Halo())
	}
	if err == nil {
		in.src, err = stream.NewSceneTiler(s, in.bands, in.hdr)
	}
	if err != nil {
		in.close()
		return nil, err
	}
	in.raster = s
	return in, nil
}

// streamTiling takes the tiling of a stream INPUT (refusing flags that
// contradict it) and warns when its overlap is short for the PSF.
func (in *streamInput) streamTiling(c *cli.Context, j *restoreJob, stderr io.Writer) error {
	hdr := in.hdr
	if c.IsSet("tile") && c.Int("tile") != hdr.Tile {
		return usagef("--tile %d: the stream INPUT %s is cut in tiles of %d (%s)", c.Int("tile"), j.in, hdr.Tile, arrowio.KeyTileSize)
	}
	if o := c.String("overlap"); c.IsSet("overlap") && o != "auto" && o != strconv.Itoa(hdr.Overlap) {
		return usagef("--overlap %s: the stream INPUT %s has an overlap of %d (%s)", o, j.in, hdr.Overlap, arrowio.KeyOverlap)
	}
	in.cfg.SetTiling(hdr.Tile, hdr.Overlap)
	if err := in.cfg.Resolve(); err != nil {
		return err
	}
	if want := step.DefaultOverlap(in.cfg.PSF, in.cfg.Smooth, in.cfg.Tile); hdr.Overlap < want {
		fmt.Fprintf(stderr, "limpid: warning: the stream's overlap %d is below the %d this PSF and smoothing want; tile borders may show (pack with --overlap %d)\n", hdr.Overlap, want, want)
	}
	return nil
}

// restoreToStream writes the restored tiles as a stream at OUTPUT.
func restoreToStream(ctx context.Context, c *cli.Context, j *restoreJob, in *streamInput, bgs []float64, outHdr *arrowio.Header, stdout io.Writer) error {
	o, err := createStreamOutput(j.out, stdout)
	if err != nil {
		return err
	}
	w, err := arrowio.NewWriter(o.w, outHdr, arrowio.WithCompression(c.String("compress")))
	if err != nil {
		return o.fail(err)
	}
	if err := stream.RestoreTiles(ctx, in.hdr, bgs, in.src, w, in.cfg); err != nil {
		w.Abandon()
		return o.fail(streamErr(j.in, err))
	}
	if err := w.Close(); err != nil {
		return o.fail(err)
	}
	return o.commit()
}

// restoreToRaster assembles the restored tiles into a raster at OUTPUT.
func restoreToRaster(ctx context.Context, j *restoreJob, in *streamInput, bgs []float64, outHdr *arrowio.Header, stdout io.Writer) error {
	rep, err := stream.ReportFromHeader(outHdr)
	if err != nil {
		return err
	}
	dst, err := createRasterFor(outHdr, j.out, j.format, j.outType, in.cfg.HasSaturated, stdout)
	if err != nil {
		return err
	}
	asm, err := stream.NewAssembler(outHdr, dst)
	if err != nil {
		dst.Abort()
		return err
	}
	asm.Report = rep
	if err := stream.RestoreTiles(ctx, in.hdr, bgs, in.src, asm, in.cfg); err != nil {
		dst.Abort()
		return streamErr(j.in, err)
	}
	if err := asm.Finish(); err != nil {
		dst.Abort()
		return streamErr(j.in, err)
	}
	if err := record(dst, product.Metadata(rep)); err != nil {
		dst.Abort()
		return err
	}
	return dst.CommitContext(ctx)
}
