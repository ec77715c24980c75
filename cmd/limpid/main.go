package main

import (
	"context"
	"errors"
	"fmt"
	"io"
	"strings"
	"syscall"

	"github.com/urfave/cli/v2"

	"limpid/arrowio"
	"limpid/psf"
	"limpid/raster"
	"limpid/step"
)

// Exit codes. An unknown command is a usage error too (cli.go), never
// urfave/cli's 3.
const (
	exitOK      = 0
	exitFailure = 1
	exitUsage   = 2
)

// usageError marks errors caused by the command line or the input (exit 2).
type usageError struct{ error }

func (u usageError) Unwrap() error { return u.error }

func usagef(format string, a ...any) error { return usageError{fmt.Errorf(format, a...)} }

func exitCode(err error) int {
	var u usageError
	var ec cli.ExitCoder
	switch {
	case err == nil:
		return exitOK
	case errors.As(err, &ec) && ec.ExitCode() == 3:
		// urfave/cli's "No help topic" (an unknown command): a usage error.
		return exitUsage
	case errors.Is(err, syscall.EPIPE):
		return exitBrokenPipe
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
// "-", and logs and errors to stderr; help and the version go to stdout when
// asked for (cli.go has the command-line contract). It returns the exit code.
func run(ctx context.Context, args []string, stdin io.Reader, stdout, stderr io.Writer) int {
	stdin, stopped := watchRun(ctx, stdin) // signals.go: interruptions
	err := newApp(stdin, stdout, stderr, args).RunContext(ctx, helpArgs(args))
	if code, ok := stopped(stderr); ok {
		return code
	}
	if errors.Is(err, errHelpShown) {
		return exitOK
	}
	if err != nil {
		fmt.Fprintf(stderr, "limpid: %s\n", errorText(err))
	}
	return exitCode(err)
}

// newApp is the command tree with the command-line contract applied; argv
// is the command line it will run.
func newApp(stdin io.Reader, stdout, stderr io.Writer, argv []string) *cli.App {
	app := &cli.App{
		Name:    "limpid",
		Usage:   "restore blurred optical satellite imagery (EMS deconvolution), georeferencing kept",
		Version: step.Version,
		// Nothing of urfave/cli's own is printed: help and the version go
		// to stdout through prepareCLI, errors through run.
		Writer:         stderr,
		ErrWriter:      stderr,
		Description:    caution,
		ExitErrHandler: func(*cli.Context, error) {},
		Commands: []*cli.Command{
			restoreCommand(stdin, stdout, stderr),
			noiseCommand(stdin, stdout, stderr),
			demoCommand(stderr, stdout),
			tilesCommand(stdin, stdout, stderr),
			psfCommand(stdin, stdout, stderr),
			simulateCommand(stdin, stdout, stderr),
			assessCommand(stdout, stderr),
			cleanCommand(stderr),
			planCommand(stdin, stdout, stderr),
			mergeCommand(stdout, stderr),
		},
	}
	// psf measure --edge X0,Y0,X1,Y1 repeats: commas stay inside a value.
	app.DisableSliceFlagSeparator = true
	prepareCLI(app, stdout, argv)
	return app
}

// helpArgs turns `limpid help [COMMAND...]` into `limpid [COMMAND...] --help`.
func helpArgs(args []string) []string {
	if len(args) < 2 || args[1] != "help" {
		return args
	}
	rest := args[1:]
	for len(rest) > 0 && rest[0] == "help" {
		rest = rest[1:]
	}
	return append(append([]string{args[0]}, rest...), "--help")
}

// configFlags maps step.Config's fields to the flags that set them.
var configFlags = map[string]string{
	"Method": "--method", "Iterations": "--iterations", "Smooth": "--smooth", "Stop": "--stop",
	"Choose": "--choose", "ChoiceBudget": "--choice-pixels", "Noise": "--noise", "Tolerance": "--tolerance", "Background": "--background",
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
