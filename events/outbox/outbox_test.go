package outbox

import (
	"bytes"
	"errors"
	"fmt"
	"math/rand/v2"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"go.etcd.io/bbolt"
)

// epoch is the time of event 0; clock is an hour later, so that the test
// events are young unless a test says otherwise.
var epoch = time.Unix(1_700_000_000, 0)

func clock() time.Time { return epoch.Add(time.Hour) }

// open opens an outbox in a fresh temporary directory (on clock unless
// o.Now is set) and closes it at the end of the test.
func open(t testing.TB, o Options) *Outbox {
	t.Helper()
	if o.Now == nil {
		o.Now = clock
	}
	ob, err := Open(filepath.Join(t.TempDir(), "outbox.db"), o)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { _ = ob.Close() })
	return ob
}

// event is record number k of a deterministic stream: its id, subject and
// data can be checked after a reopen or a crash. Data is n bytes long
// (n >= 32).
func event(k uint64, n int) Record {
	head := fmt.Sprintf(`{"id":"ev-%d","pad":"`, k)
	data := make([]byte, 0, n)
	data = append(data, head...)
	for len(data) < n-2 {
		data = append(data, byte('a'+(k+uint64(len(data)))%26))
	}
	data = append(data, `"}`...)
	return Record{
		ID:      fmt.Sprintf("ev-%d", k),
		Subject: fmt.Sprintf("tallyd.site.cam%d.door.in", k%3),
		Data:    data,
		At:      epoch.Add(time.Duration(k) * time.Microsecond),
	}
}

// checkEvent fails unless r is event(k, n) for its own Seq k.
func checkEvent(t testing.TB, r Record, n int) {
	t.Helper()
	want := event(r.Seq, n)
	if r.ID != want.ID || r.Subject != want.Subject || !bytes.Equal(r.Data, want.Data) || !r.At.Equal(want.At) {
		t.Fatalf("record %d = {%s %s %q %v}, want {%s %s %q %v}", r.Seq, r.ID, r.Subject, r.Data, r.At,
			want.ID, want.Subject, want.Data, want.At)
	}
}

// events makes records from..to (inclusive) of the stream.
func events(from, to uint64, n int) []Record {
	var rs []Record
	for k := from; k <= to; k++ {
		rs = append(rs, event(k, n))
	}
	return rs
}

// readAll reads every pending record, in pages of 7 to cross page bounds.
func readAll(t testing.TB, ob *Outbox) []Record {
	t.Helper()
	var all []Record
	after := uint64(0)
	for {
		rs, err := ob.Read(after, 7)
		if err != nil {
			t.Fatal(err)
		}
		if len(rs) == 0 {
			return all
		}
		all = append(all, rs...)
		after = rs[len(rs)-1].Seq
	}
}

func seqsOf(rs []Record) []uint64 {
	s := make([]uint64, len(rs))
	for i, r := range rs {
		s[i] = r.Seq
	}
	return s
}

func TestAppendReadOrder(t *testing.T) {
	ob := open(t, Options{})
	in := events(1, 50, 100)
	out, err := ob.Append(in)
	if err != nil {
		t.Fatal(err)
	}
	for i, r := range out {
		if r.Seq != uint64(i+1) {
			t.Fatalf("out[%d].Seq = %d, want %d", i, r.Seq, i+1)
		}
		if in[i].Seq != 0 {
			t.Fatalf("Append changed its argument: in[%d].Seq = %d", i, in[i].Seq)
		}
	}
	all := readAll(t, ob)
	if len(all) != 50 {
		t.Fatalf("read %d records, want 50", len(all))
	}
	for i, r := range all {
		if r.Seq != uint64(i+1) {
			t.Fatalf("record %d has Seq %d, want %d", i, r.Seq, i+1)
		}
		checkEvent(t, r, 100)
	}
	// Read honours after and max.
	rs, err := ob.Read(47, 2)
	if err != nil {
		t.Fatal(err)
	}
	if got := seqsOf(rs); fmt.Sprint(got) != "[48 49]" {
		t.Fatalf("Read(47, 2) = %v, want [48 49]", got)
	}
	if rs, _ := ob.Read(50, 10); len(rs) != 0 {
		t.Fatalf("Read(50, 10) = %v, want none", seqsOf(rs))
	}
	if rs, _ := ob.Read(^uint64(0), 10); len(rs) != 0 {
		t.Fatalf("Read(max, 10) = %v, want none", seqsOf(rs))
	}
	// A zero At is set to the clock's now.
	now := time.Date(2025, 3, 1, 12, 0, 0, 0, time.UTC)
	ob.now = func() time.Time { return now }
	out, err = ob.Append([]Record{{ID: "x", Subject: "s"}})
	if err != nil {
		t.Fatal(err)
	}
	if !out[0].At.Equal(now) {
		t.Fatalf("At = %v, want the clock's %v", out[0].At, now)
	}
	if rs, _ := ob.Read(50, 1); len(rs) != 1 || !rs[0].At.Equal(now) || rs[0].Data != nil {
		t.Fatalf("Read(50, 1) = %+v, want At %v and no data", rs, now)
	}
}

