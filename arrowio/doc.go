// Package arrowio is limpid's tile-stream contract: a scene cut into tiles
// (one row per band and tile, pixel buffers with their halo) carried as an
// Apache Arrow IPC stream, so that any Arrow-speaking engine can fan tiles out
// to limpid and gather them back.
//
// The wire format is the Arrow columnar format's IPC streaming format
// (Apache Arrow specification, "Serialization and Interprocess Communication
// (IPC)": a Schema message, record batch messages, an end-of-stream marker).
// The columns and schema metadata keys are listed in README.md ("Arrow tile
// streams") and defined in contract.go; ContractVersion names the revision.
//
// Reader validates everything it reads: message framing and sizes are
// checked before anything is allocated (a Message's declared metadata and
// body sizes are bounded by MaxMetadataBytes and MaxBatchBytes, and any single
// allocation by the allocator guard), then the schema, then every row of every
// batch. Errors are *StreamError values naming the batch, row and column; they
// match ErrStream with errors.Is.
//
// Writer writes one tile per record batch, uncompressed by default (zstd or
// lz4 on request), and ends the stream with the end-of-stream marker only on
// Close; Abandon releases it without the marker, so a consumer of a failed
// run sees a stream that stops after the last complete batch.
//
// Memory: the allocator is chosen at the I/O edge (WithAllocator); records
// are released as soon as their tile is copied out, so a Reader holds one
// batch at a time.
package arrowio
