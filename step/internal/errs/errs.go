package errs

import (
	"errors"
	"fmt"
	"strings"
)

// TileError locates a failure (like encoding/csv's ParseError).
type TileError struct {
	Band, Col, Row int
	Err            error
}

func (e *TileError) Error() string {
	return fmt.Sprintf("band %d tile (%d,%d): %v", e.Band+1, e.Col, e.Row, e.Err)
}

func (e *TileError) Unwrap() error { return e.Err }

// ErrConfig is wrapped by configuration errors (exit code 2).
var ErrConfig = errors.New("bad parameter")

// FieldError is a configuration error about fields of Config. It wraps
// ErrConfig. Its Text names fields in braces as Go selectors from Config
// ("{Iterations}", "{Particle.BurnIn}"); Error prints them bare, and a front
// end that shows them under other names (command-line flags) uses Format.
type FieldError struct {
	Field string // the field at fault
	Text  string // the message, field names in braces
}

// FieldErrorf is a FieldError about field with the formatted Text (field
// names in braces).
func FieldErrorf(field, format string, a ...any) error {
	return &FieldError{Field: field, Text: fmt.Sprintf(format, a...)}
}

func (e *FieldError) Error() string { return e.Format(func(f string) string { return f }) }

func (e *FieldError) Unwrap() error { return ErrConfig }

// Format is the message with every braced field name replaced by name(field).
func (e *FieldError) Format(name func(field string) string) string {
	var b strings.Builder
	b.WriteString(ErrConfig.Error() + ": ")
	t := e.Text
	for {
		i := strings.IndexByte(t, '{')
		j := strings.IndexByte(t[max(i, 0):], '}')
		if i < 0 || j < 0 {
			b.WriteString(t)
			return b.String()
		}
		b.WriteString(t[:i])
		b.WriteString(name(t[i+1 : i+j]))
		t = t[i+j+1:]
	}
}
