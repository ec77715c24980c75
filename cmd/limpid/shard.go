package main

import (
	"context"
	"crypto/sha256"
	"encoding/binary"
	"encoding/hex"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"math"
	"os"
	"path/filepath"
	"strconv"
	"strings"

	"limpid/raster"
	"limpid/raster/gdal"
	"limpid/step"
	"limpid/step/plan"
)

// Shard directories: DIR/plan.json (the plan, copied by every shard) and
// one GeoTIFF per tile, tile-HASH-cCOL-rROW.tif (Float32, every output band,
// the blend-weighted window, NaN where the input is invalid). HASH is the
// plan's hash, so a retried or duplicated shard skips the tiles already
// present and a directory cannot mix plans. Each file is written under a
// temporary name and renamed when complete.

const shardPlanName = "plan.json"

// Tile file metadata keys.
const (
	tileKeyPlan    = "LIMPID_PLAN"
	tileKeyTile    = "LIMPID_TILE"         // "COL,ROW"
	tileKeyReports = "LIMPID_TILE_REPORTS" // JSON: one step.TileReport per band
	tileKeySum     = "LIMPID_TILE_SHA256"  // SHA-256 of the float32 bits, bands in order
)

func tileName(hash string, col, row int) string {
	return fmt.Sprintf("tile-%s-c%d-r%d.tif", hash, col, row)
}

// tileHash is the SHA-256 of the bands' float32 bits (little-endian).
func tileHash(bands [][]float32) string {
	h := sha256.New()
	var b [4]byte
	for _, band := range bands {
		for _, v := range band {
			binary.LittleEndian.PutUint32(b[:], math.Float32bits(v))
			h.Write(b[:])
		}
	}
	return hex.EncodeToString(h.Sum(nil))
}

// foreignTiles lists the tile files in dir that belong to another plan.
func foreignTiles(dir, hash string) ([]string, error) {
	ents, err := os.ReadDir(dir)
	if err != nil {
		return nil, usagef("DIR %s: %v", dir, errors.Unwrap(err))
	}
	var out []string
	for _, e := range ents {
		n := e.Name()
		if strings.HasPrefix(n, "tile-") && strings.HasSuffix(n, ".tif") && !strings.HasPrefix(n, "tile-"+hash+"-") {
			out = append(out, n)
		}
	}
	return out, nil
}

// shardDir prepares DIR for plan p: created when missing (its parent must
// exist), refused when it holds another plan; the plan is copied in.
func shardDir(dir string, p *plan.File, hash string) error {
	if dir == "-" {
		return usagef("DIR -: restore --shard writes one file per tile into a directory, not to stdout")
	}
	if st, err := os.Stat(dir); err != nil {
		if err := os.Mkdir(dir, 0o755); err != nil && !errors.Is(err, os.ErrExist) {
			return usagef("DIR %s: cannot create: %v", dir, errors.Unwrap(err))
		}
	} else if !st.IsDir() {
		return usagef("DIR %s is not a directory (restore --shard writes one file per tile into a directory)", dir)
	}
	pp := filepath.Join(dir, shardPlanName)
	if _, err := os.Stat(pp); err == nil {
		q, err := readPlan("DIR", pp)
		if err != nil {
			return err
		}
		if q.Hash() != hash {
			return usagef("DIR %s holds another plan's tiles (plan hash %s, this plan %s): use an empty directory per plan", dir, q.Hash(), hash)
		}
	} else {
		b, err := json.MarshalIndent(p, "", "  ")
		if err != nil {
			return err
		}
		if err := writeUnique(pp, append(b, '\n')); err != nil {
			return err
		}
	}
	if f, err := foreignTiles(dir, hash); err != nil {
		return err
	} else if len(f) > 0 {
		return usagef("DIR %s holds another plan's tiles (%s): use an empty directory per plan", dir, f[0])
	}
	return nil
}

// pendingTile collects a tile's bands until the last one arrives.
type pendingTile struct {
	ox, oy step.Span
	bands  [][]float32
	reps   []step.TileReport
}

