package bus

import (
	"context"
	"errors"
	"fmt"
	"strings"
	"testing"
)

func TestState(t *testing.T) {
	ctx := context.Background()
	dir := t.TempDir()
	srv, err := StartEmbedded(EmbeddedOptions{StoreDir: dir}, nil)
	must(t, err)
	defer srv.Shutdown()
	nc, js := jsConnect(t, srv.URL())
	st, err := OpenState(ctx, js, "tallyd-depot", 0)
	must(t, err)
	if st.Bucket() != "tallyd-depot" {
		t.Errorf("bucket %q", st.Bucket())
	}
	all, err := st.All(ctx)
	if err != nil || len(all) != 0 {
		t.Fatalf("empty bucket: %v, %v", all, err)
	}
	want := map[string]string{
		"totals.walkway.boarding-gate":   `{"in":12,"out":9}`,
		"occupancy.walkway.ticket-queue": `{"now":3}`,
		"walkway.boarding-gate":          `{"in":12}`,
		"totals.gate-2.door":             `{"in":1}`,
	}
	for k, v := range want {
		must(t, st.Put(ctx, k, []byte(v)))
	}
	must(t, st.Put(ctx, "totals.gate-2.door", []byte(`{"in":2}`))) // latest wins
	want["totals.gate-2.door"] = `{"in":2}`
	got, err := st.Get(ctx, "totals.gate-2.door")
	if err != nil || string(got) != `{"in":2}` {
		t.Errorf("Get = %s, %v", got, err)
	}
	if _, err := st.Get(ctx, "totals.nobody.door"); !errors.Is(err, ErrNoState) || err.Error() != "get state totals.nobody.door: no state stored under this key" {
		t.Errorf("missing key: %v", err)
	}

	// Restored after a restart of the server (file storage).
	nc.Close()
	port := srv.Port()
	srv.Shutdown()
	srv2, err := StartEmbedded(EmbeddedOptions{StoreDir: dir, Port: port}, nil)
	must(t, err)
	defer srv2.Shutdown()
	_, js2 := jsConnect(t, srv2.URL())
	st2, err := OpenState(ctx, js2, "tallyd-depot", 1)
	must(t, err)
	all, err = st2.All(ctx)
	must(t, err)
	if len(all) != len(want) {
		t.Errorf("All has %d keys, want %d: %v", len(all), len(want), all)
	}
	for k, v := range want {
		if string(all[k]) != v {
			t.Errorf("All[%s] = %s, want %s", k, all[k], v)
		}
	}
}

func TestStateErrors(t *testing.T) {
	ctx := context.Background()
	srv := startJS(t)
	_, js := jsConnect(t, srv.URL())
	st, err := OpenState(ctx, js, "tallyd-depot", 1)
	must(t, err)
	long := strings.Repeat("a", 253) + ".b.c"
	tests := []struct {
		name string
		err  error
		want string
	}{
		{"bad key token", st.Put(ctx, "totals.front door.x", []byte("1")),
			`put state: state key "totals.front door.x": token 2: invalid subject token "front door": ' ' at byte 5 is not a letter, digit, '-' or '_'`},
		{"wildcard key", st.Put(ctx, "totals.*", []byte("1")),
			`put state: state key "totals.*": token 2: invalid subject token "*": '*' at byte 0 is not a letter, digit, '-' or '_'`},
		{"empty token", st.Put(ctx, "totals..x", []byte("1")),
			`put state: state key "totals..x": token 2: invalid subject token "": empty`},
		{"long key", st.Put(ctx, long, []byte("1")),
			`put state: state key "aaaaaaaaaaaaaaaaaaaa"...: 257 bytes, limit 255`},
		{"too large", st.Put(ctx, "totals.a.b", make([]byte, MaxStateValue+1)),
			fmt.Sprintf("put state totals.a.b: value of %d bytes, limit %d", MaxStateValue+1, MaxStateValue)},
		{"bad bucket", func() error { _, err := OpenState(ctx, js, "tallyd.depot", 1); return err }(),
			`open state bucket: invalid subject token "tallyd.depot": '.' at byte 6 is not a letter, digit, '-' or '_'`},
		{"replicas", func() error { _, err := OpenState(ctx, js, "b", 9); return err }(),
			"open state bucket b: replicas 9 out of range 1..5"},
	}
	for _, tc := range tests {
		if tc.err == nil || tc.err.Error() != tc.want {
			t.Errorf("%s:\n got %v\nwant %s", tc.name, tc.err, tc.want)
		}
	}
	plain := startServer(t)
	_, js2 := jsConnect(t, plain.URL())
	if _, err := OpenState(ctx, js2, "tallyd-depot", 1); !errors.Is(err, ErrNoJetStream) {
		t.Errorf("no JetStream: %v", err)
	}
}
