package outbox

import (
	"context"
	"errors"
	"fmt"
	"sync"
	"testing"
	"time"

	berrors "go.etcd.io/bbolt/errors"

	"tallyd/internal/repeat"
	"tallyd/internal/testkit"
)

// run starts w.Run and returns its cancel and a channel with its result.
func run(t *testing.T, w *Writer) (context.CancelFunc, <-chan error) {
	t.Helper()
	ctx, cancel := context.WithCancel(context.Background())
	res := make(chan error, 1)
	go func() { res <- w.Run(ctx) }()
	t.Cleanup(cancel)
	return cancel, res
}

// result waits for Run to return.
func result(t *testing.T, res <-chan error) error {
	t.Helper()
	select {
	case err := <-res:
		return err
	case <-time.After(20 * time.Second):
		t.Fatal("Run did not return 20 s after cancel")
		return nil
	}
}

func offerAll(t *testing.T, w *Writer, recs []Record) {
	t.Helper()
	for _, r := range recs {
		if !w.Offer(r) {
			t.Fatalf("Offer(%s) refused; stats %+v", r.ID, w.Stats())
		}
	}
}

// checkStream fails unless the outbox holds events 1..n in order.
func checkStream(t *testing.T, ob *Outbox, n int, size int) {
	t.Helper()
	all := readAll(t, ob)
	if len(all) != n {
		t.Fatalf("outbox holds %d records, want %d", len(all), n)
	}
	for i, r := range all {
		if r.Seq != uint64(i+1) {
			t.Fatalf("record %d has Seq %d, want %d", i, r.Seq, i+1)
		}
		checkEvent(t, r, size)
	}
}

func TestWriterOfferNeverBlocks(t *testing.T) {
	ob := open(t, Options{MaxBytes: 1000})
	w := NewWriter(ob, 4) // not running: nothing leaves the queue
	start := time.Now()
	for i, want := range []bool{true, true, true, true, false, false} {
		if got := w.Offer(event(uint64(i+1), 64)); got != want {
			t.Fatalf("offer %d = %v, want %v", i+1, got, want)
		}
	}
	big := Record{ID: "big", Subject: "s", Data: make([]byte, 1000)}
	if w.Offer(big) {
		t.Fatal("Offer accepted a record larger than MaxBytes")
	}
	// Common practice: an offer is a channel send with default, well
	// under a millisecond; a second allows for a loaded machine.
	if took := time.Since(start); took > time.Second {
		t.Fatalf("7 offers took %v", took)
	}
	st := w.Stats()
	if st.Queued != 4 || st.Rejected != 2 || st.TooLarge != 1 || st.Committed != 0 {
		t.Fatalf("stats = %+v, want 4 queued, 2 rejected, 1 too large", st)
	}
}

func TestWriterDrainsOnCancel(t *testing.T) {
	ob := open(t, Options{})
	w := NewWriter(ob, 5000)
	offerAll(t, w, events(1, 3000, 100))
	ctx, cancel := context.WithCancel(context.Background())
	cancel() // cancelled before Run even starts: it must still write all 3000
	if err := w.Run(ctx); err != nil {
		t.Fatal(err)
	}
	checkStream(t, ob, 3000, 100)
	st := w.Stats()
	if st.Queued != 0 || st.Appended != 3000 || st.Committed != 3 || st.Failures != 0 || st.Lost != 0 {
		t.Fatalf("stats = %+v, want 3000 appended in 3 commits", st)
	}
	if w.Offer(event(3001, 100)) {
		t.Fatal("Offer accepted a record after Run returned")
	}
	if st := w.Stats(); st.Rejected != 1 {
		t.Fatalf("Rejected = %d after an offer to a stopped writer, want 1", st.Rejected)
	}
	if err := w.Run(context.Background()); !errors.Is(err, ErrWriterRunning) {
		t.Fatalf("second Run: %v, want ErrWriterRunning", err)
	}
}

