package arrowio

import (
	"encoding/json"
	"errors"
	"fmt"
	"math"
	"strconv"

	"github.com/apache/arrow/go/v17/arrow"

	"limpid/raster"
)

// ContractVersion is the revision of the tile-stream contract written to
// every stream (metadata key KeyContract). Readers refuse other versions.
const ContractVersion = "1"

// Stream kinds (metadata key KeyKind).
const (
	// KindObserved: tiles of the scene as recorded (limpid tiles pack).
	KindObserved = "observed"
	// KindRestored: restored tiles, with the solver's per-tile record.
	KindRestored = "restored"
)

// Column names of the contract, in schema order.
const (
	ColSceneID      = "scene_id"
	ColBandNumber   = "band_number"
	ColBandName     = "band_name"
	ColTileColumn   = "tile_column"
	ColTileRow      = "tile_row"
	ColBufferX      = "buffer_x"
	ColBufferY      = "buffer_y"
	ColBufferWidth  = "buffer_width"
	ColBufferHeight = "buffer_height"
	ColHaloLeft     = "halo_left"
	ColHaloTop      = "halo_top"
	ColHaloRight    = "halo_right"
	ColHaloBottom   = "halo_bottom"
	ColPixels       = "pixels"
	// Restored streams only.
	ColUncertainty         = "uncertainty"
	ColIterations          = "iterations"
	ColFinalRelativeChange = "final_relative_change"
)

// Schema metadata keys.
const (
	KeyContract        = "limpid.contract_version"
	KeyKind            = "limpid.stream_kind"
	KeySceneID         = "limpid.scene_id"
	KeySceneWidth      = "limpid.scene_width"
	KeySceneHeight     = "limpid.scene_height"
	KeyGeoTransform    = "limpid.geotransform"
	KeyCRS             = "limpid.crs_wkt"
	KeyNoData          = "limpid.nodata"
	KeyDataType        = "limpid.source_data_type"
	KeyBands           = "limpid.bands"
	KeyDatasetMetadata = "limpid.dataset_metadata"
	KeyTileSize        = "limpid.tile_size"
	KeyOverlap         = "limpid.overlap"
	// KeyPlan (optional) is a scene plan's JSON (limpid plan; tiles pack
	// --plan): the restoration settings and decisions made on the whole
	// scene. Restored streams keep it.
	KeyPlan = "limpid.plan"
	// Restored streams only.
	KeySoftwareVersion = "limpid.software_version"
	KeyMethod          = "limpid.method"
	KeyPSF             = "limpid.psf"
	KeyParameters      = "limpid.parameters"
)

// Limits checked before anything is allocated.
const (
	// MaxTilePixels bounds buffer_width x buffer_height: a restored batch
	// with pixels and uncertainty stays below 256 MiB (2 x 120 MiB).
	MaxTilePixels = 30 << 20
	// MaxBatchBytes bounds the body of one IPC message.
	MaxBatchBytes = 256 << 20
	// MaxMetadataBytes bounds the flatbuffer metadata of one IPC message
	// (the schema message carries the CRS WKT and the band list).
	MaxMetadataBytes = 16 << 20
	// MaxBands bounds the number of bands a stream may declare.
	MaxBands = 65535
	// MaxSceneSide bounds the scene width and height.
	MaxSceneSide = 1 << 30
	// MaxTilesPerAxis bounds the tiling a header may ask for (the tile
	// layout is allocated from it).
	MaxTilesPerAxis = 1 << 16
)

// ErrStream is matched (errors.Is) by every error about the stream's content:
// not Arrow, truncated, wrong columns, inconsistent rows.
var ErrStream = errors.New("bad tile stream")

// StreamError locates a problem in a stream, like encoding/csv's ParseError.
// Batch is 1-based; 0 means the schema message (or, before any message was
// read, the input itself: empty, not Arrow) and -1 the stream as a whole
// (its end: a missing end-of-stream marker, data after it). Row is the
// 0-based row within the batch (-1 when not about a row); Column is "" when
// the problem is not about one column.
type StreamError struct {
	Batch  int
	Row    int
	Column string
	Err    error
}

func (e *StreamError) Error() string {
	where := "schema"
	if e.Batch > 0 {
		where = "batch " + strconv.Itoa(e.Batch)
		if e.Row >= 0 {
			where += " row " + strconv.Itoa(e.Row)
		}
	} else if e.Batch < 0 {
		where = "stream"
	}
	if e.Column != "" {
		where += " column " + e.Column
	}
	return where + ": " + e.Err.Error()
}

