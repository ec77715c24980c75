package main

import (
	"fmt"
	"io"
	"os"
	"path/filepath"
	"strings"

	"github.com/urfave/cli/v2"

	"limpid/raster"
	"limpid/raster/gdal"
	"limpid/step"
)

func mergeCommand(stdout, stderr io.Writer) *cli.Command {
	return &cli.Command{
		Name:      "merge",
		Usage:     "blend the tiles of every shard of a plan into the restored scene (flags come before DIR OUTPUT)",
		ArgsUsage: "DIR OUTPUT",
		Description: `DIR is the directory the shards (restore --plan PLAN.json --shard I/N INPUT DIR)
wrote: its plan.json and one file per tile. OUTPUT is the scene, the same
bytes as restore --plan PLAN.json INPUT OUTPUT (or the plain restore with the
plan's flags), or - for stdout. A missing tile, or a tile of another plan,
refuses the merge (nothing is written). Memory: the blend strips of one tile
row, as restore.

Examples:
   limpid plan --psf gaussian:sigma=0.7 scene.tif scene.plan.json
   limpid restore --plan scene.plan.json --shard 0/1 scene.tif tiles/
   limpid merge tiles/ scene_restored.tif
   limpid merge --format cog tiles/ scene_restored_cog.tif
`,
		Flags: []cli.Flag{
			&cli.StringFlag{Name: "format", Value: "gtiff", Usage: "output container: gtiff or cog (as restore)"},
			&cli.StringFlag{Name: "report", Usage: "write the JSON report of the merged run to this file"},
		},
		Action: func(c *cli.Context) error { return mergeAction(c, stdout, stderr) },
	}
}

func mergeAction(c *cli.Context, stdout, stderr io.Writer) error {
	if c.NArg() != 2 {
		return usagef("merge takes DIR OUTPUT after the flags (got %d arguments)", c.NArg())
	}
	dir, out := c.Args().Get(0), c.Args().Get(1)
	j := &restoreJob{in: dir, out: out, reportPath: c.String("report")}
	switch f := c.String("format"); f {
	case "gtiff", "cog":
		j.format = gdal.Format(f)
	default:
		return usagef("--format %q: use gtiff or cog", f)
	}
	if st, err := os.Stat(dir); err != nil || !st.IsDir() {
		return usagef("DIR %s is not a directory", dir)
	}
	pp := filepath.Join(dir, shardPlanName)
	if _, err := os.Stat(pp); err != nil {
		return usagef("DIR %s has no %s: not a shard directory (restore --plan PLAN.json --shard I/N INPUT DIR makes one)", dir, shardPlanName)
	}
	p, err := readPlan("DIR", pp)
	if err != nil {
		return err
	}
	hash := p.Hash()
	if f, err := foreignTiles(dir, hash); err != nil {
		return err
	} else if len(f) > 0 {
		return usagef("DIR %s holds tiles of another plan (%s; this plan %s): nothing merged", dir, f[0], hash)
	}
	tp, err := p.Tiling()
	if err != nil {
		return usagef("DIR %s: %s: %v", dir, shardPlanName, err)
	}
	if miss := missingTiles(dir, hash, tp); len(miss) > 0 {
		list := miss
		if len(list) > 20 {
			list = append(list[:20:20], fmt.Sprintf("and %d more", len(miss)-20))
		}
		return usagef("DIR %s: %d of %d tiles missing (col,row: %s): run their shards again; nothing merged", dir, len(miss), tp.NTiles(), strings.Join(list, " "))
	}
	if err := checkPaths(dir, out); err != nil {
		return err
	}
	om := p.Output.Meta()
	wopts := gdal.WriteOptions{Format: j.format, DataType: om.DataType, NoData: float64(p.Output.NoData), HasNoData: p.Output.HasNoData}
	if out == "-" {
		wopts.Stdout = stdout
	}
	dst, err := gdal.Create(out, om, wopts)
	if err != nil {
		return err
	}
	rep, err := p.Merge(c.Context, func(col, row int, bands [][]float32) ([]step.TileReport, error) {
		ox, oy := tp.OutSpan(tp.Cols, col), tp.OutSpan(tp.Rows, row)
		return readTile(dir, hash, col, row, ox, oy, bands)
	}, dst)
	if err != nil {
		dst.Abort()
		return err
	}
	j.outType = p.OutputType
	if err := commitRestore(c.Context, j, raster.Meta{DataType: p.Output.InputType}, om, rep, dst, nil); err != nil {
		return err
	}
	fmt.Fprintf(stderr, "limpid: merged %d tiles from %s into %s\n", tp.NTiles(), dir, out)
	return nil
}
