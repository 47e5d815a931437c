package bus

import (
	"context"
	"errors"
	"testing"
	"time"

	"tallyd/events"
	"tallyd/internal/testkit"
)

// TestPublishRaw: pre-encoded events go out on checked subjects and are
// counted with the others.
func TestPublishRaw(t *testing.T) {
	srv := startServer(t)
	pubConn, subConn := connect(t, srv.URL()), connect(t, srv.URL())
	var c collector
	subscribe(t, subConn, Filter{Prefix: "tallyd"}, &c)
	pub := NewPublisher(pubConn, "tallyd")
	ev := testEvent("depot", "cam-1", "door", "in", 7)
	must(t, pub.PublishRaw(ev.NATSSubject("tallyd"), mustJSON(t, ev)))
	must(t, pub.Publish(context.Background(), testEvent("depot", "cam-1", "door", "out", 8)))
	testkit.WaitFor(t, 5*time.Second, "both events", func() bool { n, _ := c.count(); return n == 2 })
	if pub.Published() != 2 {
		t.Errorf("Published() = %d", pub.Published())
	}
	for _, tc := range []struct{ subject, want string }{
		{"other.depot.cam-1.door.in", `publish on other.depot.cam-1.door.in: invalid subject token: subject outside prefix "tallyd"`},
		{"tallyd.depot.cam-1.in", "publish on tallyd.depot.cam-1.in: invalid subject token: 3 tokens after the prefix, want 4 (site.source.rule.kind)"},
		{"tallyd.depot.*.door.in", `publish on tallyd.depot.*.door.in: invalid subject token "*": '*' at byte 0 is not a letter, digit, '-' or '_'`},
	} {
		if err := pub.PublishRaw(tc.subject, []byte("{}")); err == nil || err.Error() != tc.want || !errors.Is(err, ErrInvalidToken) {
			t.Errorf("PublishRaw(%s):\n got %v\nwant %s", tc.subject, err, tc.want)
		}
	}
	must(t, pub.Close())
	if err := pub.PublishRaw(ev.NATSSubject("tallyd"), nil); !errors.Is(err, events.ErrClosed) {
		t.Errorf("after Close: %v", err)
	}
}
