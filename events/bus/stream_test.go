package bus

import (
	"context"
	"errors"
	"strings"
	"testing"
	"time"

	"github.com/nats-io/nats.go/jetstream"
)

func TestStreamName(t *testing.T) {
	tests := []struct{ prefix, site, want, fail string }{
		{"tallyd", "ferry-terminal", "TALLYD_FERRY-TERMINAL", ""},
		{"", "depot", "TALLYD_DEPOT", ""},
		{"acme.tallyd", "Yard_2", "ACME_TALLYD_YARD_2", ""},
		{"tallyd", "a.b", "", `stream name: site: invalid subject token "a.b": '.' at byte 1 is not a letter, digit, '-' or '_'`},
		{"tallyd.>", "depot", "", `stream name: prefix "tallyd.>": invalid subject token ">": '>' at byte 0 is not a letter, digit, '-' or '_'`},
	}
	for _, tc := range tests {
		got, err := StreamName(tc.prefix, tc.site)
		fail := ""
		if err != nil {
			fail = err.Error()
		}
		if got != tc.want || fail != tc.fail {
			t.Errorf("StreamName(%q, %q) = %q, %q; want %q, %q", tc.prefix, tc.site, got, fail, tc.want, tc.fail)
		}
	}
}

func TestStreamSettingsChecked(t *testing.T) {
	tests := []struct {
		s    StreamSettings
		want string
	}{
		{StreamSettings{Site: "depot", MaxAge: -time.Second, MaxBytes: -1, Replicas: 7},
			"stream TALLYD_DEPOT: max age -1s is negative\nmax bytes -1 is negative\nreplicas 7 out of range 1..5"},
		{StreamSettings{Site: "depot", MaxAge: 5 * time.Minute},
			"stream TALLYD_DEPOT: duplicates window 10m0s is longer than max age 5m0s"},
		{StreamSettings{Site: "depot", Duplicates: -time.Second},
			"stream TALLYD_DEPOT: duplicates window -1s is negative"},
		{StreamSettings{Site: ""}, `stream name: site: invalid subject token "": empty`},
	}
	for _, tc := range tests {
		if _, err := tc.s.config(); err == nil || err.Error() != tc.want {
			t.Errorf("%+v:\n got %v\nwant %s", tc.s, err, tc.want)
		}
	}
	cfg, err := StreamSettings{Site: "depot", MaxAge: time.Hour}.config()
	must(t, err)
	// Defaults: file storage, 10 min duplicates window, one replica, no byte cap.
	if cfg.Storage != jetstream.FileStorage || cfg.Duplicates != DefaultDuplicates || cfg.Replicas != 1 ||
		cfg.MaxBytes != -1 || cfg.Subjects[0] != "tallyd.depot.>" {
		t.Errorf("config %+v", cfg)
	}
}

// TestEnsureStream creates, keeps, updates and refuses on a real server.
func TestEnsureStream(t *testing.T) {
	ctx := context.Background()
	srv := startJS(t)
	_, js := jsConnect(t, srv.URL())

	st, err := EnsureStream(ctx, js, StreamSettings{Site: "depot", MaxAge: time.Hour, MaxBytes: 1 << 20})
	must(t, err)
	c := st.CachedInfo().Config
	if c.Name != "TALLYD_DEPOT" || c.Storage != jetstream.FileStorage || c.MaxAge != time.Hour ||
		c.MaxBytes != 1<<20 || c.Duplicates != 10*time.Minute || c.Replicas != 1 {
		t.Fatalf("created %+v", c)
	}
	// Same settings again: nothing changes.
	_, err = EnsureStream(ctx, js, StreamSettings{Site: "depot", MaxAge: time.Hour, MaxBytes: 1 << 20})
	must(t, err)
	// New limits: updated in place.
	st, err = EnsureStream(ctx, js, StreamSettings{Site: "depot", MaxAge: 2 * time.Hour, Duplicates: time.Minute})
	must(t, err)
	if c := st.CachedInfo().Config; c.MaxAge != 2*time.Hour || c.Duplicates != time.Minute || c.MaxBytes != -1 {
		t.Errorf("updated %+v", c)
	}

	// Refusals, each in words a person can act on.
	_, err = js.CreateStream(ctx, jetstream.StreamConfig{Name: "TALLYD_MEM", Subjects: []string{"tallyd.mem.>"}, Storage: jetstream.MemoryStorage})
	must(t, err)
	_, err = js.CreateStream(ctx, jetstream.StreamConfig{Name: "TALLYD_CLASH", Subjects: []string{"tallyd.Clash.>"}})
	must(t, err)
	tests := []struct {
		name string
		s    StreamSettings
		want string // prefix of the error
	}{
		{"memory storage", StreamSettings{Site: "mem"},
			"stream TALLYD_MEM is kept in Memory storage, not file: JetStream cannot change a stream's storage (move its events to a new stream, or delete it)"},
		{"same name, other site", StreamSettings{Site: "clash"},
			"stream TALLYD_CLASH exists for subjects [tallyd.Clash.>], not [tallyd.clash.>]: another site or prefix has the same stream name"},
		// A single server cannot keep 3 copies (nats-server: "replicas > 1
		// not supported in non-clustered mode").
		{"replicas on create", StreamSettings{Site: "yard", Replicas: 3},
			"create stream TALLYD_YARD: nats: API error: code=500 err_code=10074 description=replicas > 1 not supported in non-clustered mode"},
		{"replicas on update", StreamSettings{Site: "depot", MaxAge: 2 * time.Hour, Duplicates: time.Minute, Replicas: 3},
			"update stream TALLYD_DEPOT (replicas 1 to 3, max age 2h0m0s to 2h0m0s, max bytes -1 to -1, duplicates 1m0s to 1m0s): nats: API error: code=500 err_code=10074 description=replicas > 1 not supported in non-clustered mode"},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			_, err := EnsureStream(ctx, js, tc.s)
			if err == nil || !strings.HasPrefix(err.Error(), tc.want) {
				t.Errorf("error\n got %v\nwant %s", err, tc.want)
			}
		})
	}
}

// TestEnsureStreamNoJetStream: a server without JetStream says so with the
// sentinel, so the daemon can fall back or refuse.
func TestEnsureStreamNoJetStream(t *testing.T) {
	srv := startServer(t)
	_, js := jsConnect(t, srv.URL())
	_, err := EnsureStream(context.Background(), js, StreamSettings{Site: "depot"})
	if !errors.Is(err, ErrNoJetStream) {
		t.Fatalf("error %v, want ErrNoJetStream", err)
	}
	if !strings.HasPrefix(err.Error(), "look up stream TALLYD_DEPOT: nats server has no jetstream (persistence) for this account") {
		t.Errorf("error %q", err)
	}
}