// runShard restores shard si of sn into dir.
func runShard(ctx context.Context, p *plan.File, planPath string, cfg step.Config, in, dir string, si, sn int, stderr io.Writer) error {
	hash := p.Hash()
	if err := shardDir(dir, p, hash); err != nil {
		return err
	}
	tp, err := p.Tiling()
	if err != nil {
		return usagef("--plan %s: %v", planPath, err)
	}
	if len(p.Tiles) != tp.NTiles() {
		return usagef("--plan %s: lists %d tiles, its tiling has %d", planPath, len(p.Tiles), tp.NTiles())
	}
	assign := plan.Assign(p.Tiles, sn)
	nc := len(tp.Cols)
	mine, present := 0, 0
	need := map[[2]int]bool{}
	for i, s := range assign {
		if s != si {
			continue
		}
		mine++
		col, row := i%nc, i/nc
		if _, err := os.Stat(filepath.Join(dir, tileName(hash, col, row))); err == nil {
			// A present tile is kept when it reads back whole.
			ox, oy := tp.OutSpan(tp.Cols, col), tp.OutSpan(tp.Rows, row)
			buf := make([][]float32, len(p.Bands))
			for b := range buf {
				buf[b] = make([]float32, ox.Len()*oy.Len())
			}
			if _, err := readTile(dir, hash, col, row, ox, oy, buf); err == nil {
				present++
				continue
			}
			fmt.Fprintf(stderr, "limpid: shard %d/%d: tile %s is damaged: restoring it again\n", si, sn, tileName(hash, col, row))
		}
		need[[2]int{col, row}] = true
	}
	nb := len(p.Bands)
	pending := map[[2]int]*pendingTile{}
	written := 0
	put := func(k step.TileKey, ox, oy step.Span, out []float32, res step.Result) error {
		key := [2]int{k.Col, k.Row}
		pt := pending[key]
		if pt == nil {
			pt = &pendingTile{ox: ox, oy: oy, bands: make([][]float32, nb), reps: make([]step.TileReport, nb)}
			pending[key] = pt
		}
		pt.bands[k.Band] = append(pt.bands[k.Band][:0], out...)
		pt.reps[k.Band] = step.TileReport{Col: k.Col, Row: k.Row, Iterations: res.Iterations, Change: res.Change, Flat: res.Flat, Changes: res.Changes}
		if k.Band < nb-1 {
			return nil
		}
		delete(pending, key)
		written++
		return writeTile(filepath.Join(dir, tileName(hash, k.Col, k.Row)), hash, k.Col, k.Row, pt)
	}
	if len(need) > 0 {
		src, done, err := openRaster(in, nil)
		if err != nil {
			return err
		}
		defer done()
		defer src.Close()
		cfg.Tiles = &step.TileSink{Need: func(col, row int) bool { return need[[2]int{col, row}] }, Put: put}
		if _, err := step.Restore(ctx, src, p.Bands, nil, cfg); err != nil {
			return err
		}
	}
	fmt.Fprintf(stderr, "limpid: shard %d/%d: %d of its %d tiles restored into %s, %d already there\n", si, sn, written, mine, dir, present)
	return nil
}

// writeTile writes one tile file atomically (gdal.Writer: a temporary name
// in dir, renamed on Commit).
func writeTile(path, hash string, col, row int, pt *pendingTile) error {
	reps, err := json.Marshal(pt.reps)
	if err != nil {
		return err
	}
	meta := raster.Meta{Width: pt.ox.Len(), Height: pt.oy.Len(), DataType: "Float32", Bands: make([]raster.BandInfo, len(pt.bands)),
		Metadata: map[string]string{tileKeyPlan: hash, tileKeyTile: fmt.Sprintf("%d,%d", col, row), tileKeyReports: string(reps), tileKeySum: tileHash(pt.bands)}}
	return gdal.WriteFloat32(path, meta, pt.bands, gdal.WriteOptions{Format: gdal.GTiff, DataType: "Float32"})
}

// readTile reads tile (col, row) of the plan with hash from dir into out
// (every band, the window ox x oy), checking that it is whole.
func readTile(dir, hash string, col, row int, ox, oy step.Span, out [][]float32) ([]step.TileReport, error) {
	name := tileName(hash, col, row)
	path := filepath.Join(dir, name)
	bad := func(format string, a ...any) error {
		return usagef("tile %s: %s: cut short or damaged (run its shard again: it replaces the file)", path, fmt.Sprintf(format, a...))
	}
	r, err := gdal.Open(path)
	if err != nil {
		return nil, bad("not readable")
	}
	defer r.Close()
	m := r.Meta()
	if m.Width != ox.Len() || m.Height != oy.Len() || len(m.Bands) != len(out) || m.DataType != "Float32" {
		return nil, bad("%dx%d, %d bands, %s; the plan's tile is %dx%d, %d bands, Float32", m.Width, m.Height, len(m.Bands), m.DataType, ox.Len(), oy.Len(), len(out))
	}
	if m.Metadata[tileKeyPlan] != hash || m.Metadata[tileKeyTile] != fmt.Sprintf("%d,%d", col, row) {
		return nil, bad("made for plan %q tile %q", m.Metadata[tileKeyPlan], m.Metadata[tileKeyTile])
	}
	all := make([]int, len(out))
	for i := range all {
		all[i] = i
	}
	if err := r.ReadRows(0, m.Height, all, out); err != nil {
		return nil, bad("its pixels cannot be read")
	}
	if tileHash(out) != m.Metadata[tileKeySum] {
		return nil, bad("its pixels do not match their checksum")
	}
	var reps []step.TileReport
	if err := json.Unmarshal([]byte(m.Metadata[tileKeyReports]), &reps); err != nil || len(reps) != len(out) {
		return nil, bad("no tile reports")
	}
	return reps, nil
}

// missingTiles lists the plan's tiles without a file in dir, as "c,r".
func missingTiles(dir, hash string, tp step.Plan) []string {
	var out []string
	for row := range tp.Rows {
		for col := range tp.Cols {
			if _, err := os.Stat(filepath.Join(dir, tileName(hash, col, row))); err != nil {
				out = append(out, strconv.Itoa(col)+","+strconv.Itoa(row))
			}
		}
	}
	return out
}
