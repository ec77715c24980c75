// Package errs holds the engine's error types: a tile's failure with its
// location (TileError, after encoding/csv's ParseError) and a configuration
// error naming Config fields (FieldError, wrapping ErrConfig); step
// re-exports them by alias.
package errs