func TestReadMaxMustBePositive(t *testing.T) {
	ob := open(t, Options{})
	_, err := ob.Read(0, 0)
	want := fmt.Sprintf("outbox %s: read: invalid option: max 0, want at least 1", ob.Path())
	if !errors.Is(err, ErrInvalidOption) || err.Error() != want {
		t.Fatalf("Read(0, 0) error = %v, want %q", err, want)
	}
}

func TestDeleteMissingSeqs(t *testing.T) {
	ob := open(t, Options{})
	if _, err := ob.Append(events(1, 10, 64)); err != nil {
		t.Fatal(err)
	}
	// 3 twice, 11 and 1000 never existed, 0 is never a Seq.
	if err := ob.Delete([]uint64{3, 3, 11, 1000, 0, 5}); err != nil {
		t.Fatal(err)
	}
	if err := ob.Delete([]uint64{3, 5, 99}); err != nil { // nothing left to delete
		t.Fatal(err)
	}
	if err := ob.Delete(nil); err != nil {
		t.Fatal(err)
	}
	if got := fmt.Sprint(seqsOf(readAll(t, ob))); got != "[1 2 4 6 7 8 9 10]" {
		t.Fatalf("left %s, want [1 2 4 6 7 8 9 10]", got)
	}
	var bytes int64
	for _, k := range []uint64{1, 2, 4, 6, 7, 8, 9, 10} {
		bytes += event(k, 64).size()
	}
	st := ob.Stats()
	if st.Pending != 8 || st.Deleted != 2 || st.Appended != 10 || st.PendingBytes != bytes {
		t.Fatalf("stats = %+v, want 8 pending (%d bytes), 2 deleted, 10 appended", st, bytes)
	}
	// Deleting the oldest moves Oldest to the next one.
	if err := ob.Delete([]uint64{1, 2}); err != nil {
		t.Fatal(err)
	}
	if st := ob.Stats(); !st.Oldest.Equal(event(4, 64).At) {
		t.Fatalf("Oldest = %v, want record 4's %v", st.Oldest, event(4, 64).At)
	}
	if err := ob.Delete([]uint64{4, 6, 7, 8, 9, 10}); err != nil {
		t.Fatal(err)
	}
	if st := ob.Stats(); st.Pending != 0 || st.PendingBytes != 0 || !st.Oldest.IsZero() {
		t.Fatalf("stats after deleting all = %+v, want empty", st)
	}
}

