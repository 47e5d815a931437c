package outbox

import (
	"bytes"
	"errors"
	"strings"
	"testing"
	"time"
)

func TestRecordEncoding(t *testing.T) {
	for _, r := range []Record{
		{Seq: 1, ID: "a", Subject: "s", Data: []byte(`{}`), At: time.Unix(0, 1)},
		{Seq: 2, At: time.Unix(1_700_000_000, 123)}, // all empty
		{Seq: 1 << 40, ID: strings.Repeat("i", 200), Subject: "tallyd.é.cam", Data: bytes.Repeat([]byte{0, 0xff}, 70_000),
			At: time.Date(2262, 1, 1, 0, 0, 0, 0, time.UTC)}, // multi-byte lengths
		{Seq: 3, ID: "before 1970", Subject: "s", At: time.Date(1969, 7, 20, 20, 17, 0, 0, time.UTC)},
	} {
		v := encode(nil, &r)
		if len(v) != encodedSize(&r) {
			t.Fatalf("encodedSize = %d, encoded %d bytes", encodedSize(&r), len(v))
		}
		got, err := decode(key(nil, r.Seq), v)
		if err != nil {
			t.Fatal(err)
		}
		if got.Seq != r.Seq || got.ID != r.ID || got.Subject != r.Subject || !bytes.Equal(got.Data, r.Data) || !got.At.Equal(r.At) {
			t.Fatalf("decoded %+v, want %+v", got, r)
		}
		h, _ := decodeHeader(v)
		if h.size() != r.size() {
			t.Fatalf("header size %d, record size %d", h.size(), r.size())
		}
	}
}

func TestRecordCorrupt(t *testing.T) {
	good := encode(nil, &Record{ID: "abc", Subject: "s.t", Data: []byte("x")})
	for _, c := range []struct {
		name string
		k, v []byte
		want string
	}{
		{"short key", []byte{1}, good, "corrupt record: key of 1 bytes, want 8"},
		{"empty", key(nil, 1), nil, "corrupt record: 0 bytes, want at least 9"},
		{"version", key(nil, 1), append([]byte{9}, good[1:]...), "corrupt record: format version 9, want 1"},
		{"no id length", key(nil, 1), good[:headerSize], "corrupt record: bad id length"},
		{"id cut", key(nil, 1), good[:headerSize+2], "corrupt record: id length 3, only 1 bytes left"},
		{"subject cut", key(nil, 1), good[:headerSize+1+3+1+1], "corrupt record: subject length 3, only 1 bytes left"},
	} {
		_, err := decode(c.k, c.v)
		if !errors.Is(err, ErrCorrupt) || err.Error() != c.want {
			t.Errorf("%s: %v, want %q", c.name, err, c.want)
		}
	}
}

// FuzzDecode: any stored value either decodes or fails with ErrCorrupt,
// never panics, and what decodes encodes back to the same record.
func FuzzDecode(f *testing.F) {
	f.Add(encode(nil, &Record{ID: "ev-1", Subject: "tallyd.a.b", Data: []byte(`{"x":1}`), At: time.Unix(5, 6)}))
	f.Add([]byte{1, 0, 0, 0, 0, 0, 0, 0, 0, 0x80})
	f.Add([]byte{})
	f.Fuzz(func(t *testing.T, v []byte) {
		r, err := decode(key(nil, 7), v)
		if err != nil {
			if !errors.Is(err, ErrCorrupt) {
				t.Fatalf("error %v is not ErrCorrupt", err)
			}
			return
		}
		again, err := decode(key(nil, 7), encode(nil, &r))
		if err != nil {
			t.Fatal(err)
		}
		if again.ID != r.ID || again.Subject != r.Subject || !bytes.Equal(again.Data, r.Data) || !again.At.Equal(r.At) {
			t.Fatalf("re-encoded %+v, want %+v", again, r)
		}
	})
}
