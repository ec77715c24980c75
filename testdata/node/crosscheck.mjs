// Cross-implementation check of limpid's Arrow IPC tile stream with the
// Apache Arrow JavaScript library (npm apache-arrow, pinned in package.json).
// Run by cmd/limpid's TestNodeCrossCheck:
//
//   node crosscheck.mjs expected.json observed.arrows restored.arrows out.arrows
//
// expected.json (written by the Go test) holds the scene description read by
// GDAL from the GeoTIFF and the paths of raw little-endian float32 planes:
// the observed bands as GDAL reads them, and the restored bands of
// `limpid restore` written directly as a float32 GeoTIFF.
//
// 1. Reads limpid's observed stream with apache-arrow and checks the schema
//    (names, types), the metadata and every pixel against the GeoTIFF.
// 2. Reads limpid's restored stream and checks it against the directly
//    restored GeoTIFF where only one tile contributes (blend weight 1).
// 3. Builds a stream of its own with apache-arrow's builders (not limpid's
//    writer): tiles cut here from the GeoTIFF's pixels, in band-major order,
//    three tiles per record batch; the Go test restores it with limpid.
import { readFileSync, writeFileSync } from 'node:fs';
import {
  tableFromIPC, vectorFromArray, makeData, RecordBatch, RecordBatchStreamWriter,
  Schema, Field, Struct, Int32, Float32, Utf8, List,
} from 'apache-arrow';

const [expPath, obsPath, restPath, outPath] = process.argv.slice(2);
const exp = JSON.parse(readFileSync(expPath, 'utf8'));
let failures = 0;
function check(cond, msg) {
  if (!cond) {
    failures++;
    if (failures < 20) console.error('FAIL: ' + msg);
  }
}
function plane(path) {
  const b = readFileSync(path);
  return new Float32Array(b.buffer.slice(b.byteOffset, b.byteOffset + b.byteLength));
}
const W = exp.width, H = exp.height, NB = exp.bands.length;
const observed = plane(exp.observed_f32); // NB planes of W*H, band after band
const restored = plane(exp.restored_f32);
const same = (a, b) => (Number.isNaN(a) && Number.isNaN(b)) || a === b;

const intCols = ['band_number', 'tile_column', 'tile_row', 'buffer_x', 'buffer_y', 'buffer_width',
  'buffer_height', 'halo_left', 'halo_top', 'halo_right', 'halo_bottom'];
const baseCols = ['scene_id', 'band_number', 'band_name', ...intCols.slice(1, 3), ...intCols.slice(3), 'pixels'];

function checkSchema(table, kind) {
  const want = [...baseCols];
  if (kind === 'restored') want.push('uncertainty', 'iterations', 'final_relative_change');
  const names = table.schema.fields.map((f) => f.name);
  check(JSON.stringify(names) === JSON.stringify(want), `${kind}: columns ${names} want ${want}`);
  const types = Object.fromEntries(table.schema.fields.map((f) => [f.name, String(f.type)]));
  for (const c of intCols) check(types[c] === 'Int32', `${kind}: ${c} is ${types[c]}`);
  check(types.scene_id === 'Utf8' && types.band_name === 'Utf8', `${kind}: string columns ${types.scene_id} ${types.band_name}`);
  check(types.pixels === 'List<Float32>', `${kind}: pixels is ${types.pixels}`);
  if (kind === 'restored') {
    check(types.uncertainty === 'List<Float32>', `uncertainty is ${types.uncertainty}`);
    check(table.schema.fields.find((f) => f.name === 'uncertainty').nullable, 'uncertainty must be nullable');
    check(types.iterations === 'Int32' && types.final_relative_change === 'Float64', 'iterations / change types');
  }
  const md = table.schema.metadata;
  check(md.get('limpid.contract_version') === '1', 'contract version');
  check(md.get('limpid.stream_kind') === kind, `stream kind ${md.get('limpid.stream_kind')}`);
  check(Number(md.get('limpid.scene_width')) === W && Number(md.get('limpid.scene_height')) === H, 'scene size');
  check(JSON.stringify(JSON.parse(md.get('limpid.geotransform'))) === JSON.stringify(exp.geotransform), `geotransform ${md.get('limpid.geotransform')}`);
  check(md.get('limpid.crs_wkt') === exp.crs_wkt, 'CRS WKT');
  check(Number(md.get('limpid.nodata')) === exp.nodata, `nodata ${md.get('limpid.nodata')}`);
  check(md.get('limpid.source_data_type') === exp.data_type, `data type ${md.get('limpid.source_data_type')}`);
  check(Number(md.get('limpid.tile_size')) === exp.tile && Number(md.get('limpid.overlap')) === exp.overlap, 'tile and overlap');
  const bands = JSON.parse(md.get('limpid.bands'));
  check(bands.length === NB, 'band count');
  bands.forEach((b, i) => {
    check(b.description === exp.bands[i].description, `band ${i + 1} description ${b.description}`);
    check(b.source_band === exp.bands[i].source_band, `band ${i + 1} source band ${b.source_band}`);
  });
  if (kind === 'restored') {
    check(md.get('limpid.psf') === exp.psf, `psf ${md.get('limpid.psf')}`);
    check(md.get('limpid.method') === 'grid', 'method');
    const p = JSON.parse(md.get('limpid.parameters'));
    check(p.iterations === exp.iterations && p.tile === exp.tile && p.overlap === exp.overlap, `parameters ${md.get('limpid.parameters')}`);
  }
  check(table.batches.length === table.numRows, `one tile per batch: ${table.batches.length} batches, ${table.numRows} rows`);
  return md;
}

