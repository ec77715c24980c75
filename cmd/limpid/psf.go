package main

import (
	"bufio"
	"fmt"
	"io"
	"math"
	"os"
	"path/filepath"
	"strings"

	"github.com/urfave/cli/v2"

	"limpid/psf"
	"limpid/raster"
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
			if c.NArg() != 2 {
				return usagef("psf build takes SPEC OUTPUT (got %d arguments)", c.NArg())
			}
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

func psfEnv() psf.Env { return psf.Env{LoadRaster: raster.LoadKernel} }

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
		return raster.WriteFloat32(path, meta, [][]float32{plane}, raster.WriteOptions{Format: raster.GTiff, DataType: "Float32"})
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

// writeAtomic writes a file under path+".tmp" and renames it into place.
func writeAtomic(what, path string, fill func(io.Writer) error) error {
	tmp := path + ".tmp"
	f, err := os.Create(tmp)
	if err != nil {
		return usagef("%s %s: cannot create: %v", what, path, unwrapPath(err))
	}
	bw := bufio.NewWriter(f)
	err = fill(bw)
	if err == nil {
		err = bw.Flush()
	}
	if cerr := f.Close(); err == nil {
		err = cerr
	}
	if err == nil {
		err = os.Rename(tmp, path)
	}
	if err != nil {
		os.Remove(tmp)
		return fmt.Errorf("writing %s: %w", path, err)
	}
	return nil
}

func unwrapPath(err error) error {
	if pe, ok := err.(*os.PathError); ok {
		return pe.Err
	}
	return err
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
	return &cli.Command{Name: "measure", Usage: "measure the PSF from the scene (not yet)", Action: func(c *cli.Context) error {
		return usagef("psf measure: not yet")
	}}
}

// psfProductHelp ends psfHelp: the product syntax and the kernel rule.
const psfProductHelp = `
      Products: PART*PART*... of gaussian, gaussian-mtf, diffraction, detector and motion
        parts (system MTF = product of the parts' MTFs; kernel = their convolution), e.g.
        'diffraction:wavelength=0.65,fnumber=8,pitch=10*detector:fill=0.9*gaussian:sigma=0.4'
      Kernels exclude the pixel aperture; model kernels hold >= 99.9 % of the weight.`