// TestWriterDrainsWhileOffered cancels Run while a producer is offering:
// every accepted offer must be in the outbox, in order.
func TestWriterDrainsWhileOffered(t *testing.T) {
	ob := open(t, Options{})
	w := NewWriter(ob, 64)
	cancel, res := run(t, w)
	var accepted []Record
	stop := time.After(200 * time.Millisecond)
	var k uint64
loop:
	for {
		select {
		case <-stop:
			break loop
		default:
		}
		k++
		r := event(k, 80)
		r.ID = fmt.Sprintf("a-%d", len(accepted)+1)
		if w.Offer(r) {
			accepted = append(accepted, r)
		}
	}
	cancel()
	if err := result(t, res); err != nil {
		t.Fatal(err)
	}
	all := readAll(t, ob)
	if len(all) != len(accepted) {
		t.Fatalf("outbox holds %d records, %d were accepted", len(all), len(accepted))
	}
	for i, r := range all {
		if r.ID != accepted[i].ID {
			t.Fatalf("record %d is %s, want %s", i, r.ID, accepted[i].ID)
		}
	}
	st := w.Stats()
	if st.Appended != int64(len(accepted)) || st.Appended+st.Rejected != int64(k) {
		t.Fatalf("stats = %+v after %d offers, %d accepted", st, k, len(accepted))
	}
	t.Logf("%d offers, %d accepted, %d commits", k, len(accepted), st.Committed)
}

func TestWriterGroups(t *testing.T) {
	t.Run("queued before run", func(t *testing.T) {
		ob := open(t, Options{})
		w := NewWriter(ob, 10_000)
		offerAll(t, w, events(1, 10_000, 100))
		cancel, res := run(t, w)
		testkit.WaitFor(t, 20*time.Second, "10,000 records appended", func() bool { return w.Stats().Appended == 10_000 })
		cancel()
		if err := result(t, res); err != nil {
			t.Fatal(err)
		}
		if st := w.Stats(); st.Committed != (10_000+MaxBatch-1)/MaxBatch {
			t.Fatalf("%d commits for 10,000 queued records, want %d (batches of %d)", st.Committed, (10_000+MaxBatch-1)/MaxBatch, MaxBatch)
		}
		checkStream(t, ob, 10_000, 100)
	})
	t.Run("offered while running", func(t *testing.T) {
		ob := open(t, Options{})
		w := NewWriter(ob, 10_000)
		cancel, res := run(t, w)
		offerAll(t, w, events(1, 10_000, 100))
		testkit.WaitFor(t, 20*time.Second, "10,000 records appended", func() bool { return w.Stats().Appended == 10_000 })
		cancel()
		if err := result(t, res); err != nil {
			t.Fatal(err)
		}
		// Offers take well under a microsecond, a commit (fsync) far
		// longer: batches form while one commits.
		st := w.Stats()
		if st.Committed > 1000 {
			t.Fatalf("%d commits for 10,000 records, want far fewer", st.Committed)
		}
		t.Logf("10,000 records in %d commits", st.Committed)
		checkStream(t, ob, 10_000, 100)
	})
}

func TestWriterNotifies(t *testing.T) {
	ob := open(t, Options{})
	w := NewWriter(ob, 16)
	run(t, w)
	offerAll(t, w, events(1, 1, 64))
	select {
	case <-w.Appended():
	case <-time.After(10 * time.Second):
		t.Fatal("no notification 10 s after an offer")
	}
	if st := ob.Stats(); st.Pending != 1 {
		t.Fatalf("notified with %d records pending, want 1", st.Pending)
	}
}

