package main

import (
	"fmt"
	"os"
	"sort"
	"strconv"
	"strings"

	"github.com/urfave/cli/v2"

	"limpid/psf"
	"limpid/raster/gdal"
)

// psfArgs reads restore's repeatable --psf: the command line's values, or
// the environment variable's list of specs separated by ";" (a slice flag
// keeps commas inside a value, and specs hold commas).
func psfArgs(c *cli.Context) []string {
	vals := c.StringSlice("psf")
	if len(vals) == 1 {
		for _, f := range c.Command.Flags {
			if sf, ok := f.(*cli.StringSliceFlag); ok && sf.Name == "psf" {
				for _, name := range sf.EnvVars {
					if v, ok := os.LookupEnv(name); ok && v == vals[0] {
						vals = strings.Split(v, ";")
					}
				}
			}
		}
	}
	var out []string
	for _, v := range vals {
		if v = strings.TrimSpace(v); v != "" {
			out = append(out, v)
		}
	}
	return out
}

// psfPlain is --psf's spec for every band ("" when every value names a
// band): the one value without a BAND= prefix.
func psfPlain(c *cli.Context) string {
	plain, _, _ := splitPSFArgs(psfArgs(c))
	return plain
}

// splitPSFArgs parts --psf's values into the spec for every band and the
// BAND=SPEC ones (0-based input band -> spec).
func splitPSFArgs(vals []string) (plain string, byBand map[int]string, err error) {
	byBand = map[int]string{}
	for _, v := range vals {
		b, spec, ok := strings.Cut(v, "=")
		n, nerr := strconv.Atoi(strings.TrimSpace(b))
		if !ok || nerr != nil {
			if plain != "" {
				return "", nil, usagef("--psf %q and %q: only one --psf without a band (BAND=SPEC gives one band its own)", plain, v)
			}
			plain = v
			continue
		}
		spec = strings.TrimSpace(spec)
		if n < 1 || spec == "" {
			return "", nil, usagef("--psf %q: give BAND=SPEC with BAND the 1-based input band, e.g. 2=gaussian:sigma=0.8", v)
		}
		if _, dup := byBand[n-1]; dup {
			return "", nil, usagef("--psf %q: band %d is given twice", v, n)
		}
		byBand[n-1] = spec
	}
	return plain, byBand, nil
}