// Unwrap returns the underlying error.
func (e *StreamError) Unwrap() error { return e.Err }

// Is makes every StreamError match ErrStream.
func (e *StreamError) Is(target error) bool { return target == ErrStream }

// TileErrorf reports a problem with tile t's column.
func TileErrorf(t *Tile, column, format string, a ...any) error {
	return &StreamError{Batch: t.Batch, Row: t.Row, Column: column, Err: fmt.Errorf(format, a...)}
}

func schemaErrorf(column, format string, a ...any) error {
	return &StreamError{Batch: 0, Row: -1, Column: column, Err: fmt.Errorf(format, a...)}
}

// Band describes one band of the stream, in stream order (band_number 1 is
// Bands[0]).
type Band struct {
	// SourceBand is the 1-based band of the scene the tiles were cut from.
	SourceBand int
	raster.BandInfo
	// Background is the additive background the restoration used (restored
	// streams).
	Background float64
}

// Restoration records how a restored stream was made.
type Restoration struct {
	SoftwareVersion string
	// Method is the solver name ("grid").
	Method string
	// PSF is the PSF specification string.
	PSF string
	// Parameters is a JSON object of the restoration parameters.
	Parameters string
}

// Header is what a stream's schema metadata says about the scene and the
// tiling.
type Header struct {
	Kind    string
	SceneID string
	// Width, Height: the scene size in pixels.
	Width, Height int
	// DataType is the source's GDAL type name.
	DataType string
	Geo      raster.Geo
	// NoData is the scene's nodata value (HasNoData false: none); invalid
	// pixels travel as NaN either way.
	NoData    float64
	HasNoData bool
	Bands     []Band
	// Metadata is the scene's dataset metadata (default domain).
	Metadata map[string]string
	// Tile and Overlap: the tile core size and the halo (see README).
	Tile, Overlap int
	// Restored is set for KindRestored streams.
	Restored *Restoration
	// Plan is the scene plan's JSON (KeyPlan), "" without one.
	Plan string
}

// Tile is one row of a stream: one band of one tile, its pixel buffer (the
// core plus the halo, clipped to the scene) and, in restored streams, the
// solver's record.
type Tile struct {
	// Batch (1-based) and Row (0-based within the batch) locate the tile in
	// the stream it was read from, for messages.
	Batch, Row int
	SceneID    string
	// Band is the 0-based index into Header.Bands (band_number - 1).
	Band     int
	BandName string
	// Col, TileRow: the tile's column and row in the tiling, 0-based.
	Col, TileRow int
	// X, Y: scene position of the buffer's first pixel; W, H: buffer size.
	X, Y, W, H int
	// Halo on each side: the core is [X+HaloLeft, X+W-HaloRight) x
	// [Y+HaloTop, Y+H-HaloBottom).
	HaloLeft, HaloTop, HaloRight, HaloBottom int
	// Pix holds W*H values, row-major; NaN marks invalid pixels.
	Pix []float32
	// Uncertainty (restored streams): per-pixel standard error, nil = null
	// (the solver gives none).
	Uncertainty []float32
	Iterations  int
	Change      float64
}

// Schema returns the Arrow schema of a stream of the given kind with h's
// metadata.
func Schema(h *Header) (*arrow.Schema, error) {
	md, err := encodeMetadata(h)
	if err != nil {
		return nil, err
	}
	return arrow.NewSchema(fields(h.Kind), &md), nil
}

func fields(kind string) []arrow.Field {
	i32 := arrow.PrimitiveTypes.Int32
	fs := []arrow.Field{
		{Name: ColSceneID, Type: arrow.BinaryTypes.String},
		{Name: ColBandNumber, Type: i32},
		{Name: ColBandName, Type: arrow.BinaryTypes.String},
		{Name: ColTileColumn, Type: i32},
		{Name: ColTileRow, Type: i32},
		{Name: ColBufferX, Type: i32},
		{Name: ColBufferY, Type: i32},
		{Name: ColBufferWidth, Type: i32},
		{Name: ColBufferHeight, Type: i32},
		{Name: ColHaloLeft, Type: i32},
		{Name: ColHaloTop, Type: i32},
		{Name: ColHaloRight, Type: i32},
		{Name: ColHaloBottom, Type: i32},
		{Name: ColPixels, Type: arrow.ListOf(arrow.PrimitiveTypes.Float32)},
	}
	if kind == KindRestored {
		fs = append(fs,
			arrow.Field{Name: ColUncertainty, Type: arrow.ListOf(arrow.PrimitiveTypes.Float32), Nullable: true},
			arrow.Field{Name: ColIterations, Type: i32},
			arrow.Field{Name: ColFinalRelativeChange, Type: arrow.PrimitiveTypes.Float64},
		)
	}
	return fs
}

