package events

import (
	"bufio"
	"context"
	"errors"
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
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

// TestJSONLWholeLinesOnFullDisk: on a file system that fills up, every line
// in the file is whole — the one that did not fit is cut off again — and
// the error says what happened. Needs root to mount a small tmpfs; skipped
// otherwise.
func TestJSONLWholeLinesOnFullDisk(t *testing.T) {
	dir := t.TempDir()
	if err := exec.Command("mount", "-t", "tmpfs", "-o", "size=16k", "tmpfs", dir).Run(); err != nil {
		t.Skipf("cannot mount a small tmpfs here (%v); needs root", err)
	}
	defer exec.Command("umount", dir).Run()
	j, err := NewJSONLFile(filepath.Join(dir, "events.jsonl"))
	if err != nil {
		t.Fatal(err)
	}
	line := []byte(`{"pad":"` + strings.Repeat("x", 1000) + `"}`)
	var werr error
	written := 0
	for i := 0; i < 100 && werr == nil; i++ {
		if werr = j.WriteLine(line); werr == nil {
			written++
		}
	}
	if werr == nil || !strings.Contains(werr.Error(), "no space left on device") {
		t.Fatalf("after %d lines: err %v, want no space left", written, werr)
	}
	_ = j.Close()
	b, err := os.ReadFile(filepath.Join(dir, "events.jsonl"))
	if err != nil {
		t.Fatal(err)
	}
	if len(b) != written*(len(line)+1) || (len(b) > 0 && b[len(b)-1] != '\n') {
		t.Errorf("file has %d bytes for %d whole lines of %d: a torn line is left", len(b), written, len(line)+1)
	}
}

// TestJSONLReopen: after the file is moved away (log rotation), Reopen
// sends new lines to a new file at the same path; nothing is lost.
func TestJSONLReopen(t *testing.T) {
	dir := t.TempDir()
	path := filepath.Join(dir, "events.jsonl")
	j, err := NewJSONLFile(path)
	if err != nil {
		t.Fatal(err)
	}
	defer j.Close()
	must := func(err error) {
		t.Helper()
		if err != nil {
			t.Fatal(err)
		}
	}
	must(j.WriteLine([]byte(`{"n":1}`)))
	must(os.Rename(path, path+".1"))
	must(j.WriteLine([]byte(`{"n":2}`))) // still the old file
	must(j.Reopen())
	must(j.WriteLine([]byte(`{"n":3}`)))
	old, _ := os.ReadFile(path + ".1")
	cur, _ := os.ReadFile(path)
	if string(old) != "{\"n\":1}\n{\"n\":2}\n" || string(cur) != "{\"n\":3}\n" {
		t.Errorf("rotated %q, new %q", old, cur)
	}
}
