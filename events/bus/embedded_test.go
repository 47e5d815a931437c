package bus

import (
	"context"
	"errors"
	"fmt"
	"strings"
	"sync"
	"testing"

	"github.com/nats-io/nats.go/jetstream"
	"github.com/nats-io/nkeys"
)

func TestStartEmbeddedOptions(t *testing.T) {
	inUse := startServer(t)
	kp, err := nkeys.CreateUser()
	must(t, err)
	pub, err := kp.PublicKey()
	must(t, err)
	tests := []struct {
		name    string
		o       EmbeddedOptions
		want    string // exact error; "" = starts
		wantErr error  // errors.Is target
		url     string // for a started server: the URL's host part
	}{
		{name: "default host is loopback", o: EmbeddedOptions{}, url: "nats://127.0.0.1:"},
		{name: "localhost without auth", o: EmbeddedOptions{Host: "localhost"}, url: "nats://localhost:"},
		{name: "ipv6 loopback without auth", o: EmbeddedOptions{Host: "::1"}, url: "nats://[::1]:"},
		{name: "any address with a user", o: EmbeddedOptions{Host: "0.0.0.0", User: "counter", Password: "pw"}, url: "nats://127.0.0.1:"},
		{name: "any address with an nkey", o: EmbeddedOptions{Host: "0.0.0.0", NKey: pub}, url: "nats://127.0.0.1:"},
		{name: "any address without auth", o: EmbeddedOptions{Host: "0.0.0.0"}, wantErr: ErrOpenToNetwork,
			want: "embedded NATS server on 0.0.0.0 without user/password or NKey: anyone on the network could publish forged counts"},
		{name: "host name without auth", o: EmbeddedOptions{Host: "counter.example"}, wantErr: ErrOpenToNetwork,
			want: "embedded NATS server on counter.example without user/password or NKey: anyone on the network could publish forged counts"},
		{name: "lan address without auth", o: EmbeddedOptions{Host: "192.168.1.20"}, wantErr: ErrOpenToNetwork,
			want: "embedded NATS server on 192.168.1.20 without user/password or NKey: anyone on the network could publish forged counts"},
		{name: "port out of range", o: EmbeddedOptions{Port: 70000}, wantErr: ErrNotReady,
			want: "embedded nats server not ready: port 70000 out of range 0..65535"},
		{name: "user without password", o: EmbeddedOptions{User: "counter"}, wantErr: ErrNotReady,
			want: `embedded nats server not ready: user and password go together (user "counter", password set: false)`},
		{name: "password without user", o: EmbeddedOptions{Password: "pw"}, wantErr: ErrNotReady,
			want: `embedded nats server not ready: user and password go together (user "", password set: true)`},
		{name: "seed instead of public nkey", o: EmbeddedOptions{NKey: "SUAXXX"}, wantErr: ErrNotReady,
			want: `embedded nats server not ready: nkey "SUAXXX" is not a public user nkey ("U...")`},
		{name: "negative max store", o: EmbeddedOptions{StoreDir: t.TempDir(), MaxStore: -1}, wantErr: ErrNotReady,
			want: "embedded nats server not ready: max store -1 bytes is negative"},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			srv, err := StartEmbedded(tc.o, nil)
			if tc.want == "" {
				if err != nil {
					if strings.Contains(err.Error(), "cannot assign requested address") {
						t.Skipf("no such address here: %v", err)
					}
					t.Fatal(err)
				}
				defer srv.Shutdown()
				if want := fmt.Sprintf("%s%d", tc.url, srv.Port()); srv.URL() != want {
					t.Errorf("URL %q, want %q", srv.URL(), want)
				}
				return
			}
			if err == nil {
				srv.Shutdown()
				t.Fatalf("started; want %q", tc.want)
			}
			if err.Error() != tc.want || !errors.Is(err, tc.wantErr) {
				t.Errorf("error\n got %q\nwant %q (wrapping %v)", err, tc.want, tc.wantErr)
			}
		})
	}
	// A port already taken.
	_, err = StartEmbedded(EmbeddedOptions{Port: inUse.Port()}, nil)
	if !errors.Is(err, ErrNotReady) || !strings.Contains(err.Error(), "address already in use") {
		t.Errorf("port in use: %v", err)
	}
}

func TestEmbeddedShutdownTwiceAndConcurrently(t *testing.T) {
	srv, err := StartEmbedded(EmbeddedOptions{}, nil)
	must(t, err)
	var wg sync.WaitGroup
	for range 3 {
		wg.Go(srv.Shutdown)
	}
	wg.Wait()
	srv.Shutdown()
	if _, err := Connect(srv.URL(), "after-shutdown", nil); err == nil {
		t.Error("connected to a stopped server")
	}
}

// TestEmbeddedJetStream: JetStream runs only with a store directory, and its
// file store outlives a restart.
func TestEmbeddedJetStream(t *testing.T) {
	ctx := context.Background()
	plain := startServer(t)
	if plain.JetStream() {
		t.Error("JetStream on without a store directory")
	}
	_, js := jsConnect(t, plain.URL())
	if _, err := js.AccountInfo(ctx); !errors.Is(err, jetstream.ErrJetStreamNotEnabled) {
		t.Errorf("AccountInfo without JetStream: %v", err)
	}

	dir := t.TempDir()
	srv, err := StartEmbedded(EmbeddedOptions{StoreDir: dir, MaxStore: 64 << 20}, nil)
	must(t, err)
	if !srv.JetStream() {
		t.Fatal("JetStream off with a store directory")
	}
	nc, js := jsConnect(t, srv.URL())
	info, err := js.AccountInfo(ctx)
	must(t, err)
	if info.Limits.MaxStore != -1 && info.Limits.MaxStore > 64<<20 {
		t.Errorf("account max store %d, want at most 64 MiB", info.Limits.MaxStore)
	}
	_, err = EnsureStream(ctx, js, StreamSettings{Site: "depot"})
	must(t, err)
	_, err = js.Publish(ctx, "tallyd.depot.cam-1.door.in", []byte(`{}`))
	must(t, err)
	nc.Close()
	port := srv.Port()
	srv.Shutdown()

	srv2, err := StartEmbedded(EmbeddedOptions{StoreDir: dir, Port: port}, nil)
	must(t, err)
	defer srv2.Shutdown()
	_, js2 := jsConnect(t, srv2.URL())
	st, err := js2.Stream(ctx, "TALLYD_DEPOT")
	must(t, err)
	if n := st.CachedInfo().State.Msgs; n != 1 {
		t.Errorf("after restart the stream holds %d messages, want 1", n)
	}
}
