package bus

import (
	"context"
	"errors"
	"fmt"
	"slices"
	"strings"
	"time"

	"github.com/nats-io/nats.go"
	"github.com/nats-io/nats.go/jetstream"
)

// Defaults of a site's JetStream stream.
const (
	// DefaultDuplicates is how long the stream remembers event ids to drop a
	// re-sent event: longer than any outage the outbox rides out while the
	// daemon keeps running, short enough to keep the id table small.
	DefaultDuplicates = 10 * time.Minute
	// DefaultReplicas is one copy: a single server.
	DefaultReplicas = 1
	// MaxReplicas is JetStream's limit.
	MaxReplicas = 5
	// DefaultStreamMaxAge keeps a month of events for replays and late
	// readers.
	DefaultStreamMaxAge = 30 * 24 * time.Hour
	// DefaultStreamMaxBytes caps a site's stream at 1 GiB (some 2.5 million
	// events of 400 bytes), whichever of the two limits comes first.
	DefaultStreamMaxBytes = 1 << 30
)

// DefaultStreamSettings are the settings a site's stream has unless the
// site file says otherwise (Site aside). Note that in StreamSettings a zero
// MaxAge or MaxBytes means no limit, not these defaults.
func DefaultStreamSettings() StreamSettings {
	return StreamSettings{Prefix: DefaultPrefix, MaxAge: DefaultStreamMaxAge, MaxBytes: DefaultStreamMaxBytes,
		Duplicates: DefaultDuplicates, Replicas: DefaultReplicas}
}

// ErrNoJetStream means the NATS server (or the account) has no JetStream:
// events cannot be stored, only passed on to whoever listens at the time.
var ErrNoJetStream = errors.New("nats server has no jetstream (persistence) for this account")

// StreamSettings describe the stream that keeps one site's events.
type StreamSettings struct {
	// Prefix is the first subject token(s); empty means DefaultPrefix.
	Prefix string
	// Site is the site whose events "<prefix>.<site>.>" the stream keeps.
	Site string
	// MaxAge is how long events are kept; 0 keeps them until MaxBytes.
	MaxAge time.Duration
	// MaxBytes caps the stream's size, the oldest events going first; 0 is
	// no cap.
	MaxBytes int64
	// Duplicates is the window in which an event id seen before is dropped
	// (the publish is acknowledged as a duplicate); 0 means
	// DefaultDuplicates. It cannot exceed MaxAge.
	Duplicates time.Duration
	// Replicas is the number of copies in a cluster, 1 to 5; 0 means
	// DefaultReplicas.
	Replicas int
}

// StreamName is the name of the stream keeping a site's events, e.g.
// "TALLYD_FERRY-TERMINAL" for prefix "tallyd" and site "ferry-terminal": the
// prefix's tokens and the site, upper-case, joined by '_'. EnsureStream and
// the readers (tallyd listen) agree through it.
func StreamName(prefix, site string) (string, error) {
	if prefix == "" {
		prefix = DefaultPrefix
	}
	if err := ValidPrefix(prefix); err != nil {
		return "", fmt.Errorf("stream name: %w", err)
	}
	if err := ValidToken(site); err != nil {
		return "", fmt.Errorf("stream name: site: %w", err)
	}
	return strings.ToUpper(strings.ReplaceAll(prefix, ".", "_") + "_" + site), nil
}