// bandJSON is one entry of the KeyBands list.
type bandJSON struct {
	SourceBand  int               `json:"source_band"`
	Description string            `json:"description"`
	ColorInterp string            `json:"color_interpretation"`
	NoData      *string           `json:"nodata"`
	Metadata    map[string]string `json:"metadata"`
	Background  *float64          `json:"background,omitempty"`
}

func fmtFloat(v float64) string { return strconv.FormatFloat(v, 'g', -1, 64) }

func encodeMetadata(h *Header) (arrow.Metadata, error) {
	if err := h.check(); err != nil {
		return arrow.Metadata{}, err
	}
	kv := map[string]string{
		KeyContract:     ContractVersion,
		KeyKind:         h.Kind,
		KeySceneID:      h.SceneID,
		KeySceneWidth:   strconv.Itoa(h.Width),
		KeySceneHeight:  strconv.Itoa(h.Height),
		KeyCRS:          h.Geo.WKT,
		KeyDataType:     h.DataType,
		KeyTileSize:     strconv.Itoa(h.Tile),
		KeyOverlap:      strconv.Itoa(h.Overlap),
		KeyNoData:       "none",
		KeyGeoTransform: "",
	}
	if h.Geo.HasTransform {
		b, err := json.Marshal(h.Geo.Transform)
		if err != nil {
			return arrow.Metadata{}, fmt.Errorf("arrowio: geotransform: %w", err)
		}
		kv[KeyGeoTransform] = string(b)
	}
	if h.HasNoData {
		kv[KeyNoData] = fmtFloat(h.NoData)
	}
	bands := make([]bandJSON, len(h.Bands))
	for i, b := range h.Bands {
		bj := bandJSON{SourceBand: b.SourceBand, Description: b.Description, ColorInterp: b.ColorInterp, Metadata: b.Metadata}
		if bj.Metadata == nil {
			bj.Metadata = map[string]string{}
		}
		if b.HasNoData {
			s := fmtFloat(b.NoData)
			bj.NoData = &s
		}
		if h.Kind == KindRestored {
			bg := b.Background
			bj.Background = &bg
		}
		bands[i] = bj
	}
	bb, err := json.Marshal(bands)
	if err != nil {
		return arrow.Metadata{}, fmt.Errorf("arrowio: bands: %w", err)
	}
	kv[KeyBands] = string(bb)
	dm := h.Metadata
	if dm == nil {
		dm = map[string]string{}
	}
	mb, err := json.Marshal(dm)
	if err != nil {
		return arrow.Metadata{}, fmt.Errorf("arrowio: dataset metadata: %w", err)
	}
	kv[KeyDatasetMetadata] = string(mb)
	if h.Plan != "" {
		kv[KeyPlan] = h.Plan
	}
	if h.Kind == KindRestored {
		kv[KeySoftwareVersion] = h.Restored.SoftwareVersion
		kv[KeyMethod] = h.Restored.Method
		kv[KeyPSF] = h.Restored.PSF
		kv[KeyParameters] = h.Restored.Parameters
	}
	return arrow.MetadataFrom(kv), nil
}

