package main

import (
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"strings"
	"testing"
	"time"

	"github.com/nats-io/nats.go"
	"github.com/nats-io/nats.go/jetstream"

	"tallyd/internal/fleet"
	"tallyd/internal/testkit"
)

type nopHolder struct{}

func (nopHolder) Start(*fleet.Hold)             {}
func (nopHolder) Stop(*fleet.Hold, fleet.Cause) {}

// TestFleetCommand runs tallyd fleet against a 3-node cluster where two
// members share three sources.
func TestFleetCommand(t *testing.T) {
	c := testkit.StartCluster(t, 3)
	ctx, cancel := context.WithCancel(context.Background())
	defer cancel()
	var ms []*fleet.Member
	for _, name := range []string{"deck-a", "deck-b"} {
		nc, err := nats.Connect(c.URLs())
		if err != nil {
			t.Fatal(err)
		}
		defer nc.Close()
		js, _ := jetstream.New(nc)
		m, err := fleet.Join(ctx, js, fleet.Options{Site: "ferry", Member: name, TTL: 2 * time.Second,
			Capacity: 3, Sources: []string{"gate", "ramp", "deck"}, Replicas: 3}, nopHolder{})
		if err != nil {
			t.Fatal(err)
		}
		ms = append(ms, m)
	}
	testkit.WaitFor(t, 6*time.Second, "3 sources held", func() bool { return len(ms[0].Holds())+len(ms[1].Holds()) == 3 })

	var out, errOut bytes.Buffer
	if err := cmdFleet(ctx, []string{"--site", "ferry", "--nats", c.URLs(), "--json"}, &out, &errOut); err != nil {
		t.Fatalf("%v\n%s", err, errOut.String())
	}
	var st fleet.Status
	if err := json.Unmarshal(out.Bytes(), &st); err != nil {
		t.Fatalf("%v: %s", err, out.String())
	}
	if len(st.Members) != 2 || len(st.Leases) != 3 || len(st.Handovers) != 3 || st.Members[0].Holding+st.Members[1].Holding != 3 {
		t.Errorf("status %s", out.String())
	}
	out.Reset()
	if err := cmdFleet(ctx, []string{"--site", "ferry", "--nats", c.URLs()}, &out, &errOut); err != nil {
		t.Fatal(err)
	}
	for _, want := range []string{"site ferry at ", "2 members, 3 leases", "deck-a", "deck-b", "source  gate", "first"} {
		if !strings.Contains(out.String(), want) {
			t.Errorf("text output lacks %q:\n%s", want, out.String())
		}
	}

	for _, tc := range []struct {
		args []string
		want string
	}{
		{[]string{"--nats", c.URLs()}, "usage: --site NAME is required"},
		{[]string{"--site", "ferry"}, "usage: --nats URL is required"},
		{[]string{"--site", "a.b", "--nats", c.URLs()}, `usage: --site: invalid subject token "a.b"`},
		{[]string{"--site", "nosuch", "--nats", c.URLs()}, "usage: site nosuch: no lease bucket"},
	} {
		err := cmdFleet(ctx, tc.args, &out, &errOut)
		if err == nil || !strings.Contains(err.Error(), tc.want) {
			t.Errorf("%v: %v, want %q", tc.args, err, tc.want)
		}
		if !errors.Is(err, errUsage) { // exit code 2
			t.Errorf("%v: %v is not a usage error", tc.args, err)
		}
	}
}
