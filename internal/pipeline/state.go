package pipeline

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"log/slog"
	"maps"
	"os"
	"path/filepath"
	"strings"
	"sync"
	"time"

	"github.com/nats-io/nats.go/jetstream"

	"tallyd/events"
	"tallyd/events/bus"
	"tallyd/internal/config"
	"tallyd/internal/repeat"
)

// stateSink keeps the live state of every rule (running totals, the day's
// counts, occupancy now) where a dashboard or a restarted daemon finds it:
// the key-value bucket (key <source>.<rule>) and a copy in state_dir. The
// detect workers hand it the newest state; it writes at most every period,
// latest wins, so it never slows counting.
type stateSink struct {
	kv     *bus.State // nil without JetStream
	file   string     // local copy
	period time.Duration
	fails  *repeat.Reporter
	// gate, when set, says whether a source's state may be written now (a
	// shared site: only under a valid lease); a refused write is dropped.
	gate func(source string) bool

	mu     sync.Mutex
	latest map[string]events.RuleState // <source>.<rule> -> state
	dirty  map[string]bool
}

// statePeriod is how often the live state is written at most.
const statePeriod = 500 * time.Millisecond

func newStateSink(kv *bus.State, file string, log *slog.Logger) *stateSink {
	return &stateSink{kv: kv, file: file, period: statePeriod, latest: map[string]events.RuleState{},
		dirty: map[string]bool{}, fails: repeat.New(log, "writing the live state failed", repeat.DefaultPeriod)}
}

// bucket is the live-state bucket (nil without JetStream, or before it is
// set up).
func (s *stateSink) bucket() *bus.State {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.kv
}

// setKV starts writing to a bucket that was set up late.
func (s *stateSink) setKV(kv *bus.State) {
	s.mu.Lock()
	defer s.mu.Unlock()
	s.kv = kv
	for k := range s.latest {
		s.dirty[k] = true
	}
}

// update records a source's rule states.
func (s *stateSink) update(source string, states map[string]events.RuleState) {
	s.mu.Lock()
	defer s.mu.Unlock()
	for rule, st := range states {
		k := source + "." + rule
		if old, ok := s.latest[k]; ok && old.Totals == st.Totals && sameDay(old.Day, st.Day) && old.Occupancy == st.Occupancy {
			continue
		}
		s.latest[k], s.dirty[k] = st, true
	}
}

func (s *stateSink) run(ctx context.Context) error {
	t := time.NewTicker(s.period)
	defer t.Stop()
	for {
		select {
		case <-ctx.Done():
			return nil
		case <-t.C:
			s.flush()
		}
	}
}

// flush writes what changed since the last write.
func (s *stateSink) flush() {
	s.mu.Lock()
	if len(s.dirty) == 0 {
		s.mu.Unlock()
		return
	}
	all := maps.Clone(s.latest)
	dirty := s.dirty
	s.dirty = map[string]bool{}
	kv := s.kv
	s.mu.Unlock()
	var errs []error
	if kv != nil {
		ctx, cancel := context.WithTimeout(context.Background(), 2*time.Second)
		for k := range dirty {
			if source, _, _ := strings.Cut(k, "."); s.gate != nil && !s.gate(source) {
				continue
			}
			b, _ := json.Marshal(all[k])
			if err := kv.Put(ctx, k, b); err != nil {
				errs = append(errs, err)
				s.mu.Lock()
				if _, newer := s.dirty[k]; !newer {
					s.dirty[k] = true // try again next time
				}
				s.mu.Unlock()
			}
		}
		cancel()
	}
	if s.file != "" {
		if err := writeStateFile(s.file, all); err != nil {
			errs = append(errs, err)
		}
	}
	if err := errors.Join(errs...); err != nil {
		s.fails.Note(err)
	}
}

