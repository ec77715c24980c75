package arrowio

import (
	"bytes"
	"encoding/binary"
	"errors"
	"fmt"
	"io"
	"math"
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
	scratch  []byte
}

func (m *msgReader) Retain() { atomic.AddInt64(&m.refs, 1) }

func (m *msgReader) Release() {
	if atomic.AddInt64(&m.refs, -1) == 0 && m.msg != nil {
		m.msg.Release()
		m.msg = nil
	}
}

// fail records and returns an error about the message being read: the
// schema (Batch 0) while no message has been read, else the next record batch.
func (m *msgReader) fail(format string, a ...any) error {
	e := &StreamError{Batch: m.batches + 1, Row: -1, Err: fmt.Errorf(format, a...)}
	if m.messages == 0 {
		e.Batch = 0
	}
	m.err = e
	return e
}

// Message implements ipc.MessageReader: it reads one encapsulated message
// (continuation marker, metadata size, flatbuffer metadata, body; Apache
// Arrow columnar format, "Encapsulated message format"), checking each part
// before it sizes a buffer from it. It returns io.EOF at the end-of-stream
// marker.
func (m *msgReader) Message() (*ipc.Message, error) {
	if m.err != nil {
		return nil, m.err
	}
	if m.msg != nil {
		m.msg.Release()
		m.msg = nil
	}
	size, err := m.readPrefix()
	if err != nil {
		return nil, err
	}
	meta, kind, bodyLen, err := m.readMetadata(size)
	if err != nil {
		return nil, err
	}
	body, err := m.readBody(bodyLen)
	if err != nil {
		return nil, err
	}
	m.msg = ipc.NewMessage(memory.NewBufferBytes(meta), body)
	body.Release()
	m.messages++
	if kind == ipc.MessageRecordBatch {
		m.batches++
	}
	return m.msg, nil
}

// readPrefix reads the continuation marker and the metadata size. At the
// end-of-stream marker (size 0) it notes eos and returns io.EOF.
func (m *msgReader) readPrefix() (int32, error) {
	var pre [8]byte
	n, err := io.ReadFull(m.r, pre[:4])
	switch {
	case n == 0 && errors.Is(err, io.EOF):
		if m.messages == 0 {
			return 0, m.fail("the input is empty (expected an Arrow IPC stream)")
		}
		return 0, m.fail("the stream ends without the end-of-stream marker (truncated)")
	case err != nil && (errors.Is(err, io.EOF) || errors.Is(err, io.ErrUnexpectedEOF)):
		return 0, m.fail("the stream is truncated inside a message header")
	case err != nil:
		return 0, m.fail("reading the input: %v", err)
	}
	if binary.LittleEndian.Uint32(pre[:4]) != continuation {
		if m.messages == 0 {
			if k, _ := io.ReadFull(m.r, pre[4:6]); k == 2 && bytes.Equal(pre[:6], []byte("ARROW1")) {
				return 0, m.fail("the input is an Arrow IPC file (random-access format); limpid reads the IPC stream format")
			}
			return 0, m.fail("the input is not an Arrow IPC stream (it does not start with the IPC continuation marker)")
		}
		return 0, m.fail("message %d does not start with the IPC continuation marker (corrupt stream)", m.messages+1)
	}
	if _, err := io.ReadFull(m.r, pre[4:8]); err != nil {
		return 0, m.fail("the stream is truncated inside a message header")
	}
	size := int32(binary.LittleEndian.Uint32(pre[4:8]))
	if size == 0 {
		if m.messages == 0 {
			return 0, m.fail("the stream ends before its schema")
		}
		m.eos = true
		return 0, io.EOF
	}
	return size, nil
}

