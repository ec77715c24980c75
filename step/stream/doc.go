// Package stream is the tile-stream side of the restoration (limpid tiles
// and restore's arrow formats): stream headers, cutting a scene into stream
// tiles, restoring a stream tile by tile on the engine's tile pipeline, and
// assembling a stream back into a raster.
//
// Tile streams (arrowio): the same tiles, halos, solver and blend weights as
// Restore, with the tiles travelling one by one. A tile row of the stream
// carries the tile's input window InSpan clipped to the scene; the mirrored
// positions outside the scene are rebuilt from it, so a tile restored from a
// stream is the same Problem (same pixels, mask, background and Key) as in
// Restore, and Assembler adds the weighted windows in Restore's order:
// pack | restore | unpack gives Restore's output bit for bit.
package stream
