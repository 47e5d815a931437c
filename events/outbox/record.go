package outbox

import (
	"encoding/binary"
	"errors"
	"fmt"
	"time"
)

// ErrCorrupt is returned when a stored record cannot be decoded.
var ErrCorrupt = errors.New("corrupt record")

// Record is one event waiting for delivery.
type Record struct {
	Seq     uint64    // assigned by Append: strictly increasing, never reused in one file (also across reopen)
	ID      string    // the event id (used as Nats-Msg-Id for de-duplication)
	Subject string    // NATS subject
	Data    []byte    // the event's JSON
	At      time.Time // when it was produced (for max age); Append sets a zero At to its clock's now
}

// size is what the record counts against Options.MaxBytes.
func (r Record) size() int64 { return int64(len(r.ID) + len(r.Subject) + len(r.Data)) }

// Stored value layout (the key is the big-endian Seq):
//
//	byte 0      format version (recordV1)
//	bytes 1..8  At as Unix nanoseconds, big-endian int64
//	uvarint     len(ID), then ID
//	uvarint     len(Subject), then Subject
//	rest        Data
const (
	recordV1   = 1
	headerSize = 1 + 8
)

// key is the bucket key of seq: big-endian, so that bbolt's byte order is
// Seq order.
func key(dst []byte, seq uint64) []byte { return binary.BigEndian.AppendUint64(dst, seq) }

// encodedSize is the length of r's stored value.
func encodedSize(r *Record) int {
	return headerSize + uvarintLen(len(r.ID)) + len(r.ID) + uvarintLen(len(r.Subject)) + len(r.Subject) + len(r.Data)
}

func uvarintLen(n int) int {
	l := 1
	for n >= 0x80 {
		n >>= 7
		l++
	}
	return l
}

// encode appends r's stored value to dst.
func encode(dst []byte, r *Record) []byte {
	dst = append(dst, recordV1)
	dst = binary.BigEndian.AppendUint64(dst, uint64(r.At.UnixNano()))
	dst = binary.AppendUvarint(dst, uint64(len(r.ID)))
	dst = append(dst, r.ID...)
	dst = binary.AppendUvarint(dst, uint64(len(r.Subject)))
	dst = append(dst, r.Subject...)
	return append(dst, r.Data...)
}

// header is the decoded fixed part of a stored value: enough to evict and
// account for a record without copying it.
type header struct {
	at          time.Time
	id, subject []byte // slices of the value
	data        []byte // slice of the value
}

func (h *header) size() int64 { return int64(len(h.id) + len(h.subject) + len(h.data)) }

// decodeHeader splits a stored value into its fields; the slices point
// into v.
func decodeHeader(v []byte) (header, error) {
	var h header
	if len(v) < headerSize {
		return h, fmt.Errorf("%w: %d bytes, want at least %d", ErrCorrupt, len(v), headerSize)
	}
	if v[0] != recordV1 {
		return h, fmt.Errorf("%w: format version %d, want %d", ErrCorrupt, v[0], recordV1)
	}
	h.at = time.Unix(0, int64(binary.BigEndian.Uint64(v[1:headerSize])))
	rest := v[headerSize:]
	var err error
	if h.id, rest, err = field(rest, "id"); err != nil {
		return h, err
	}
	if h.subject, rest, err = field(rest, "subject"); err != nil {
		return h, err
	}
	h.data = rest
	return h, nil
}

// field reads one uvarint-length-prefixed field from b.
func field(b []byte, name string) (f, rest []byte, err error) {
	n, l := binary.Uvarint(b)
	if l <= 0 {
		return nil, nil, fmt.Errorf("%w: bad %s length", ErrCorrupt, name)
	}
	b = b[l:]
	if n > uint64(len(b)) {
		return nil, nil, fmt.Errorf("%w: %s length %d, only %d bytes left", ErrCorrupt, name, n, len(b))
	}
	return b[:n], b[n:], nil
}

// decode makes a Record from a stored key and value, copying everything out
// of v (which bbolt only lends for the life of a transaction).
func decode(k, v []byte) (Record, error) {
	if len(k) != 8 {
		return Record{}, fmt.Errorf("%w: key of %d bytes, want 8", ErrCorrupt, len(k))
	}
	h, err := decodeHeader(v)
	if err != nil {
		return Record{}, err
	}
	r := Record{
		Seq:     binary.BigEndian.Uint64(k),
		ID:      string(h.id),
		Subject: string(h.subject),
		At:      h.at,
	}
	if len(h.data) > 0 {
		r.Data = append([]byte(nil), h.data...)
	}
	return r, nil
}