// TestWriterRetries makes the first appends fail: the batch is kept and
// retried, nothing is lost, and the failures are counted and reported.
func TestWriterRetries(t *testing.T) {
	ob := open(t, Options{})
	w := NewWriter(ob, 1000)
	rep := repeat.New(testkit.Log(t), "outbox append failed", time.Hour)
	w.ReportTo(rep)
	errFull := errors.New("no space left on device")
	var mu sync.Mutex
	calls := 0
	w.appendFn = func(recs []Record) ([]Record, error) {
		mu.Lock()
		calls++
		n := calls
		mu.Unlock()
		if n <= 3 {
			return nil, errFull
		}
		return ob.Append(recs)
	}
	offerAll(t, w, events(1, 100, 64))
	cancel, res := run(t, w)
	testkit.WaitFor(t, 20*time.Second, "100 records appended", func() bool { return w.Stats().Appended == 100 })
	cancel()
	if err := result(t, res); err != nil {
		t.Fatal(err)
	}
	st := w.Stats()
	if st.Failures != 3 || !errors.Is(st.LastErr, errFull) || st.Committed != 1 || st.Lost != 0 || st.Queued != 0 {
		t.Fatalf("stats = %+v, want 3 failures, last %v, 1 commit", st, errFull)
	}
	if rep.Total() != 3 {
		t.Fatalf("reporter counted %d failures, want 3", rep.Total())
	}
	checkStream(t, ob, 100, 64)
}

// TestWriterDiskFull fills a size-capped file for real (bbolt's MaxSize):
// the writer keeps its batch and retries, succeeds once the publisher has
// deleted records, and at shutdown names the records it could not write.
func TestWriterDiskFull(t *testing.T) {
	ob := open(t, Options{fileLimit: 1 << 20})
	// Fill the file directly until the cap refuses an append.
	var full error
	var k uint64 = 1
	for full == nil {
		_, full = ob.Append(events(k, k+49, 400))
		k += 50
	}
	if !errors.Is(full, berrors.ErrMaxSizeReached) {
		t.Fatalf("Append error = %v, want ErrMaxSizeReached", full)
	}
	want := fmt.Sprintf("outbox %s: append: %v", ob.Path(), berrors.ErrMaxSizeReached)
	if full.Error() != want {
		t.Fatalf("Append error = %q, want %q", full, want)
	}
	stored := ob.Stats().Pending
	next := uint64(stored) + 1

	w := NewWriter(ob, 1000)
	offerAll(t, w, events(next, next+299, 400))
	cancel, res := run(t, w)
	testkit.WaitFor(t, 20*time.Second, "a failed append", func() bool { return w.Stats().Failures >= 2 })
	if st := w.Stats(); st.Queued != 300 || st.Appended != 0 || !errors.Is(st.LastErr, berrors.ErrMaxSizeReached) {
		t.Fatalf("stats while full = %+v, want 300 queued, none appended", st)
	}
	// The publisher catches up: the freed pages take the batch.
	rs, err := ob.Read(0, int(stored))
	if err != nil {
		t.Fatal(err)
	}
	if err := ob.Delete(seqsOf(rs)); err != nil {
		t.Fatal(err)
	}
	testkit.WaitFor(t, 20*time.Second, "the retried batch appended", func() bool { return w.Stats().Appended == 300 })
	all := readAll(t, ob)
	if len(all) != 300 || all[0].Seq != next || all[299].Seq != next+299 {
		t.Fatalf("after recovery the outbox holds %d records from %d, want 300 from %d", len(all), all[0].Seq, next)
	}
	for _, r := range all {
		checkEvent(t, r, 400)
	}

	// Full again, then shut down: the final attempt fails and Run says how
	// many records were not written.
	for _, n := range []uint64{50, 1} { // big batches, then single records
		for full = nil; full == nil; k += n {
			_, full = ob.Append(events(k, k+n-1, 400))
		}
	}
	offerAll(t, w, events(k, k+9, 400))
	failures := w.Stats().Failures
	testkit.WaitFor(t, 20*time.Second, "a failed append", func() bool { return w.Stats().Failures > failures })
	cancel()
	err = result(t, res)
	want = fmt.Sprintf("outbox %s: writer stopped with 10 records not written: outbox %s: append: %v",
		ob.Path(), ob.Path(), berrors.ErrMaxSizeReached)
	if !errors.Is(err, berrors.ErrMaxSizeReached) || err.Error() != want {
		t.Fatalf("Run error = %v, want %q", err, want)
	}
	if st := w.Stats(); st.Lost != 10 || st.Queued != 0 {
		t.Fatalf("stats after giving up = %+v, want 10 lost", st)
	}
}