// check validates a header (both for writing and after reading).
func (h *Header) check() error {
	switch h.Kind {
	case KindObserved:
	case KindRestored:
		if h.Restored == nil {
			return schemaErrorf("", "metadata %s: a restored stream needs %s, %s, %s and %s", KeyKind, KeySoftwareVersion, KeyMethod, KeyPSF, KeyParameters)
		}
		var obj map[string]any
		if err := json.Unmarshal([]byte(h.Restored.Parameters), &obj); err != nil {
			return schemaErrorf("", "metadata %s is not a JSON object: %v", KeyParameters, err)
		}
	default:
		return schemaErrorf("", "metadata %s is %q, want %s or %s", KeyKind, h.Kind, KindObserved, KindRestored)
	}
	if h.Width < 1 || h.Width > MaxSceneSide || h.Height < 1 || h.Height > MaxSceneSide {
		return schemaErrorf("", "metadata %s x %s is %d x %d, want 1 to %d each", KeySceneWidth, KeySceneHeight, h.Width, h.Height, MaxSceneSide)
	}
	if _, ok := dataTypes[h.DataType]; !ok {
		return schemaErrorf("", "metadata %s is %q, want one of Byte, Int8, UInt16, Int16, UInt32, Int32, Float32, Float64", KeyDataType, h.DataType)
	}
	if h.Tile < 16 || h.Tile > 16384 {
		return schemaErrorf("", "metadata %s is %d, want 16 to 16384", KeyTileSize, h.Tile)
	}
	if (h.Width+h.Tile-1)/h.Tile > MaxTilesPerAxis || (h.Height+h.Tile-1)/h.Tile > MaxTilesPerAxis {
		return schemaErrorf("", "metadata %s %d makes more than %d tiles along a side of the %d x %d scene", KeyTileSize, h.Tile, MaxTilesPerAxis, h.Width, h.Height)
	}
	if h.Overlap < 0 || h.Overlap > h.Tile {
		return schemaErrorf("", "metadata %s is %d, want 0 to the tile size %d", KeyOverlap, h.Overlap, h.Tile)
	}
	if len(h.Bands) < 1 || len(h.Bands) > MaxBands {
		return schemaErrorf("", "metadata %s lists %d bands, want 1 to %d", KeyBands, len(h.Bands), MaxBands)
	}
	for i, b := range h.Bands {
		if b.SourceBand < 1 {
			return schemaErrorf("", "metadata %s entry %d: source_band %d must be >= 1", KeyBands, i+1, b.SourceBand)
		}
		if math.IsNaN(b.Background) || math.IsInf(b.Background, 0) || b.Background < 0 {
			return schemaErrorf("", "metadata %s entry %d: background %g must be finite and >= 0", KeyBands, i+1, b.Background)
		}
	}
	if h.Geo.HasTransform {
		for _, v := range h.Geo.Transform {
			if math.IsNaN(v) || math.IsInf(v, 0) {
				return schemaErrorf("", "metadata %s holds a non-finite number", KeyGeoTransform)
			}
		}
	}
	return nil
}

var dataTypes = map[string]bool{"Byte": true, "Int8": true, "UInt16": true, "Int16": true, "UInt32": true, "Int32": true, "Float32": true, "Float64": true}

// decodeMetadata reads a Header from schema metadata: the contract version
// first, then the keys in a fixed order (so that a stream with several
// problems always gets the same message), then the header's own checks.
func decodeMetadata(md arrow.Metadata) (*Header, error) {
	m := metaReader{md}
	if err := m.contract(); err != nil {
		return nil, err
	}
	h := &Header{}
	if err := m.scene(h); err != nil {
		return nil, err
	}
	if err := m.georeferencing(h); err != nil {
		return nil, err
	}
	bands, err := m.bands(h)
	if err != nil {
		return nil, err
	}
	if err := m.datasetMetadata(h); err != nil {
		return nil, err
	}
	if h.Kind == KindRestored {
		if err := m.restoration(h, bands); err != nil {
			return nil, err
		}
	}
	if i := md.FindKey(KeyPlan); i >= 0 {
		h.Plan = md.Values()[i]
	}
	if err := h.check(); err != nil {
		return nil, err
	}
	return h, nil
}

// metaReader reads the values of schema metadata keys; its errors name the
// key.
type metaReader struct{ md arrow.Metadata }

func (m metaReader) get(k string) (string, error) {
	i := m.md.FindKey(k)
	if i < 0 {
		return "", schemaErrorf("", "metadata key %s is missing", k)
	}
	return m.md.Values()[i], nil
}

// getInt reads an integer that fits in an int32 (the contract's columns).
func (m metaReader) getInt(k string) (int, error) {
	s, err := m.get(k)
	if err != nil {
		return 0, err
	}
	v, err := strconv.ParseInt(s, 10, 64)
	if err != nil || v < math.MinInt32 || v > math.MaxInt32 {
		return 0, schemaErrorf("", "metadata %s is %q, want an integer", k, clip(s))
	}
	return int(v), nil
}

// contract checks that the stream is a limpid tile stream of the version
// this package reads.
func (m metaReader) contract() error {
	v, err := m.get(KeyContract)
	if err != nil {
		return schemaErrorf("", "metadata key %s is missing: not a limpid tile stream", KeyContract)
	}
	if v != ContractVersion {
		return schemaErrorf("", "metadata %s is %q; this limpid reads version %s", KeyContract, clip(v), ContractVersion)
	}
	return nil
}

