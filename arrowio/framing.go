package arrowio

import (
	"bytes"
	"encoding/binary"
	"errors"
	"fmt"
	"io"
	"sync/atomic"

	"github.com/apache/arrow/go/v17/arrow/ipc"
	"github.com/apache/arrow/go/v17/arrow/memory"
)

// continuation is the IPC stream's message prefix (Arrow IPC specification,
// "Encapsulated message format": 0xFFFFFFFF, then the int32 metadata size).
const continuation = 0xFFFFFFFF

// guardAlloc refuses any single allocation above MaxBatchBytes with a
// (recoverable) panic, so that sizes declared inside a message (decompressed
// buffer lengths) cannot make the process allocate without bound. The IPC
// reader recovers its panics into errors.
type guardAlloc struct{ memory.Allocator }

type errAllocTooLarge int

func (e errAllocTooLarge) Error() string {
	return fmt.Sprintf("a buffer of %d bytes exceeds the %d MiB limit of one batch", int(e), MaxBatchBytes>>20)
}

func (g guardAlloc) Allocate(size int) []byte {
	if size < 0 || size > MaxBatchBytes {
		panic(errAllocTooLarge(size))
	}
	return g.Allocator.Allocate(size)
}

func (g guardAlloc) Reallocate(size int, b []byte) []byte {
	if size < 0 || size > MaxBatchBytes {
		panic(errAllocTooLarge(size))
	}
	return g.Allocator.Reallocate(size, b)
}

// msgReader is an ipc.MessageReader that checks the framing of every message
// (continuation marker, metadata and body sizes, message order) before it
// allocates, and remembers whether the end-of-stream marker was seen.
type msgReader struct {
	r    io.Reader
	mem  memory.Allocator
	refs int64
	msg  *ipc.Message

	messages int  // messages read (schema included)
	batches  int  // record batch messages read
	eos      bool // end-of-stream marker seen
	err      error
}

func (m *msgReader) Retain() { atomic.AddInt64(&m.refs, 1) }

func (m *msgReader) Release() {
	if atomic.AddInt64(&m.refs, -1) == 0 && m.msg != nil {
		m.msg.Release()
		m.msg = nil
	}
}

// where names the message being read for errors: the schema, or the batch.
func (m *msgReader) fail(format string, a ...any) error {
	e := &StreamError{Batch: m.batches + 1, Row: -1, Err: fmt.Errorf(format, a...)}
	if m.messages == 0 {
		e.Batch = 0
	}
	m.err = e
	return e
}

