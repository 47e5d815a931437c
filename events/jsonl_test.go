package events

import (
	"bufio"
	"context"
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"sync"
	"testing"
)

func TestJSONLConcurrentPublish(t *testing.T) {
	path := filepath.Join(t.TempDir(), "events.jsonl")
	j, err := NewJSONLFile(path)
	if err != nil {
		t.Fatal(err)
	}
	const workers, each = 8, 50
	var wg sync.WaitGroup
	for w := range workers {
		wg.Go(func() {
			for i := range each {
				ev := Event{
					SpecVersion: SpecVersion, ID: fmt.Sprintf("%d-%d", w, i), Source: "/tallyd/s/c",
					Type: TypeLineIn, DataContentType: ContentType, Data: Data{Kind: KindIn, TrackID: int64(i)},
				}
				if err := j.Publish(context.Background(), ev); err != nil {
					t.Error(err)
				}
			}
		})
	}
	wg.Wait()
	if err := j.Close(); err != nil {
		t.Fatal(err)
	}
	if err := j.Close(); err != nil {
		t.Errorf("second Close: %v", err)
	}
	f, err := os.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	seen := map[string]bool{}
	sc := bufio.NewScanner(f)
	for sc.Scan() {
		ev, err := Parse(sc.Bytes())
		if err != nil {
			t.Fatalf("line %q: %v", sc.Text(), err)
		}
		seen[ev.ID] = true
	}
	if len(seen) != workers*each {
		t.Errorf("%d distinct events, want %d", len(seen), workers*each)
	}
}

func TestJSONLErrors(t *testing.T) {
	dir := t.TempDir()
	if _, err := NewJSONLFile(filepath.Join(dir, "missing", "x.jsonl")); err == nil ||
		err.Error() != "open events file: open "+filepath.Join(dir, "missing", "x.jsonl")+": no such file or directory" {
		t.Errorf("open in a missing directory: %v", err)
	}
	path := filepath.Join(dir, "e.jsonl")
	j, err := NewJSONLFile(path)
	if err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithCancel(context.Background())
	cancel()
	if err := j.Publish(ctx, Event{}); !errors.Is(err, context.Canceled) {
		t.Errorf("cancelled context: %v", err)
	}
	if err := j.Close(); err != nil {
		t.Fatal(err)
	}
	err = j.Publish(context.Background(), Event{})
	if !errors.Is(err, ErrClosed) || err.Error() != "write event to "+path+": publisher closed" {
		t.Errorf("publish after close: %v", err)
	}
}

func TestJSONLAppends(t *testing.T) {
	path := filepath.Join(t.TempDir(), "e.jsonl")
	for range 2 {
		j, err := NewJSONLFile(path)
		if err != nil {
			t.Fatal(err)
		}
		if err := j.Publish(context.Background(), Event{SpecVersion: SpecVersion}); err != nil {
			t.Fatal(err)
		}
		if err := j.Close(); err != nil {
			t.Fatal(err)
		}
	}
	b, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	if n := countLines(b); n != 2 {
		t.Errorf("%d lines after two opens, want 2", n)
	}
}

func countLines(b []byte) int {
	n := 0
	for _, c := range b {
		if c == '\n' {
			n++
		}
	}
	return n
}
