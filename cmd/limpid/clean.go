package main

import (
	"fmt"
	"io"
	"os"
	"path/filepath"

	"github.com/urfave/cli/v2"

	"limpid/raster/scratch"
)

// cleanCommand removes the temporaries that killed runs left behind
// (scratch.Stale: made on this host by a process that is gone, before this
// run started).
func cleanCommand(stderr io.Writer) *cli.Command {
	return &cli.Command{
		Name:      "clean",
		Usage:     "remove the temporaries (.limpid-*) that killed limpid runs left in directories",
		ArgsUsage: "[DIR...]",
		Description: `A run interrupted by a signal removes its temporaries itself; one killed
outright (kill -9, power loss) cannot. Their names carry the host, process id
and start time of the run that made them, so this command removes only those
made on this host by a process that no longer exists and started before it;
a running limpid's temporaries are never touched. Without DIR: the current
directory and TMPDIR. Each removal is one line on stderr. Runs that find such
leftovers in their output directories or TMPDIR say so in one line.

Examples:
   limpid clean --dry-run
   limpid clean .`,
		Flags: []cli.Flag{
			&cli.BoolFlag{Name: "dry-run", Usage: "list what would be removed, remove nothing"},
		},
		Action: func(c *cli.Context) error {
			dirs := c.Args().Slice()
			if len(dirs) == 0 {
				dirs = []string{".", os.TempDir()}
			}
			n, size := 0, int64(0)
			for _, d := range dirs {
				st, err := os.Stat(d)
				if err != nil || !st.IsDir() {
					return usagef("DIR %s is not a directory", d)
				}
				ents, err := scratch.Stale(d)
				if err != nil {
					return fmt.Errorf("DIR %s: %v", d, scratch.Reason(err))
				}
				for _, e := range ents {
					verb := "would remove"
					if !c.Bool("dry-run") {
						if err := os.RemoveAll(e.Path); err != nil {
							return fmt.Errorf("removing %s: %v", e.Path, scratch.Reason(err))
						}
						verb = "removed"
					}
					n++
					size += e.Size
					fmt.Fprintf(stderr, "limpid: %s %s (%s, left by process %d started %s)\n", verb, filepath.Clean(e.Path),
						byteSize(e.Size), e.PID, e.Start.UTC().Format("2006-01-02 15:04:05 UTC"))
				}
			}
			verb := "removed"
			if c.Bool("dry-run") {
				verb = "would remove"
			}
			fmt.Fprintf(stderr, "limpid: clean: %s %s of killed runs (%s)\n", verb, temporaries(n), byteSize(size))
			return nil
		},
	}
}