// config is the stream configuration s asks for, defaults applied.
func (s StreamSettings) config() (jetstream.StreamConfig, error) {
	prefix := s.Prefix
	if prefix == "" {
		prefix = DefaultPrefix
	}
	name, err := StreamName(prefix, s.Site)
	if err != nil {
		return jetstream.StreamConfig{}, err
	}
	dup, replicas, maxBytes := s.Duplicates, s.Replicas, s.MaxBytes
	if dup == 0 {
		dup = DefaultDuplicates
	}
	if replicas == 0 {
		replicas = DefaultReplicas
	}
	if maxBytes == 0 {
		maxBytes = -1 // JetStream's "no limit"
	}
	var errs []error
	if s.MaxAge < 0 {
		errs = append(errs, fmt.Errorf("max age %s is negative", s.MaxAge))
	}
	if s.MaxBytes < 0 {
		errs = append(errs, fmt.Errorf("max bytes %d is negative", s.MaxBytes))
	}
	if dup < 0 {
		errs = append(errs, fmt.Errorf("duplicates window %s is negative", dup))
	}
	if s.MaxAge > 0 && dup > s.MaxAge {
		errs = append(errs, fmt.Errorf("duplicates window %s is longer than max age %s", dup, s.MaxAge))
	}
	if replicas < 1 || replicas > MaxReplicas {
		errs = append(errs, fmt.Errorf("replicas %d out of range 1..%d", replicas, MaxReplicas))
	}
	if err := errors.Join(errs...); err != nil {
		return jetstream.StreamConfig{}, fmt.Errorf("stream %s: %w", name, err)
	}
	return jetstream.StreamConfig{
		Name:        name,
		Description: "tallyd events of site " + s.Site,
		Subjects:    []string{prefix + "." + s.Site + ".>"},
		Storage:     jetstream.FileStorage,
		Retention:   jetstream.LimitsPolicy,
		Discard:     jetstream.DiscardOld,
		MaxAge:      s.MaxAge,
		MaxBytes:    maxBytes,
		MaxMsgs:     -1,
		Duplicates:  dup,
		Replicas:    replicas,
	}, nil
}

// EnsureStream creates the site's stream, or brings an existing one to the
// settings (limits, duplicates window, replicas). It fails with
// ErrNoJetStream when the server has no JetStream, and with a clear error
// when the existing stream keeps other subjects (a name clash) or when
// JetStream refuses the change (storage cannot change; replicas beyond the
// cluster's size).
func EnsureStream(ctx context.Context, js jetstream.JetStream, s StreamSettings) (jetstream.Stream, error) {
	want, err := s.config()
	if err != nil {
		return nil, err
	}
	st, err := js.Stream(ctx, want.Name)
	switch {
	case errors.Is(err, jetstream.ErrStreamNotFound):
		st, err = js.CreateStream(ctx, want)
		if err != nil {
			return nil, fmt.Errorf("create stream %s: %w", want.Name, jetStreamErr(err))
		}
		return st, nil
	case err != nil:
		return nil, fmt.Errorf("look up stream %s: %w", want.Name, jetStreamErr(err))
	}
	have := st.CachedInfo().Config
	if !slices.Equal(have.Subjects, want.Subjects) {
		return nil, fmt.Errorf("stream %s exists for subjects %v, not %v: another site or prefix has the same stream name", want.Name, have.Subjects, want.Subjects)
	}
	if have.Storage != want.Storage {
		return nil, fmt.Errorf("stream %s is kept in %s storage, not file: JetStream cannot change a stream's storage (move its events to a new stream, or delete it)", want.Name, have.Storage)
	}
	if have.MaxAge == want.MaxAge && have.MaxBytes == want.MaxBytes && have.Duplicates == want.Duplicates && have.Replicas == want.Replicas {
		return st, nil
	}
	upd := have
	upd.MaxAge, upd.MaxBytes, upd.Duplicates, upd.Replicas = want.MaxAge, want.MaxBytes, want.Duplicates, want.Replicas
	st, err = js.UpdateStream(ctx, upd)
	if err != nil {
		return nil, fmt.Errorf("update stream %s (replicas %d to %d, max age %s to %s, max bytes %d to %d, duplicates %s to %s): %w",
			want.Name, have.Replicas, want.Replicas, have.MaxAge, want.MaxAge, have.MaxBytes, want.MaxBytes, have.Duplicates, want.Duplicates, jetStreamErr(err))
	}
	return st, nil
}

// jetStreamErr turns the ways a server without JetStream answers into
// ErrNoJetStream, keeping the client's error.
func jetStreamErr(err error) error {
	if errors.Is(err, nats.ErrNoResponders) || errors.Is(err, jetstream.ErrJetStreamNotEnabled) ||
		errors.Is(err, jetstream.ErrJetStreamNotEnabledForAccount) {
		return fmt.Errorf("%w (%w)", ErrNoJetStream, err)
	}
	return err
}
