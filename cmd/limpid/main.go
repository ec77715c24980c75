package main

import (
	"context"
	"errors"
	"fmt"
	"io"
	"os"
	"os/signal"
	"strings"

	"github.com/urfave/cli/v2"

	"limpid/arrowio"
	"limpid/psf"
	"limpid/raster"
	"limpid/step"
)

// Exit codes. 3 stays free: the CLI library uses it for unknown commands.
const (
	exitOK      = 0
	exitFailure = 1
	exitUsage   = 2
)

func main() {
	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt)
	code := run(ctx, os.Args, os.Stdin, os.Stdout, os.Stderr)
	stop()
	os.Exit(code)
}

// usageError marks errors caused by the command line or the input (exit 2).
type usageError struct{ error }

func (u usageError) Unwrap() error { return u.error }

func usagef(format string, a ...any) error { return usageError{fmt.Errorf(format, a...)} }

func exitCode(err error) int {
	var u usageError
	switch {
	case err == nil:
		return exitOK
	case errors.As(err, &u), errors.Is(err, raster.ErrInput), errors.Is(err, step.ErrConfig),
		errors.Is(err, psf.ErrSpec), errors.Is(err, psf.ErrKernel), errors.Is(err, arrowio.ErrStream):
		return exitUsage
	}
	return exitFailure
}

const caution = `CAUTION: restoration can invent detail and amplify noise. Keep the original
scene, label every product as restored, and defer to the product's specification
and to licensed practice wherever decisions affect people (emergency mapping,
legal evidence). The automatic smoothing/stop choice and the particle method's
error map assume the PSF and the noise model are right; they do not certify it.`

// run is the whole program: it parses args (args[0] is the program name),
// reads stdin when INPUT is "-", writes data (only) to stdout when OUTPUT is
// "-", and help, logs and errors to stderr. It returns the exit code.
func run(ctx context.Context, args []string, stdin io.Reader, stdout, stderr io.Writer) int {
	app := &cli.App{
		Name:            "limpid",
		Usage:           "restore blurred optical satellite imagery (EMS deconvolution), georeferencing kept",
		Version:         step.Version,
		Writer:          stderr,
		ErrWriter:       stderr,
		HideHelpCommand: true,
		Description:     caution,
		ExitErrHandler:  func(*cli.Context, error) {},
		OnUsageError: func(c *cli.Context, err error, isSub bool) error {
			return usageError{err}
		},
		Commands: []*cli.Command{
			restoreCommand(stdin, stdout, stderr),
			noiseCommand(stdin, stdout, stderr),
			demoCommand(stderr, stdout),
			tilesCommand(stdin, stdout, stderr),
			psfCommand(stdin, stdout, stderr),
			simulateCommand(stdin, stdout, stderr),
			assessCommand(stdout, stderr),
			planCommand(stdin, stdout, stderr),
			mergeCommand(stdout, stderr),
		},
	}
	// psf measure --edge X0,Y0,X1,Y1 repeats: commas stay inside a value.
	app.DisableSliceFlagSeparator = true
	err := app.RunContext(ctx, args)
	if err != nil {
		msg := strings.ReplaceAll(strings.TrimSpace(flagText(err)), "\n", " ")
		fmt.Fprintf(stderr, "limpid: %s\n", msg)
	}
	return exitCode(err)
}

// configFlags maps step.Config's fields to the flags that set them.
var configFlags = map[string]string{
	"Method": "--method", "Iterations": "--iterations", "Smooth": "--smooth", "Stop": "--stop",
	"Choose": "--choose", "Noise": "--noise", "Tolerance": "--tolerance", "Background": "--background",
	"Tile": "--tile", "Overlap": "--overlap", "Workers": "--workers", "Uncertainty": "--uncertainty",
	"Particle.PerPixel": "--particles-per-pixel", "Particle.Potential": "--potential",
	"Particle.Resampling": "--resampling", "Particle.Start": "--start",
	"Particle.ESSThreshold": "--ess-threshold", "Particle.BurnIn": "--burn-in",
	"Particle.Replicates": "--replicates", "Particle.Batches": "--batches",
}

// flagText is err's message with the configuration fields it names shown
// as the flags that set them.
func flagText(err error) string {
	var fe *step.FieldError
	if !errors.As(err, &fe) {
		return err.Error()
	}
	named := fe.Format(func(f string) string {
		if flag, ok := configFlags[f]; ok {
			return flag
		}
		return f
	})
	return strings.Replace(err.Error(), fe.Error(), named, 1)
}
