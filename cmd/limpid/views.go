package main

import (
	"fmt"
	"io"
	"path/filepath"

	"github.com/urfave/cli/v2"

	"limpid/step"
)

// restore --quicklook and --report-html: pictures of a finished restoration,
// made from the committed product and its input (quicklook.go, report.go).

func viewFlags() []cli.Flag {
	return []cli.Flag{
		&cli.StringFlag{Name: "quicklook", Usage: "write a PNG: observed | restored (| error map) centre crops, header (scene, bands, PSF, method, stretch), shared 2-98 % stretch with outliers set aside, scale bar in map units"},
		&cli.StringFlag{Name: "report-html", Usage: "write one self-contained HTML page: job, PSF and MTF, quicklook, per-band metrics, convergence, caution"},
	}
}

// parseViews reads --quicklook and --report-html: both need raster input
// and a file OUTPUT (they reread the finished product).
func parseViews(c *cli.Context, j *restoreJob) error {
	j.quicklookPath, j.htmlPath = c.String("quicklook"), c.String("report-html")
	for _, v := range [][2]string{{"--quicklook", j.quicklookPath}, {"--report-html", j.htmlPath}} {
		if v[1] == "" {
			continue
		}
		if c.String("input-format") == "arrow" || c.String("output-format") == "arrow" {
			return usagef("%s %s: needs raster input and output (not Arrow tile streams)", v[0], v[1])
		}
		if c.Args().Get(1) == "-" {
			return usagef("%s %s: needs OUTPUT to be a file (it rereads the restored scene)", v[0], v[1])
		}
		if err := checkPaths(c.Args().Get(0), v[1]); err != nil {
			return usagef("%s: %v", v[0], err)
		}
		if a, b := absPath(v[1]), absPath(c.Args().Get(1)); a == b {
			return usagef("%s %s is the OUTPUT: give another file", v[0], v[1])
		}
	}
	return nil
}

func absPath(p string) string {
	a, err := filepath.Abs(p)
	if err != nil {
		return p
	}
	return a
}

// writeViews makes the quicklook and the HTML report of a committed
// restoration (inPath: the observed file as read, bands: its 0-based bands
// that became the output's).
func writeViews(j *restoreJob, inPath string, bands []int, rep *step.Report, stderr io.Writer) error {
	if j.quicklookPath == "" && j.htmlPath == "" {
		return nil
	}
	s, err := cropScene(inPath, bands, j.out, j.uncPath, qlInfo{Scene: sceneName(j.in), PSF: "PSF " + rep.PSF, Method: "EMS " + rep.Method, Error: errorTitle(rep.Method)})
	if err != nil {
		return err
	}
	ql, err := encodePNG(s.render())
	if err != nil {
		return err
	}
	if j.quicklookPath != "" {
		if err := writeFileAtomic("--quicklook", j.quicklookPath, ql); err != nil {
			return err
		}
	}
	if j.htmlPath != "" {
		page, warnings, err := htmlReport(j, inPath, bands, rep, ql)
		if err != nil {
			return err
		}
		for _, w := range warnings {
			fmt.Fprintf(stderr, "limpid: warning: %s\n", w)
		}
		if err := writeFileAtomic("--report-html", j.htmlPath, page); err != nil {
			return err
		}
	}
	return nil
}

// sceneName is the input's file name for titles ("standard input" for -).
func sceneName(in string) string {
	if in == "-" {
		return "standard input"
	}
	return filepath.Base(in)
}
