package fleet

import (
	"sync"
	"time"
)

// Kind is what a lease is for.
type Kind string

// Lease kinds.
const (
	KindSource Kind = "source" // a camera or stream of the site
	KindArea   Kind = "area"   // a site-wide area whose occupancy one member keeps
)

// Cause says why a hold began or ended.
type Cause string

// Causes. First, Released and Expired say how the previous holder went
// (Prior.Cause and hand-over records); Lost, Stopping and Rebalance say why
// Holder.Stop is called.
const (
	CauseFirst     Cause = "first"     // no holder was known before
	CauseReleased  Cause = "released"  // the previous holder let it go cleanly
	CauseExpired   Cause = "expired"   // the previous holder stopped renewing
	CauseLost      Cause = "lost"      // our renewal was refused or not confirmed in time
	CauseStopping  Cause = "stopping"  // the member leaves (or its context ended)
	CauseRebalance Cause = "rebalance" // released so that a member with fewer holds takes it
)

// Holder is what the member runs for each hold (the pipeline, through the
// daemon's adapter).
type Holder interface {
	// Start begins using h (open the source / keep the area); it must not
	// block for long.
	Start(h *Hold)
	// Stop ends using h and returns when nothing more will be produced
	// under it (stays closed and handed to the outbox); called before a
	// clean release deletes the lease, and after a lease was lost.
	Stop(h *Hold, cause Cause)
}

// Prior is the previous holder of a lease as this member last saw it.
type Prior struct {
	Member   string
	LastSeen time.Time // its last renewal (wall clock), or when it released
	Cause    Cause     // CauseReleased or CauseExpired
	Token    uint64    // its fencing token
}

// Hold is one lease this member holds: a source or an area.
type Hold struct {
	Kind   Kind
	Name   string // source id or area name
	Token  uint64 // the lease key's revision when this member created it: the fencing token, grows with every new hold
	Member string
	Since  time.Time
	Prior  *Prior // the previous holder as last seen; nil when none is known

	key  string
	done chan struct{}

	mu         sync.Mutex
	rev        uint64    // the lease key's last revision this member wrote
	deadline   time.Time // (send time of the last confirmed write) + TTL − margin
	ended      bool
	stopCalled bool // Holder.Stop was called (or is running)
	releasing  bool // a clean release is under way
}

// Valid says whether the hold may still produce at time t: t is before the
// hold's local deadline — (send time of the last renewal the broker
// confirmed) + TTL − TTL/10 — and the hold has not ended. Other members
// take an expired lease only after TTL without a new revision by their own
// clock, so a hold is never valid at the same time as the next one.
func (h *Hold) Valid(t time.Time) bool {
	h.mu.Lock()
	defer h.mu.Unlock()
	return !h.ended && t.Before(h.deadline)
}

// Done is closed when the hold ends (lost, released, member stopped).
func (h *Hold) Done() <-chan struct{} { return h.done }

// Deadline is the hold's current local deadline (see Valid).
func (h *Hold) Deadline() time.Time {
	h.mu.Lock()
	defer h.mu.Unlock()
	return h.deadline
}

// end marks the hold ended and closes Done; it reports whether this call
// ended it and whether Stop still has to be called (and marks it called).
func (h *Hold) end() (ended, callStop bool) {
	h.mu.Lock()
	defer h.mu.Unlock()
	if h.ended {
		return false, false
	}
	h.ended = true
	close(h.done)
	callStop = !h.stopCalled
	h.stopCalled = true
	return true, callStop
}