// readMetadata reads and checks the flatbuffer metadata of a message of the
// given size: its structure, its kind (the schema first, then record
// batches only) and its declared body length.
func (m *msgReader) readMetadata(size int32) ([]byte, ipc.MessageType, int64, error) {
	if size < 0 || size > MaxMetadataBytes {
		return nil, 0, 0, m.fail("message metadata size %d is outside 1 to %d bytes", size, MaxMetadataBytes)
	}
	meta := make([]byte, size)
	if _, err := io.ReadFull(m.r, meta); err != nil {
		return nil, 0, 0, m.fail("the stream is truncated inside message metadata (%d bytes declared)", size)
	}
	kind, bodyLen, err := peekMessage(meta)
	if err == nil && kind == ipc.MessageSchema {
		err = verifySchema(meta)
	}
	if err == nil && kind == ipc.MessageRecordBatch {
		err = verifyBatch(meta, bodyLen)
	}
	if err != nil {
		return nil, 0, 0, m.fail("%v", err)
	}
	switch {
	case m.messages == 0 && kind != ipc.MessageSchema:
		return nil, 0, 0, m.fail("the first message is a %v, want the schema", kind)
	case m.messages > 0 && kind == ipc.MessageSchema:
		return nil, 0, 0, m.fail("a second schema message inside the stream (mixed schemas are not allowed)")
	case kind == ipc.MessageDictionaryBatch:
		return nil, 0, 0, m.fail("dictionary batches are not part of the tile-stream contract (use plain utf8 columns)")
	case kind != ipc.MessageSchema && kind != ipc.MessageRecordBatch:
		return nil, 0, 0, m.fail("unexpected %v message", kind)
	}
	if bodyLen < 0 || bodyLen > MaxBatchBytes {
		return nil, 0, 0, m.fail("message body size %d is outside 0 to %d bytes (one tile per batch, < 256 MiB)", bodyLen, MaxBatchBytes)
	}
	return meta, kind, bodyLen, nil
}