func (m *msgReader) Message() (*ipc.Message, error) {
	if m.err != nil {
		return nil, m.err
	}
	if m.msg != nil {
		m.msg.Release()
		m.msg = nil
	}
	var pre [8]byte
	n, err := io.ReadFull(m.r, pre[:4])
	switch {
	case n == 0 && errors.Is(err, io.EOF):
		if m.messages == 0 {
			return nil, m.fail("the input is empty (expected an Arrow IPC stream)")
		}
		return nil, m.fail("the stream ends without the end-of-stream marker (truncated)")
	case err != nil && (errors.Is(err, io.EOF) || errors.Is(err, io.ErrUnexpectedEOF)):
		return nil, m.fail("the stream is truncated inside a message header")
	case err != nil:
		return nil, m.fail("reading the input: %v", err)
	}
	if binary.LittleEndian.Uint32(pre[:4]) != continuation {
		if m.messages == 0 {
			if k, _ := io.ReadFull(m.r, pre[4:6]); k == 2 && bytes.Equal(pre[:6], []byte("ARROW1")) {
				return nil, m.fail("the input is an Arrow IPC file (random-access format); limpid reads the IPC stream format")
			}
			return nil, m.fail("the input is not an Arrow IPC stream (it does not start with the IPC continuation marker)")
		}
		return nil, m.fail("message %d does not start with the IPC continuation marker (corrupt stream)", m.messages+1)
	}
	if _, err := io.ReadFull(m.r, pre[4:8]); err != nil {
		return nil, m.fail("the stream is truncated inside a message header")
	}
	size := int32(binary.LittleEndian.Uint32(pre[4:8]))
	if size == 0 {
		if m.messages == 0 {
			return nil, m.fail("the stream ends before its schema")
		}
		m.eos = true
		return nil, io.EOF
	}
	if size < 0 || size > MaxMetadataBytes {
		return nil, m.fail("message metadata size %d is outside 1 to %d bytes", size, MaxMetadataBytes)
	}
	meta := make([]byte, size)
	if _, err := io.ReadFull(m.r, meta); err != nil {
		return nil, m.fail("the stream is truncated inside message metadata (%d bytes declared)", size)
	}
	kind, bodyLen, err := peekMessage(meta)
	if err != nil {
		return nil, m.fail("%v", err)
	}
	switch {
	case m.messages == 0 && kind != ipc.MessageSchema:
		return nil, m.fail("the first message is a %v, want the schema", kind)
	case m.messages > 0 && kind == ipc.MessageSchema:
		return nil, m.fail("a second schema message inside the stream (mixed schemas are not allowed)")
	case kind == ipc.MessageDictionaryBatch:
		return nil, m.fail("dictionary batches are not part of the tile-stream contract (use plain utf8 columns)")
	case kind != ipc.MessageSchema && kind != ipc.MessageRecordBatch:
		return nil, m.fail("unexpected %v message", kind)
	}
	if bodyLen < 0 || bodyLen > MaxBatchBytes {
		return nil, m.fail("message body size %d is outside 0 to %d bytes (one tile per batch, < 256 MiB)", bodyLen, MaxBatchBytes)
	}
	body := memory.NewResizableBuffer(m.mem)
	body.Resize(int(bodyLen))
	if _, err := io.ReadFull(m.r, body.Bytes()); err != nil {
		body.Release()
		return nil, m.fail("the stream is truncated inside a record batch (%d body bytes declared)", bodyLen)
	}
	m.msg = ipc.NewMessage(memory.NewBufferBytes(meta), body)
	body.Release()
	m.messages++
	if kind == ipc.MessageRecordBatch {
		m.batches++
	}
	return m.msg, nil
}

// peekMessage reads the header type and body length of a flatbuffer Message
// (Arrow's Message.fbs: table Message { version: short; header: union (type
// byte at field 1); bodyLength: long (field 3) }) with bounds checks, so that
// a corrupt message is refused before any buffer is sized from it.
func peekMessage(b []byte) (ipc.MessageType, int64, error) {
	bad := errors.New("message metadata is not a valid Arrow flatbuffer Message")
	u32 := func(o int) (uint32, bool) {
		if o < 0 || o+4 > len(b) {
			return 0, false
		}
		return binary.LittleEndian.Uint32(b[o:]), true
	}
	root, ok := u32(0)
	if !ok || int(root) < 0 || int(root)+4 > len(b) {
		return 0, 0, bad
	}
	t := int(root)
	so := int32(binary.LittleEndian.Uint32(b[t:]))
	vt := t - int(so)
	if vt < 0 || vt+4 > len(b) {
		return 0, 0, bad
	}
	vtSize := int(binary.LittleEndian.Uint16(b[vt:]))
	if vtSize < 4 || vt+vtSize > len(b) {
		return 0, 0, bad
	}
	field := func(i int) int {
		p := 4 + 2*i
		if p+2 > vtSize {
			return 0
		}
		return int(binary.LittleEndian.Uint16(b[vt+p:]))
	}
	var kind ipc.MessageType
	if o := field(1); o != 0 {
		if t+o+1 > len(b) {
			return 0, 0, bad
		}
		kind = ipc.MessageType(b[t+o])
	}
	var body int64
	if o := field(3); o != 0 {
		if t+o+8 > len(b) {
			return 0, 0, bad
		}
		body = int64(binary.LittleEndian.Uint64(b[t+o:]))
	}
	if field(2) == 0 {
		return 0, 0, bad
	}
	return kind, body, nil
}