// scene reads the stream kind, the scene's identity and size, the tiling
// and the source data type.
func (m metaReader) scene(h *Header) error {
	var err error
	if h.Kind, err = m.get(KeyKind); err != nil {
		return err
	}
	if h.SceneID, err = m.get(KeySceneID); err != nil {
		return err
	}
	for _, p := range []struct {
		k string
		v *int
	}{{KeySceneWidth, &h.Width}, {KeySceneHeight, &h.Height}, {KeyTileSize, &h.Tile}, {KeyOverlap, &h.Overlap}} {
		if *p.v, err = m.getInt(p.k); err != nil {
			return err
		}
	}
	h.DataType, err = m.get(KeyDataType)
	return err
}

// georeferencing reads the CRS, the geotransform and the scene's nodata.
func (m metaReader) georeferencing(h *Header) error {
	var err error
	if h.Geo.WKT, err = m.get(KeyCRS); err != nil {
		return err
	}
	gt, err := m.get(KeyGeoTransform)
	if err != nil {
		return err
	}
	if gt != "" {
		var t []float64
		if err := json.Unmarshal([]byte(gt), &t); err != nil || len(t) != 6 {
			return schemaErrorf("", "metadata %s is %q, want a JSON array of 6 numbers or empty", KeyGeoTransform, clip(gt))
		}
		copy(h.Geo.Transform[:], t)
		h.Geo.HasTransform = true
	}
	nd, err := m.get(KeyNoData)
	if err != nil {
		return err
	}
	if nd != "none" {
		f, err := strconv.ParseFloat(nd, 64)
		if err != nil {
			return schemaErrorf("", "metadata %s is %q, want a number or none", KeyNoData, clip(nd))
		}
		h.NoData, h.HasNoData = f, true
	}
	return nil
}

// bands reads the band list into h.Bands and returns it as written, for the
// restored streams' background check.
func (m metaReader) bands(h *Header) ([]bandJSON, error) {
	bs, err := m.get(KeyBands)
	if err != nil {
		return nil, err
	}
	var bands []bandJSON
	if err := json.Unmarshal([]byte(bs), &bands); err != nil {
		return nil, schemaErrorf("", "metadata %s is not a JSON list of bands: %v", KeyBands, err)
	}
	for i, bj := range bands {
		b := Band{SourceBand: bj.SourceBand, BandInfo: raster.BandInfo{Description: bj.Description, ColorInterp: bj.ColorInterp, Metadata: bj.Metadata}}
		if b.Metadata == nil {
			b.Metadata = map[string]string{}
		}
		if bj.NoData != nil {
			f, err := strconv.ParseFloat(*bj.NoData, 64)
			if err != nil {
				return nil, schemaErrorf("", "metadata %s entry %d: nodata %q is not a number", KeyBands, i+1, clip(*bj.NoData))
			}
			b.NoData, b.HasNoData = f, true
		}
		if bj.Background != nil {
			b.Background = *bj.Background
		}
		h.Bands = append(h.Bands, b)
	}
	return bands, nil
}

// datasetMetadata reads the scene's dataset metadata (an empty map when the
// JSON is null).
func (m metaReader) datasetMetadata(h *Header) error {
	dm, err := m.get(KeyDatasetMetadata)
	if err != nil {
		return err
	}
	if err := json.Unmarshal([]byte(dm), &h.Metadata); err != nil {
		return schemaErrorf("", "metadata %s is not a JSON object of strings: %v", KeyDatasetMetadata, err)
	}
	if h.Metadata == nil {
		h.Metadata = map[string]string{}
	}
	return nil
}

// restoration reads a restored stream's record and checks that every band
// has its background.
func (m metaReader) restoration(h *Header, bands []bandJSON) error {
	r := &Restoration{}
	for _, p := range []struct {
		k string
		v *string
	}{{KeySoftwareVersion, &r.SoftwareVersion}, {KeyMethod, &r.Method}, {KeyPSF, &r.PSF}, {KeyParameters, &r.Parameters}} {
		var err error
		if *p.v, err = m.get(p.k); err != nil {
			return err
		}
	}
	h.Restored = r
	for i, bj := range bands {
		if bj.Background == nil {
			return schemaErrorf("", "metadata %s entry %d has no background (restored stream)", KeyBands, i+1)
		}
	}
	return nil
}

// clip shortens a quoted value for an error line.
func clip(s string) string {
	if len(s) > 40 {
		return s[:40] + "..."
	}
	return s
}