function rows(table) {
  const cols = Object.fromEntries(table.schema.fields.map((f) => [f.name, table.getChild(f.name)]));
  const out = [];
  for (let i = 0; i < table.numRows; i++) {
    const r = {};
    for (const [k, v] of Object.entries(cols)) r[k] = v.get(i);
    out.push(r);
  }
  return out;
}

// 1. the observed stream against the GeoTIFF
const obsTable = tableFromIPC(readFileSync(obsPath));
const obsMeta = checkSchema(obsTable, 'observed');
const covered = new Uint8Array(NB * W * H);
for (const r of rows(obsTable)) {
  const b = r.band_number - 1;
  check(r.scene_id === exp.scene_id, `scene id ${r.scene_id}`);
  check(r.band_name === exp.bands[b].description, `band name ${r.band_name}`);
  const px = r.pixels.toArray();
  check(px.length === r.buffer_width * r.buffer_height, 'pixel count');
  for (let y = 0; y < r.buffer_height; y++) {
    for (let x = 0; x < r.buffer_width; x++) {
      let want = observed[b * W * H + (r.buffer_y + y) * W + r.buffer_x + x];
      if (want === exp.nodata) want = NaN; // invalid pixels travel as NaN
      check(same(px[y * r.buffer_width + x], want), `observed band ${b + 1} pixel (${r.buffer_x + x},${r.buffer_y + y})`);
    }
  }
  for (let y = r.buffer_y + r.halo_top; y < r.buffer_y + r.buffer_height - r.halo_bottom; y++) {
    for (let x = r.buffer_x + r.halo_left; x < r.buffer_x + r.buffer_width - r.halo_right; x++) covered[b * W * H + y * W + x]++;
  }
}
check(covered.every((c) => c === 1), 'the tile cores cover every pixel of every band exactly once');

// 2. the restored stream against the directly restored GeoTIFF
const restTable = tableFromIPC(readFileSync(restPath));
checkSchema(restTable, 'restored');
const blend = Math.floor(exp.overlap / 2);
let compared = 0;
for (const r of rows(restTable)) {
  const b = r.band_number - 1;
  check(r.uncertainty === null, 'the grid solver gives no uncertainty (null)');
  check(r.iterations >= 1 && r.iterations <= exp.iterations, `iterations ${r.iterations}`);
  check(r.final_relative_change >= 0, 'final relative change');
  const px = r.pixels.toArray();
  // Where only this tile contributes: the core, less the blend ramps on inner sides.
  const x0 = r.buffer_x + r.halo_left + (r.halo_left > 0 ? blend : 0);
  const x1 = r.buffer_x + r.buffer_width - r.halo_right - (r.halo_right > 0 ? blend : 0);
  const y0 = r.buffer_y + r.halo_top + (r.halo_top > 0 ? blend : 0);
  const y1 = r.buffer_y + r.buffer_height - r.halo_bottom - (r.halo_bottom > 0 ? blend : 0);
  for (let y = y0; y < y1; y++) {
    for (let x = x0; x < x1; x++) {
      const got = px[(y - r.buffer_y) * r.buffer_width + x - r.buffer_x];
      let want = restored[b * W * H + y * W + x];
      if (want === exp.nodata) want = NaN; // the GeoTIFF writes invalid pixels as the nodata value
      check(same(got, want), `restored band ${b + 1} pixel (${x},${y}): ${got} vs ${want}`);
      compared++;
    }
  }
}
check(compared > W * H * NB / 4, `compared only ${compared} restored pixels`);