// bandPSFs resolves a per-band --psf (BAND=SPEC values, or auto, which
// measures every restored band) against INPUT's restored bands. It returns
// the job's PSF (the spec for every band, else the first band's) and, per
// output band, the band's own PSF (nil: the job's). ok is false when --psf
// is a single spec for every band other than auto (restorePSF reads it).
func bandPSFs(c *cli.Context) (k *psf.Kernel, spec string, bandK []*psf.Kernel, bandSpec []string, ok bool, err error) {
	plain, byBand, err := splitPSFArgs(psfArgs(c))
	if err != nil || (len(byBand) == 0 && plain != "auto") {
		return nil, "", nil, nil, false, err
	}
	in := c.Args().Get(0)
	if in == "-" {
		return nil, "", nil, nil, true, usagef("--psf auto and --psf BAND=SPEC read INPUT's bands, which must then be a file (stdin can be read only once)")
	}
	src, err := gdal.Open(in)
	if err != nil {
		return nil, "", nil, nil, true, err
	}
	defer src.Close()
	meta := src.Meta()
	bands, err := parseBands(c.String("bands"), len(meta.Bands))
	if err != nil {
		return nil, "", nil, nil, true, err
	}
	restored := map[int]bool{}
	for _, b := range bands {
		restored[b] = true
	}
	for _, b := range sortedKeys(byBand) {
		if b >= len(meta.Bands) {
			return nil, "", nil, nil, true, usagef("--psf %d=%s: band %d does not exist (INPUT has %d bands)", b+1, byBand[b], b+1, len(meta.Bands))
		}
		if !restored[b] {
			return nil, "", nil, nil, true, usagef("--psf %d=%s: band %d is not restored (--bands %s)", b+1, byBand[b], b+1, c.String("bands"))
		}
	}
	specs := make([]string, len(bands))
	for i, b := range bands {
		if specs[i] = byBand[b]; specs[i] == "" {
			specs[i] = plain
		}
		if specs[i] == "" {
			return nil, "", nil, nil, true, usagef("--psf: band %d is restored but has no PSF: give --psf SPEC for every band or --psf %d=SPEC", b+1, b+1)
		}
	}
	kernels := make([]*psf.Kernel, len(bands))
	used := make([]string, len(bands))
	parsed := map[string]*psf.Kernel{}
	var measured []psf.Measured
	var unmeasured []int
	for i, b := range bands {
		s := specs[i]
		if s == "auto" {
			found, err := autoEdges(src, in, b)
			if err != nil {
				return nil, "", nil, nil, true, err
			}
			est := found.Estimate
			if est.Sigma == nil {
				unmeasured = append(unmeasured, i)
				continue
			}
			gs, err := est.Spec()
			if err != nil {
				return nil, "", nil, nil, true, usagef("--psf auto: band %d: %v", b+1, err)
			}
			measured = append(measured, est.Measured)
			s, used[i] = gs, fmt.Sprintf("%s (auto: %d edges in band %d, %s)", gs, est.NumUsed(), b+1, est.SigmaFrom)
		} else if strings.HasPrefix(s, "auto:") {
			return nil, "", nil, nil, true, usagef("--psf %q: auto:band=N measures one band for every band; for a PSF per band give --psf auto", s)
		}
		if kernels[i], err = parseOnce(parsed, s); err != nil {
			return nil, "", nil, nil, true, err
		}
		if used[i] == "" {
			used[i] = s
		}
	}
	if len(unmeasured) > 0 {
		if len(measured) == 0 {
			return nil, "", nil, nil, true, usagef("--psf auto: no usable edge in any restored band of %s (straight, high-contrast, 2-10 degrees off the axes, uniform sides); measure the PSF elsewhere (limpid psf measure) and pass it as --psf", in)
		}
		gs := medianSpec(measured)
		for _, i := range unmeasured {
			if kernels[i], err = parseOnce(parsed, gs); err != nil {
				return nil, "", nil, nil, true, err
			}
			used[i] = fmt.Sprintf("%s (auto: no usable edge in band %d; the median of the %d measured bands' sigmas)", gs, bands[i]+1, len(measured))
			fmt.Fprintf(c.App.ErrWriter, "limpid: --psf auto: no usable edge in band %d; it takes the median of the measured bands' sigmas, %s\n", bands[i]+1, gs)
		}
	}
	k, spec = kernels[0], used[0]
	if plain != "" && plain != "auto" {
		k, spec = parsed[plain], plain
	}
	for i := range bands {
		if kernels[i] == k {
			kernels[i], used[i] = nil, ""
		}
	}
	return k, spec, kernels, used, true, nil
}

// parseOnce parses spec once per job, so bands sharing a spec share a kernel.
func parseOnce(parsed map[string]*psf.Kernel, spec string) (*psf.Kernel, error) {
	if k := parsed[spec]; k != nil {
		return k, nil
	}
	k, err := psf.Parse(spec, psfEnv())
	if err != nil {
		return nil, usageError{fmt.Errorf("--psf %w", err)}
	}
	parsed[spec] = k
	return k, nil
}

// medianSpec is the gaussian spec with the median sigma_x and sigma_y of
// the measured bands.
func medianSpec(ms []psf.Measured) string {
	pick := func(v, s *float64) float64 {
		if v != nil {
			return *v
		}
		return *s
	}
	var xs, ys []float64
	for _, m := range ms {
		xs, ys = append(xs, pick(m.SigmaX, m.Sigma)), append(ys, pick(m.SigmaY, m.Sigma))
	}
	return fmt.Sprintf("gaussian:sx=%.6g,sy=%.6g", median(xs), median(ys))
}

func median(v []float64) float64 {
	sort.Float64s(v)
	n := len(v)
	if n%2 == 1 {
		return v[n/2]
	}
	return (v[n/2-1] + v[n/2]) / 2
}

func sortedKeys(m map[int]string) []int {
	var ks []int
	for k := range m {
		ks = append(ks, k)
	}
	sort.Ints(ks)
	return ks
}
