package bus

import (
	"context"
	"errors"
	"fmt"
	"strings"

	"github.com/nats-io/nats.go/jetstream"
)

// MaxStateValue is the largest value State.Put accepts, in bytes.
const MaxStateValue = 64 << 10

// MaxStateKey is the longest key State accepts, in bytes.
const MaxStateKey = 255

// ErrNoState is returned by State.Get for a key that has no value.
var ErrNoState = errors.New("no state stored under this key")

// State is a key-value bucket holding a site's live state (totals,
// occupancy), one current value per key, so that a restarted daemon and a
// "totals" command can read it back. Keys are valid subject tokens (see
// ValidToken) joined by dots, e.g. "totals.walkway.boarding-gate", at most
// MaxStateKey bytes. It is safe for concurrent use.
type State struct {
	kv jetstream.KeyValue
}

// checkStateKey accepts keys of subject tokens joined by dots, e.g.
// "walkway.boarding-gate" or "totals.walkway.boarding-gate".
func checkStateKey(key string) error {
	if len(key) > MaxStateKey {
		return fmt.Errorf("state key %.20q...: %d bytes, limit %d", key, len(key), MaxStateKey)
	}
	for i, tok := range strings.Split(key, ".") {
		if err := ValidToken(tok); err != nil {
			return fmt.Errorf("state key %q: token %d: %w", key, i+1, err)
		}
	}
	return nil
}

// OpenState opens the bucket, creating it (file storage, one value per key,
// replicas copies; 0 means DefaultReplicas) or updating its replicas. It
// fails with ErrNoJetStream when the server has no JetStream.
func OpenState(ctx context.Context, js jetstream.JetStream, bucket string, replicas int) (*State, error) {
	if err := ValidToken(bucket); err != nil {
		return nil, fmt.Errorf("open state bucket: %w", err)
	}
	if replicas == 0 {
		replicas = DefaultReplicas
	}
	if replicas < 1 || replicas > MaxReplicas {
		return nil, fmt.Errorf("open state bucket %s: replicas %d out of range 1..%d", bucket, replicas, MaxReplicas)
	}
	// An existing bucket as wanted is used as it is: several daemons of a
	// shared site open it at once, and updates would contend.
	if kv, err := js.KeyValue(ctx, bucket); err == nil {
		if st, err := kv.Status(ctx); err == nil {
			if c := st.(*jetstream.KeyValueBucketStatus).StreamInfo().Config; c.Replicas == replicas && c.MaxMsgsPerSubject == 1 && c.MaxMsgSize == MaxStateValue {
				return &State{kv: kv}, nil
			}
		}
	}
	kv, err := js.CreateOrUpdateKeyValue(ctx, jetstream.KeyValueConfig{
		Bucket:       bucket,
		Description:  "tallyd live state",
		History:      1,
		MaxValueSize: MaxStateValue,
		Storage:      jetstream.FileStorage,
		Replicas:     replicas,
	})
	if err != nil {
		return nil, fmt.Errorf("open state bucket %s: %w", bucket, jetStreamErr(err))
	}
	return &State{kv: kv}, nil
}

// Bucket is the bucket's name.
func (s *State) Bucket() string { return s.kv.Bucket() }

// Put stores v as the current value of key; the broker has it on disk when
// Put returns.
func (s *State) Put(ctx context.Context, key string, v []byte) error {
	if err := checkStateKey(key); err != nil {
		return fmt.Errorf("put state: %w", err)
	}
	if len(v) > MaxStateValue {
		return fmt.Errorf("put state %s: value of %d bytes, limit %d", key, len(v), MaxStateValue)
	}
	if _, err := s.kv.Put(ctx, key, v); err != nil {
		return fmt.Errorf("put state %s: %w", key, err)
	}
	return nil
}

// Get is the current value of key, or ErrNoState.
func (s *State) Get(ctx context.Context, key string) ([]byte, error) {
	if err := checkStateKey(key); err != nil {
		return nil, fmt.Errorf("get state: %w", err)
	}
	e, err := s.kv.Get(ctx, key)
	if errors.Is(err, jetstream.ErrKeyNotFound) || errors.Is(err, jetstream.ErrKeyDeleted) {
		return nil, fmt.Errorf("get state %s: %w", key, ErrNoState)
	}
	if err != nil {
		return nil, fmt.Errorf("get state %s: %w", key, err)
	}
	return e.Value(), nil
}

// All is every key with its current value: what a restarted daemon restores
// and what a "totals" command prints.
func (s *State) All(ctx context.Context) (map[string][]byte, error) {
	return s.Match(ctx, ">")
}

// KV is the bucket itself, for readers that watch it (site-wide areas).
func (s *State) KV() jetstream.KeyValue { return s.kv }

// Match is every key matching the subject-style pattern keys (e.g.
// "walkway.>") with its current value.
func (s *State) Match(ctx context.Context, keys string) (map[string][]byte, error) {
	w, err := s.kv.Watch(ctx, keys, jetstream.IgnoreDeletes())
	if err != nil {
		return nil, fmt.Errorf("read state %s: %w", s.kv.Bucket(), err)
	}
	defer func() { _ = w.Stop() }()
	all := map[string][]byte{}
	for {
		select {
		case e, ok := <-w.Updates():
			if !ok {
				return nil, fmt.Errorf("read state %s: watcher stopped", s.kv.Bucket())
			}
			if e == nil { // the current values are all in
				return all, nil
			}
			all[e.Key()] = e.Value()
		case <-ctx.Done():
			return nil, fmt.Errorf("read state %s: %w", s.kv.Bucket(), ctx.Err())
		}
	}
}