// 3. a stream built by apache-arrow: tiles cut here, band-major order, three
// tiles per batch. Split rule of the contract (README): cores of `tile`
// pixels, a last core shorter than 2 x blend merged into its neighbour.
function split(n, tile, bl) {
  const s = [];
  for (let a = 0; a < n; a += tile) s.push([a, Math.min(a + tile, n)]);
  if (s.length > 1 && s[s.length - 1][1] - s[s.length - 1][0] < 2 * bl) { s[s.length - 2][1] = n; s.pop(); }
  return s;
}
const cols = split(W, exp.tile, blend), rws = split(H, exp.tile, blend);
const sceneID = 'brannock-vale-js';
const tiles = [];
for (let b = 0; b < NB; b++) {
  for (let ty = 0; ty < rws.length; ty++) {
    for (let tx = 0; tx < cols.length; tx++) {
      const bx0 = Math.max(0, cols[tx][0] - exp.overlap), bx1 = Math.min(W, cols[tx][1] + exp.overlap);
      const by0 = Math.max(0, rws[ty][0] - exp.overlap), by1 = Math.min(H, rws[ty][1] + exp.overlap);
      const bw = bx1 - bx0, bh = by1 - by0;
      const px = new Float32Array(bw * bh);
      for (let y = 0; y < bh; y++) {
        for (let x = 0; x < bw; x++) {
          const v = observed[b * W * H + (by0 + y) * W + bx0 + x];
          px[y * bw + x] = v === exp.nodata ? NaN : v;
        }
      }
      tiles.push({ scene_id: sceneID, band_number: b + 1, band_name: exp.bands[b].description, tile_column: tx, tile_row: ty,
        buffer_x: bx0, buffer_y: by0, buffer_width: bw, buffer_height: bh,
        halo_left: cols[tx][0] - bx0, halo_top: rws[ty][0] - by0, halo_right: bx1 - cols[tx][1], halo_bottom: by1 - rws[ty][1], pixels: px });
    }
  }
}
const md = new Map(obsMeta); // the scene's contract metadata; the schema and batches are built here
md.set('limpid.scene_id', sceneID);
const pixType = new List(new Field('item', new Float32(), true));
const fields = [new Field('scene_id', new Utf8(), false), new Field('band_number', new Int32(), false), new Field('band_name', new Utf8(), false),
  ...intCols.slice(1).map((c) => new Field(c, new Int32(), false)), new Field('pixels', pixType, false)];
const schema = new Schema(fields, md);
const writer = new RecordBatchStreamWriter();
for (let i = 0; i < tiles.length; i += 3) {
  const group = tiles.slice(i, i + 3);
  const children = fields.map((f) => {
    const vals = group.map((t) => t[f.name]);
    if (f.name === 'pixels') return vectorFromArray(vals, pixType).data[0];
    if (f.type instanceof Utf8) return vectorFromArray(vals, new Utf8()).data[0];
    return vectorFromArray(Int32Array.from(vals)).data[0];
  });
  const data = makeData({ type: new Struct(fields), length: group.length, nullCount: 0, children });
  writer.write(new RecordBatch(schema, data));
}
writer.finish();
writeFileSync(outPath, writer.toUint8Array(true));

if (failures > 0) {
  console.error(`${failures} check(s) failed`);
  process.exit(1);
}
console.log(`ok: ${obsTable.numRows} observed and ${restTable.numRows} restored tiles checked, ${compared} restored pixels compared; wrote ${tiles.length} tiles in ${Math.ceil(tiles.length / 3)} batches`);