func TestReopen(t *testing.T) {
	path := filepath.Join(t.TempDir(), "outbox.db")
	ob, err := Open(path, Options{Now: clock})
	if err != nil {
		t.Fatal(err)
	}
	if _, err := ob.Append(events(1, 20, 300)); err != nil {
		t.Fatal(err)
	}
	if err := ob.Delete([]uint64{1, 2, 3}); err != nil {
		t.Fatal(err)
	}
	want := ob.Stats()
	if err := ob.Close(); err != nil {
		t.Fatal(err)
	}
	if err := ob.Close(); err != nil {
		t.Fatalf("second Close: %v", err)
	}

	ob, err = Open(path, Options{Now: clock})
	if err != nil {
		t.Fatal(err)
	}
	st := ob.Stats()
	if st.Pending != want.Pending || st.PendingBytes != want.PendingBytes || !st.Oldest.Equal(want.Oldest) ||
		st.Appended != 0 || st.Deleted != 0 || st.Dropped != 0 {
		t.Fatalf("stats after reopen = %+v, want pending %d (%d bytes), oldest %v, zero counters",
			st, want.Pending, want.PendingBytes, want.Oldest)
	}
	all := readAll(t, ob)
	if got := seqsOf(all); len(got) != 17 || got[0] != 4 || got[16] != 20 {
		t.Fatalf("after reopen: %v, want 4..20", got)
	}
	for _, r := range all {
		checkEvent(t, r, 300)
	}
	// Seq continues after the last one, even when the file was emptied.
	if err := ob.Delete(seqsOf(all)); err != nil {
		t.Fatal(err)
	}
	if err := ob.Close(); err != nil {
		t.Fatal(err)
	}
	ob, err = Open(path, Options{Now: clock})
	if err != nil {
		t.Fatal(err)
	}
	out, err := ob.Append(events(21, 21, 300))
	if err != nil {
		t.Fatal(err)
	}
	if out[0].Seq != 21 {
		t.Fatalf("first Seq after reopening an emptied outbox = %d, want 21", out[0].Seq)
	}
	// A smaller MaxBytes at reopen evicts at once, counted as dropped.
	if _, err := ob.Append(events(22, 30, 300)); err != nil {
		t.Fatal(err)
	}
	if err := ob.Close(); err != nil {
		t.Fatal(err)
	}
	size := event(22, 300).size()
	ob, err = Open(path, Options{MaxBytes: 4 * size, Now: clock})
	if err != nil {
		t.Fatal(err)
	}
	defer ob.Close()
	if st := ob.Stats(); st.Pending != 4 || st.Dropped != 6 {
		t.Fatalf("stats after reopen with a limit of 4 records = %+v, want 4 pending and 6 dropped", st)
	}
	if got := fmt.Sprint(seqsOf(readAll(t, ob))); got != "[27 28 29 30]" {
		t.Fatalf("left %s, want [27 28 29 30]", got)
	}
}

func TestClosed(t *testing.T) {
	ob := open(t, Options{})
	if err := ob.Close(); err != nil {
		t.Fatal(err)
	}
	if err := ob.Close(); err != nil {
		t.Fatalf("second Close: %v", err)
	}
	_, errA := ob.Append(events(1, 1, 64))
	_, errR := ob.Read(0, 1)
	errD := ob.Delete([]uint64{1})
	for op, err := range map[string]error{"append": errA, "read": errR, "delete": errD} {
		want := fmt.Sprintf("outbox %s: %s: outbox closed", ob.Path(), op)
		if !errors.Is(err, ErrClosed) || err.Error() != want {
			t.Errorf("%s after Close: %v, want %q", op, err, want)
		}
	}
}

func TestFileMode(t *testing.T) {
	dir := filepath.Join(t.TempDir(), "state", "tallyd")
	path := filepath.Join(dir, "outbox.db")
	ob, err := Open(path, Options{Now: clock})
	if err != nil {
		t.Fatal(err)
	}
	defer ob.Close()
	for _, c := range []struct {
		path string
		want os.FileMode
	}{
		{path, 0o600},
		{dir, 0o700 | os.ModeDir},
		{filepath.Dir(dir), 0o700 | os.ModeDir},
	} {
		fi, err := os.Stat(c.path)
		if err != nil {
			t.Fatal(err)
		}
		if fi.Mode() != c.want {
			t.Errorf("%s: mode %v, want %v", c.path, fi.Mode(), c.want)
		}
	}
}

func TestInvalidOptions(t *testing.T) {
	path := filepath.Join(t.TempDir(), "outbox.db")
	for _, c := range []struct {
		o    Options
		want string
	}{
		{Options{MaxBytes: -1}, "outbox " + path + ": open: invalid option: max bytes -1 is negative"},
		{Options{MaxAge: -time.Second}, "outbox " + path + ": open: invalid option: max age -1s is negative"},
	} {
		_, err := Open(path, c.o)
		if !errors.Is(err, ErrInvalidOption) || err == nil || err.Error() != c.want {
			t.Errorf("Open(%+v) error = %v, want %q", c.o, err, c.want)
		}
	}
}