// readBody reads a message body of bodyLen bytes in chunks before sizing a
// buffer from the declared length: a short or lying input costs only what it
// really holds. The caller releases the buffer.
func (m *msgReader) readBody(bodyLen int64) (*memory.Buffer, error) {
	m.scratch = m.scratch[:0]
	for int64(len(m.scratch)) < bodyLen {
		k := int(min(bodyLen-int64(len(m.scratch)), 1<<20))
		o := len(m.scratch)
		m.scratch = append(m.scratch, make([]byte, k)...)
		if _, err := io.ReadFull(m.r, m.scratch[o:o+k]); err != nil {
			m.scratch = m.scratch[:0]
			return nil, m.fail("the stream is truncated inside a record batch (%d body bytes declared)", bodyLen)
		}
	}
	body := memory.NewResizableBuffer(m.mem)
	body.Resize(int(bodyLen))
	copy(body.Bytes(), m.scratch)
	if cap(m.scratch) > 4<<20 {
		m.scratch = nil // keep at most a few MiB between batches
	}
	return body, nil
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

// fb is a bounds-checked view of a flatbuffer.
type fb []byte

func (b fb) u32(o int) (int, bool) {
	if o < 0 || o+4 > len(b) {
		return 0, false
	}
	return int(binary.LittleEndian.Uint32(b[o:])), true
}

// table returns the vtable position and size of the table at t.
func (b fb) table(t int) (vt, vtSize int, ok bool) {
	if t < 0 || t+4 > len(b) {
		return 0, 0, false
	}
	vt = t - int(int32(binary.LittleEndian.Uint32(b[t:])))
	if vt < 0 || vt+4 > len(b) {
		return 0, 0, false
	}
	vtSize = int(binary.LittleEndian.Uint16(b[vt:]))
	if vtSize < 4 || vt+vtSize > len(b) {
		return 0, 0, false
	}
	return vt, vtSize, true
}

// field returns the position of field i of table t (0 when absent).
func (b fb) field(t, vt, vtSize, i int) int {
	p := 4 + 2*i
	if p+2 > vtSize {
		return 0
	}
	o := int(binary.LittleEndian.Uint16(b[vt+p:]))
	if o == 0 {
		return 0
	}
	return t + o
}

// header returns the offset of a Message's header table (Message.fbs:
// the root table's field 2).
func (b fb) header() (int, bool) {
	root, ok := b.u32(0)
	if !ok {
		return 0, false
	}
	vt, vs, ok := b.table(root)
	if !ok {
		return 0, false
	}
	hp := b.field(root, vt, vs, 2)
	if hp == 0 {
		return 0, false
	}
	return b.ref(hp)
}

// ref follows the uoffset stored at p.
func (b fb) ref(p int) (int, bool) {
	o, ok := b.u32(p)
	if !ok || p+o > len(b) {
		return 0, false
	}
	return p + o, true
}

// vector returns the first element position and the length of the vector
// referenced at p, checking that n elements of size elem fit.
func (b fb) vector(p, elem int) (start, n int, ok bool) {
	v, ok := b.ref(p)
	if !ok {
		return 0, 0, false
	}
	n, ok = b.u32(v)
	if !ok || n < 0 || v+4+n*elem > len(b) {
		return 0, 0, false
	}
	return v + 4, n, true
}

// verifySchema checks, before Arrow sizes slices from them, that the
// vectors of a Schema message (fields, their children and custom metadata;
// Arrow's Schema.fbs) fit in the message and that there are few fields.
func verifySchema(meta []byte) error {
	bad := errors.New("the schema message is not a valid Arrow flatbuffer")
	b := fb(meta)
	schema, ok := b.header()
	if !ok {
		return bad
	}
	budget := 256 // Field tables visited: the contract has under 40
	var fieldsAt func(t, fieldIndex, depth int) bool
	metaAt := func(t, vt, vs, i int) bool {
		if p := b.field(t, vt, vs, i); p != 0 {
			if _, _, ok := b.vector(p, 4); !ok {
				return false
			}
		}
		return true
	}
	fieldsAt = func(t, fieldIndex, depth int) bool {
		vt, vs, ok := b.table(t)
		if !ok || depth > 16 {
			return false
		}
		p := b.field(t, vt, vs, fieldIndex)
		if p == 0 {
			return true
		}
		start, n, ok := b.vector(p, 4)
		if !ok {
			return false
		}
		for i := 0; i < n; i++ {
			if budget--; budget < 0 {
				return false
			}
			f, ok := b.ref(start + 4*i)
			if !ok {
				return false
			}
			fvt, fvs, ok := b.table(f)
			// Field.fbs: children is field 5, custom_metadata field 6.
			if !ok || !metaAt(f, fvt, fvs, 6) || !fieldsAt(f, 5, depth+1) {
				return false
			}
		}
		return true
	}
	svt, svs, ok := b.table(schema)
	// Schema.fbs: fields is field 1, custom_metadata field 2.
	if !ok || !metaAt(schema, svt, svs, 2) || !fieldsAt(schema, 1, 0) {
		if budget < 0 {
			return errors.New("the schema declares too many fields for a tile stream")
		}
		return bad
	}
	return nil
}

// verifyBatch checks a RecordBatch message (Arrow's Message.fbs: length,
// nodes [FieldNode], buffers [Buffer], both 16-byte structs) before Arrow
// decodes it: a sane row count, vectors that fit, and every buffer inside
// the body.
func verifyBatch(meta []byte, bodyLen int64) error {
	bad := errors.New("the record batch message is not a valid Arrow flatbuffer")
	b := fb(meta)
	rb, ok := b.header()
	if !ok {
		return bad
	}
	rvt, rvs, ok := b.table(rb)
	if !ok {
		return bad
	}
	if p := b.field(rb, rvt, rvs, 0); p != 0 {
		if p+8 > len(b) {
			return bad
		}
		if n := int64(binary.LittleEndian.Uint64(b[p:])); n < 0 || n > math.MaxInt32 {
			return fmt.Errorf("the record batch declares %d rows", n)
		}
	}
	if p := b.field(rb, rvt, rvs, 1); p != 0 {
		if _, _, ok := b.vector(p, 16); !ok {
			return bad
		}
	}
	if p := b.field(rb, rvt, rvs, 2); p != 0 {
		start, n, ok := b.vector(p, 16)
		if !ok {
			return bad
		}
		for i := 0; i < n; i++ {
			off := int64(binary.LittleEndian.Uint64(b[start+16*i:]))
			ln := int64(binary.LittleEndian.Uint64(b[start+16*i+8:]))
			if off < 0 || ln < 0 || off > bodyLen || ln > bodyLen-off {
				return fmt.Errorf("buffer %d (offset %d, length %d) lies outside the %d-byte batch body", i, off, ln, bodyLen)
			}
		}
	}
	return nil
}
