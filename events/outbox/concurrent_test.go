package outbox

import (
	"fmt"
	"sync"
	"testing"
	"time"
)

// TestConcurrentAppendReadDelete runs an appender, a publisher that reads
// and deletes, and a status reader at once (run it with -race): the
// publisher must see every record exactly once, in Seq order, intact.
func TestConcurrentAppendReadDelete(t *testing.T) {
	const total = 3000
	ob := open(t, Options{})
	var wg sync.WaitGroup
	done := make(chan struct{})
	errs := make(chan error, 3)

	wg.Add(1)
	go func() { // appender: batches of 1..50
		defer wg.Done()
		for k := uint64(1); k <= total; {
			n := min(1+k%50, total-k+1)
			if _, err := ob.Append(events(k, k+n-1, 120)); err != nil {
				errs <- err
				return
			}
			k += n
		}
	}()

	var got []Record
	wg.Add(1)
	go func() { // publisher
		defer wg.Done()
		after := uint64(0)
		deadline := time.Now().Add(30 * time.Second)
		for len(got) < total && time.Now().Before(deadline) {
			rs, err := ob.Read(after, 64)
			if err != nil {
				errs <- err
				return
			}
			if len(rs) == 0 {
				time.Sleep(time.Millisecond)
				continue
			}
			got = append(got, rs...)
			after = rs[len(rs)-1].Seq
			if err := ob.Delete(seqsOf(rs)); err != nil {
				errs <- err
				return
			}
		}
	}()

	var statsWG sync.WaitGroup
	statsWG.Add(1)
	go func() { // status lines
		defer statsWG.Done()
		for {
			select {
			case <-done:
				return
			default:
			}
			st := ob.Stats()
			if st.Pending < 0 || st.PendingBytes < 0 || st.Pending != st.Appended-st.Deleted-st.Dropped {
				errs <- fmt.Errorf("inconsistent stats %+v", st)
				return
			}
			time.Sleep(100 * time.Microsecond)
		}
	}()

	wg.Wait()
	close(done)
	statsWG.Wait()
	close(errs)
	for err := range errs {
		t.Fatal(err)
	}
	if len(got) != total {
		t.Fatalf("publisher got %d records, want %d", len(got), total)
	}
	for i, r := range got {
		if r.Seq != uint64(i+1) {
			t.Fatalf("record %d has Seq %d, want %d", i, r.Seq, i+1)
		}
		checkEvent(t, r, 120)
	}
	st := ob.Stats()
	if st.Pending != 0 || st.PendingBytes != 0 || st.Appended != total || st.Deleted != total || st.Dropped != 0 {
		t.Fatalf("final stats = %+v, want empty with %d appended and deleted", st, total)
	}
}