func TestNotAnOutbox(t *testing.T) {
	random := make([]byte, 64<<10)
	rng := rand.New(rand.NewPCG(1, 2))
	for i := range random {
		random[i] = byte(rng.Uint32())
	}
	boltWith := func(buckets map[string]map[string]string) func(t *testing.T, path string) {
		return func(t *testing.T, path string) {
			db, err := bbolt.Open(path, 0o600, nil)
			if err != nil {
				t.Fatal(err)
			}
			defer db.Close()
			err = db.Update(func(tx *bbolt.Tx) error {
				for name, kv := range buckets {
					b, err := tx.CreateBucket([]byte(name))
					if err != nil {
						return err
					}
					for k, v := range kv {
						if err := b.Put([]byte(k), []byte(v)); err != nil {
							return err
						}
					}
				}
				return nil
			})
			if err != nil {
				t.Fatal(err)
			}
		}
	}
	file := func(b []byte) func(t *testing.T, path string) {
		return func(t *testing.T, path string) {
			if err := os.WriteFile(path, b, 0o600); err != nil {
				t.Fatal(err)
			}
		}
	}
	for _, c := range []struct {
		name string
		make func(t *testing.T, path string)
		want string // after "outbox <path>: open: "
	}{
		{"text file", file([]byte("site: ferry\n")), "not an outbox file: invalid database"},
		{"random bytes", file(random), "not an outbox file: invalid database"},
		{"other bbolt file", boltWith(map[string]map[string]string{"widgets": {"a": "b"}}),
			`not an outbox file: buckets ["widgets"], want "meta" and "records"`},
		{"one bucket more", boltWith(map[string]map[string]string{
			"meta": {"format": "tallyd-outbox/1"}, "records": {}, "extra": {}}),
			`not an outbox file: buckets ["extra" "meta" "records"], want "meta" and "records"`},
		{"other format", boltWith(map[string]map[string]string{"meta": {"format": "tallyd-outbox/9"}, "records": {}}),
			`not an outbox file: format "tallyd-outbox/9", want "tallyd-outbox/1"`},
	} {
		t.Run(c.name, func(t *testing.T) {
			path := filepath.Join(t.TempDir(), "outbox.db")
			c.make(t, path)
			before, err := os.ReadFile(path)
			if err != nil {
				t.Fatal(err)
			}
			ob, err := Open(path, Options{Now: clock})
			if err == nil {
				ob.Close()
				t.Fatal("Open succeeded")
			}
			want := "outbox " + path + ": open: " + c.want
			if !errors.Is(err, ErrNotOutbox) || err.Error() != want {
				t.Fatalf("Open error = %v, want %q", err, want)
			}
			if after, _ := os.ReadFile(path); !bytes.Equal(before, after) {
				t.Fatal("Open changed a file it refused")
			}
		})
	}
}

func TestTooLarge(t *testing.T) {
	ob := open(t, Options{MaxBytes: 100})
	big := Record{ID: "big", Subject: "s", Data: bytes.Repeat([]byte("x"), 97)} // 101 bytes
	_, err := ob.Append([]Record{{ID: "a", Subject: "s"}, big})
	want := fmt.Sprintf(`outbox %s: append: record 1 (id "big"): record larger than the outbox limit: 101 bytes, max 100`, ob.Path())
	if !errors.Is(err, ErrTooLarge) || err.Error() != want {
		t.Fatalf("Append error = %v, want %q", err, want)
	}
	if st := ob.Stats(); st.Pending != 0 || st.Appended != 0 || st.Dropped != 0 {
		t.Fatalf("stats after a refused append = %+v, want nothing stored or dropped", st)
	}
	// A record of exactly MaxBytes fits, and the refused call used no Seq.
	out, err := ob.Append([]Record{{ID: "fit", Subject: "s", Data: bytes.Repeat([]byte("x"), 96)}})
	if err != nil {
		t.Fatal(err)
	}
	if out[0].Seq != 1 {
		t.Fatalf("Seq = %d, want 1", out[0].Seq)
	}
}

func TestErrorsNameThePath(t *testing.T) {
	// A path under a regular file cannot be created.
	dir := t.TempDir()
	file := filepath.Join(dir, "file")
	if err := os.WriteFile(file, nil, 0o600); err != nil {
		t.Fatal(err)
	}
	path := filepath.Join(file, "outbox.db")
	_, err := Open(path, Options{Now: clock})
	if err == nil || !strings.HasPrefix(err.Error(), "outbox "+path+": create directory: ") {
		t.Fatalf("Open error = %v, want it to start with %q", err, "outbox "+path+": create directory: ")
	}
}