// writeStateFile replaces the local copy atomically.
func writeStateFile(path string, all map[string]events.RuleState) error {
	b, err := json.MarshalIndent(all, "", " ")
	if err != nil {
		return err
	}
	tmp := path + ".tmp"
	if err := os.WriteFile(tmp, b, 0o600); err != nil {
		return fmt.Errorf("write state: %w", err)
	}
	if err := os.Rename(tmp, path); err != nil {
		return fmt.Errorf("write state: %w", err)
	}
	return nil
}

// loadState reads the saved rule states, from the bucket when there is one,
// else from the local copy: source -> rule -> state. Nothing saved is not an
// error.
func loadState(ctx context.Context, kv *bus.State, file string) (map[string]map[string]events.RuleState, string, error) {
	flat := map[string]events.RuleState{}
	from := ""
	if kv != nil {
		all, err := kv.All(ctx)
		if err != nil {
			return nil, "", fmt.Errorf("read the live state: %w", err)
		}
		if flat, err = decodeFlat(all); err != nil {
			return nil, "", err
		}
		from = "bucket"
	}
	if len(flat) == 0 && file != "" {
		b, err := os.ReadFile(file)
		switch {
		case errors.Is(err, os.ErrNotExist):
		case err != nil:
			return nil, "", fmt.Errorf("read the live state: %w", err)
		default:
			if err := json.Unmarshal(b, &flat); err != nil {
				return nil, "", fmt.Errorf("live state %s: %w", filepath.Base(file), err)
			}
			from = file
		}
	}
	return bySource(flat), from, nil
}

// decodeFlat decodes the bucket's values: <source>.<rule> -> state. Keys
// without a dot (area/<name>) are not rule states and are skipped.
func decodeFlat(all map[string][]byte) (map[string]events.RuleState, error) {
	flat := map[string]events.RuleState{}
	for k, v := range all {
		if !strings.Contains(k, ".") {
			continue
		}
		var st events.RuleState
		if err := json.Unmarshal(v, &st); err != nil {
			return nil, fmt.Errorf("live state %s: %w", k, err)
		}
		flat[k] = st
	}
	return flat, nil
}

// decodeStates decodes the bucket's values as source -> rule -> state.
func decodeStates(all map[string][]byte) (map[string]map[string]events.RuleState, error) {
	flat, err := decodeFlat(all)
	if err != nil {
		return nil, err
	}
	return bySource(flat), nil
}

// bySource splits <source>.<rule> keys.
func bySource(flat map[string]events.RuleState) map[string]map[string]events.RuleState {
	out := map[string]map[string]events.RuleState{}
	for k, st := range flat {
		source, rule, ok := strings.Cut(k, ".")
		if !ok {
			continue
		}
		if out[source] == nil {
			out[source] = map[string]events.RuleState{}
		}
		out[source][rule] = st
	}
	return out
}

// LiveState reads the site's live state without running anything: from the
// key-value bucket on the site's NATS server (the external one, or the
// embedded one of a running daemon with a fixed port), else from the copy
// in state_dir. It returns source -> rule -> state and where it was read.
func LiveState(ctx context.Context, cfg *config.Config) (map[string]map[string]events.RuleState, string, error) {
	n := cfg.Output.NATS
	url := n.URL
	if url == "" && n.Embedded.Port != 0 {
		url = fmt.Sprintf("nats://%s:%d", n.Embedded.Host, n.Embedded.Port)
	}
	var kv *bus.State
	if url != "" && n.JetStream.Mode != config.JetStreamOff {
		if nc, err := bus.Connect(url, "tallyd-totals-"+cfg.Site, nil, connectOptions(cfg, n.URL != "")...); err == nil {
			defer nc.Close()
			if js, err := jetstream.New(nc); err == nil {
				kv, _ = bus.OpenState(ctx, js, bucketName(cfg), n.JetStream.Replicas)
			}
		}
	}
	return loadState(ctx, kv, cfg.StatePath("state.json"))
}

func sameDay(a, b *events.Totals) bool {
	return (a == nil && b == nil) || (a != nil && b != nil && *a == *b)
}
