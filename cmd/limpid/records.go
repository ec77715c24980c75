package main

import (
	"fmt"
	"strings"

	"limpid/psf"
	"limpid/step"
)

// The HTML report's records of what the run did, built from the step's
// report (the same values as the JSON report and the LIMPID_* metadata).

// psfRecordText is the PSF row: the specification, the kernel size, the
// Gaussian model's sigmas when the kernel is that model, the equivalent
// Gaussian of its second moments and the weights' SHA-256.
func psfRecordText(rep *step.Report) string {
	r := rep.PSFUsed
	if r.SHA256 == "" {
		return fmt.Sprintf("%s (%d x %d kernel)", rep.PSF, rep.PSFSize[0], rep.PSFSize[1])
	}
	// A PSF per band: each band's record.
	var per []string
	for _, b := range rep.Bands {
		if b.PSFUsed != nil {
			per = append(per, fmt.Sprintf("band %d: %s", b.Band, kernelRecordText(*b.PSFUsed)))
		}
	}
	if len(per) > 0 {
		return strings.Join(per, "; ")
	}
	return kernelRecordText(r)
}

// kernelRecordText describes one PSF record.
func kernelRecordText(r psf.Record) string {
	var b strings.Builder
	fmt.Fprintf(&b, "%s (%d x %d kernel", r.Spec, r.Width, r.Height)
	if r.Model == "gaussian" {
		fmt.Fprintf(&b, "; Gaussian sigma_x %.4g, sigma_y %.4g px", *r.SigmaX, *r.SigmaY)
		if r.AngleDeg != nil {
			fmt.Fprintf(&b, ", angle %g deg", *r.AngleDeg)
		}
	}
	fmt.Fprintf(&b, "; second moments: sigma_x %.4g, sigma_y %.4g px; weights SHA-256 %s)", r.MomentSigmaX, r.MomentSigmaY, r.SHA256)
	return b.String()
}

// smoothingRowText is the smoothing row: the given bandwidth, or how it was
// chosen and what each band got.
func smoothingRowText(rep *step.Report) string {
	if rep.Smooth != nil {
		return fmt.Sprintf("%g (%s)", *rep.Smooth, rep.SmoothRule)
	}
	var per []string
	for _, b := range rep.Bands {
		if b.Applied != nil {
			per = append(per, fmt.Sprintf("band %d: %g", b.Band, b.Applied.Smooth))
		}
	}
	return fmt.Sprintf("%s; used %s", rep.SmoothRule, strings.Join(per, ", "))
}

// stopRowText is the stop row: the job's rule and, per band, the rule and
// count the final pass applied.
func stopRowText(rep *step.Report) string {
	s := fmt.Sprintf("%s, at most %d iterations", rep.Stop, rep.Iterations)
	if rep.Stop == step.StopChange {
		s += fmt.Sprintf(", tolerance %g", rep.Tolerance)
	}
	if rep.Stop == step.StopFixed {
		s = fmt.Sprintf("fixed, %d iterations", rep.Iterations)
	}
	var per []string
	for _, b := range rep.Bands {
		if b.Applied != nil {
			per = append(per, fmt.Sprintf("band %d: %s", b.Band, b.Applied.StopText()))
		}
	}
	if len(per) > 0 {
		s += "; applied " + strings.Join(per, ", ")
	}
	return s
}

// recordRows are the job table's rows about the PSF, the smoothing and the
// stop.
func recordRows(rep *step.Report) [][2]string {
	return [][2]string{{"PSF", psfRecordText(rep)}, {"smoothing", smoothingRowText(rep)}, {"stop", stopRowText(rep)}}
}

// bandSettingsText is a band's "settings" cell: what its final pass ran
// with.
func bandSettingsText(b step.BandReport) string {
	if b.Applied == nil {
		return "-"
	}
	return b.Applied.String()
}
