package fleet

import (
	"context"
	"encoding/json"
	"strings"
	"sync"
	"time"

	"github.com/nats-io/nats.go/jetstream"
)

// loop is the member's one worker: it renews the member key and the holds
// every Renew, plans (expire stale keys, claim, rebalance) on a short tick
// and whenever the bucket changes, finishes clean releases and leaves.
func (m *Member) loop() {
	defer m.wg.Done()
	defer close(m.stopped)
	t := time.NewTicker(max(min(m.o.Renew, m.o.TTL/10), 10*time.Millisecond))
	defer t.Stop()
	rt := time.NewTicker(m.o.Renew)
	defer rt.Stop()
	retry := false
	renew := func() {
		if m.o.pause != nil {
			m.o.pause()
		}
		retry = !m.renewAll()
	}
	var leaveReply chan error
	for {
		select {
		case <-m.ctx.Done():
			m.abandon()
			return
		case reply := <-m.leave:
			leaveReply = reply
			m.mu.Lock()
			m.leaving = true
			m.mu.Unlock()
			for _, h := range m.Holds() {
				m.release(h, CauseStopping)
			}
		case h := <-m.released:
			m.finish(h)
		case <-m.wake:
			m.plan(time.Now())
		case <-rt.C:
			renew()
			m.plan(time.Now())
		case <-t.C:
			// A failed renewal is tried again on the next tick, not a
			// whole period later: the deadline is near.
			if retry {
				renew()
			}
			m.plan(time.Now())
		}
		if leaveReply != nil && len(m.Holds()) == 0 {
			leaveReply <- m.deleteMember()
			m.log.Info("left site")
			return
		}
	}
}

// abandon ends every hold without releasing its lease (the Join context
// ended): the leases expire as a dead daemon's would.
func (m *Member) abandon() {
	for _, h := range m.Holds() {
		if _, callStop := m.drop(h); callStop {
			m.wg.Add(1)
			go func() {
				defer m.wg.Done()
				m.holder.Stop(h, CauseStopping)
			}()
		}
	}
}

// opCtx bounds one lease operation (a stalled one must not hold up the
// renewals for long).
func (m *Member) opCtx() (context.Context, context.CancelFunc) {
	return context.WithTimeout(m.ctx, m.attempt())
}

// attempt is how long one renewal may wait for its confirmation before it
// is tried again (a lost connection or a leader election stalls requests).
func (m *Member) attempt() time.Duration { return m.o.TTL / 5 }

// renewAll renews the member key and every hold, all at once so that one
// stalled request delays no other; it reports whether all succeeded.
func (m *Member) renewAll() bool {
	hs := m.Holds()
	ok := make([]bool, len(hs))
	var wg sync.WaitGroup
	for i, h := range hs {
		wg.Add(1)
		go func() {
			defer wg.Done()
			ok[i] = m.renew(h)
		}()
	}
	all := m.renewMember()
	wg.Wait()
	for _, o := range ok {
		all = all && o
	}
	return all
}

// renewMember renews the member key, registering again if it expired.
func (m *Member) renewMember() bool {
	key := "member." + m.o.Member
	now := time.Now()
	v := leaseValue{Member: m.o.Member, Capacity: m.o.Capacity, Since: m.joined, Seen: now}
	ctx, cancel := context.WithTimeout(m.ctx, m.attempt())
	rev, err := m.kv.Update(ctx, key, mustJSON(v), m.memberRv)
	m.ops.Add(1)
	if err != nil && isRevisionMismatch(err) {
		// Our own earlier write whose ack was lost, or our key expired
		// while we were frozen: adopt it, or register again.
		if r, _, ok := m.ownRev(ctx, key, func(o leaseValue) bool { return o.Since.Equal(m.joined) }); ok {
			rev, err = r, nil
		} else {
			rev, err = m.kv.Create(ctx, key, mustJSON(v))
			m.ops.Add(1)
		}
	}
	cancel()
	if err != nil {
		m.failures.Add(1)
		m.log.Debug("member key renewal failed", "err", err)
		return false
	}
	m.memberRv = rev
	return true
}

// ownRev reads key and says whether its value is this member's own write
// (mine tells a hold's or the member key's value apart), with its revision
// and the wall time it was sent.
func (m *Member) ownRev(ctx context.Context, key string, mine func(leaseValue) bool) (uint64, time.Time, bool) {
	e, err := m.kv.Get(ctx, key)
	m.ops.Add(1)
	if err != nil {
		return 0, time.Time{}, false
	}
	var v leaseValue
	if json.Unmarshal(e.Value(), &v) != nil || v.Member != m.o.Member || v.ReleasedAt != nil || !mine(v) {
		return 0, time.Time{}, false
	}
	return e.Revision(), v.Seen, true
}

// renew renews one hold; a refused renewal ends it (CauseLost), a failed
// one is tried again while the deadline lasts. It reports false when the
// renewal failed and should be tried again soon.
func (m *Member) renew(h *Hold) bool {
	h.mu.Lock()
	rev, dl, ended := h.rev, h.deadline, h.ended
	h.mu.Unlock()
	sent := time.Now()
	if ended || !sent.Before(dl) {
		return true // the watchdog ends it
	}
	ctx, cancel := context.WithDeadline(m.ctx, earlier(dl, sent.Add(m.attempt())))
	defer cancel()
	v := leaseValue{Member: m.o.Member, Token: h.Token, Since: h.Since, Seen: sent}
	r, err := m.kv.Update(ctx, h.key, mustJSON(v), rev)
	m.ops.Add(1)
	if err != nil {
		m.failures.Add(1)
		if !isRevisionMismatch(err) {
			m.log.Debug("renewal failed", "key", h.key, "err", err)
			return false
		}
		own, at, ok := m.ownRev(ctx, h.key, func(o leaseValue) bool { return o.Token == h.Token })
		if !ok {
			m.lose(h, "renewal refused")
			return true
		}
		r, sent = own, at
	}
	h.mu.Lock()
	if !h.ended {
		h.rev = r
		if d := sent.Add(m.o.TTL - m.margin); d.After(h.deadline) {
			h.deadline = d
		}
	}
	h.mu.Unlock()
	return true
}

func earlier(a, b time.Time) time.Time {
	if b.Before(a) {
		return b
	}
	return a
}

// plan deletes other members' stale keys, claims free keys up to the fair
// share (and orphans beyond it, within capacity) and releases one source
// for the spread when this member holds more than its share and another
// member can take it.
func (m *Member) plan(now time.Time) {
	if now.Before(m.joined.Add(m.o.Renew)) {
		return // members started together see each other before claiming
	}
	// Our own member-key renewals come back through the watcher; when they
	// stop coming for two renewal periods, the watcher is stuck and the
	// view of the bucket stale (no free lease would ever be seen).
	m.mu.Lock()
	own := m.obs["member."+m.o.Member]
	behind := own == nil || own.rev < m.memberRv
	m.mu.Unlock()
	switch {
	case !behind:
		m.behindSince = time.Time{}
	case m.behindSince.IsZero():
		m.behindSince = now
	case now.Sub(m.behindSince) > 2*m.o.Renew:
		m.behindSince = time.Time{}
		select {
		case m.rewatch <- struct{}{}:
		default:
		}
	}
	type stale struct {
		key string
		rev uint64
	}
	var old []stale
	live := 1
	holdsBy, caps := map[string]int{}, map[string]int{}
	m.mu.Lock()
	if m.leaving {
		m.mu.Unlock()
		return
	}
	for key, s := range m.obs {
		kind, _, _ := strings.Cut(key, ".")
		if !s.present || (kind != "source" && kind != "area" && kind != "member") {
			continue
		}
		if _, mine := m.holds[key]; mine || key == "member."+m.o.Member {
			continue
		}
		if now.Sub(s.at) >= m.o.TTL {
			old = append(old, stale{key, s.rev})
			continue
		}
		switch kind {
		case "member":
			live++
			caps[s.val.Member] = s.val.Capacity
		case "source":
			holdsBy[s.val.Member]++
		}
	}
	m.mu.Unlock()
	for _, o := range old {
		if !m.expire(o.key, o.rev, now) {
			return // the bucket does not answer: try again next tick
		}
	}

	share := min((len(m.o.Sources)+live-1)/live, m.o.Capacity)
	areaShare := (len(m.o.Areas) + live - 1) / live
	var held, heldAreas int
	var newest *Hold
	for _, h := range m.Holds() {
		h.mu.Lock()
		releasing := h.releasing
		h.mu.Unlock()
		if releasing {
			continue
		}
		if h.Kind == KindArea {
			heldAreas++
			continue
		}
		held++
		if newest == nil || h.Since.After(newest.Since) {
			newest = h
		}
	}
	for _, key := range m.order {
		kind, name, _ := strings.Cut(key, ".")
		m.mu.Lock()
		s := m.obs[key]
		_, mine := m.holds[key]
		var free bool
		var freeSince time.Time
		var prior *Prior
		if s == nil || !s.present {
			// Orphans: free for a renewal period after claiming began.
			free, freeSince = true, m.joined.Add(m.o.Renew)
			if s != nil {
				freeSince = later(freeSince, s.at)
				prior = priorOf(s.last)
			}
		}
		m.mu.Unlock()
		if mine || !free {
			continue
		}
		orphan := now.Sub(freeSince) >= m.o.Renew
		if Kind(kind) == KindArea {
			if heldAreas < areaShare || orphan {
				got, answered := m.acquire(KindArea, name, key, prior)
				if !answered {
					return
				}
				if got {
					heldAreas++
				}
			}
			continue
		}
		if held < share || (orphan && held < m.o.Capacity) {
			got, answered := m.acquire(KindSource, name, key, prior)
			if !answered {
				return // the bucket does not answer: try again next tick
			}
			if got {
				held++
				if held > share && prior != nil && prior.Member == m.o.Member && prior.Cause == CauseReleased {
					// Nobody took what we released for the spread (the
					// member short of its share is not claiming, e.g.
					// still reconnecting): wait longer before the next
					// rebalance, so a source does not flap between
					// release and take-back.
					m.rebalanceWait = min(max(2*m.rebalanceWait, 2*m.o.Renew), 8*m.o.TTL)
					m.log.Info("a source released for the spread came back; rebalancing less often", "source", name, "wait", m.rebalanceWait)
				}
			}
		}
	}
	if held <= share {
		m.rebalanceWait = 0
	}

	if held > share && newest != nil && now.Sub(m.lastRebalance) >= max(m.o.Renew, m.rebalanceWait) {
		for member, c := range caps {
			if holdsBy[member] < min(share, c) {
				m.lastRebalance = now
				m.rebalance.Add(1)
				m.log.Info("releasing a source for the spread", "source", newest.Name, "share", share, "to", member)
				m.release(newest, CauseRebalance)
				break
			}
		}
	}
}

func later(a, b time.Time) time.Time {
	if b.After(a) {
		return b
	}
	return a
}

// priorOf is the previous holder described by the last value seen of its
// lease, nil when none.
func priorOf(v *leaseValue) *Prior {
	if v == nil || v.Member == "" {
		return nil
	}
	p := &Prior{Member: v.Member, LastSeen: v.Seen, Cause: CauseExpired, Token: v.Token}
	if v.ReleasedAt != nil {
		p.LastSeen, p.Cause = *v.ReleasedAt, CauseReleased
	}
	return p
}

// expire deletes key if its revision is still rev (no renewal for a TTL by
// our clock).
// It reports false when the bucket did not answer.
func (m *Member) expire(key string, rev uint64, now time.Time) bool {
	ctx, cancel := m.opCtx()
	defer cancel()
	err := m.kv.Delete(ctx, key, jetstream.LastRevision(rev))
	m.ops.Add(1)
	if err != nil {
		m.failures.Add(1)
		if !isRevisionMismatch(err) {
			return false
		}
		// Renewed after all: look again.
		if e, gerr := m.kv.Get(ctx, key); gerr == nil {
			m.observe(key, e.Revision(), true, e.Value(), time.Now())
		}
		return true
	}
	m.expired.Add(1)
	m.log.Info("expired a stale lease", "key", key, "rev", rev)
	m.mu.Lock()
	if s := m.obs[key]; s != nil && s.rev == rev {
		s.present, s.at = false, now
	}
	m.mu.Unlock()
	return true
}

// acquire creates the lease key and, when it got it, starts the hold. It
// reports whether it got it, and whether the bucket answered.
func (m *Member) acquire(kind Kind, name, key string, prior *Prior) (got, answered bool) {
	ctx, cancel := m.opCtx()
	defer cancel()
	if prior == nil {
		// Not seen by this member (it joined after the key went, e.g. a
		// daemon rebuilding itself): the key's history still has it.
		prior = m.priorFromHistory(ctx, key)
	}
	sent := time.Now()
	v := leaseValue{Member: m.o.Member, Since: sent, Seen: sent}
	rev, err := m.kv.Create(ctx, key, mustJSON(v))
	m.ops.Add(1)
	if err != nil {
		m.failures.Add(1)
		if !isRevisionMismatch(err) {
			m.log.Debug("claim failed", "key", key, "err", err)
			return false, false
		}
		return false, true
	}
	h := &Hold{Kind: kind, Name: name, Token: rev, Member: m.o.Member, Since: sent, Prior: prior,
		key: key, done: make(chan struct{}), rev: rev, deadline: sent.Add(m.o.TTL - m.margin)}
	// Write the fencing token into the value, for readers and successors.
	v.Token, v.Seen = rev, time.Now()
	r2, err := m.kv.Update(ctx, key, mustJSON(v), rev)
	m.ops.Add(1)
	switch {
	case err == nil:
		h.rev, h.deadline = r2, v.Seen.Add(m.o.TTL-m.margin)
	case isRevisionMismatch(err):
		m.failures.Add(1)
		return false, true // taken from us at once: never started
	default:
		m.failures.Add(1) // the next renewal writes it
	}
	m.mu.Lock()
	m.holds[key] = h
	m.mu.Unlock()
	m.started.Add(1)
	m.writeRecord(ctx, h)
	m.log.Info("hold started", "key", key, "token", h.Token, "prior", prior)
	m.holder.Start(h)
	return true, true
}

// priorFromHistory is the previous holder of key from the bucket's history
// (the last value written before the key was deleted), nil when none.
func (m *Member) priorFromHistory(ctx context.Context, key string) *Prior {
	hist, err := m.kv.History(ctx, key)
	m.ops.Add(1)
	if err != nil {
		return nil
	}
	for i := len(hist) - 1; i >= 0; i-- {
		if hist[i].Operation() != jetstream.KeyValuePut {
			continue
		}
		var v leaseValue
		if json.Unmarshal(hist[i].Value(), &v) != nil {
			return nil
		}
		return priorOf(&v)
	}
	return nil
}

// writeRecord stores the hand-over record last.<kind>.<name>.
func (m *Member) writeRecord(ctx context.Context, h *Hold) {
	r := handoverRecord{To: m.o.Member, Cause: CauseFirst, At: h.Since, Token: h.Token}
	if p := h.Prior; p != nil {
		gap := h.Since.Sub(p.LastSeen).Seconds()
		r.From, r.Cause, r.GapS = p.Member, p.Cause, &gap
	}
	_, err := m.kv.Put(ctx, "last."+h.key, mustJSON(r))
	m.ops.Add(1)
	if err != nil {
		m.failures.Add(1)
		m.log.Warn("hand-over record not written", "key", h.key, "err", err)
	}
}

// release stops h (Holder.Stop with cause, in its own goroutine, while the
// loop keeps renewing it), after which finish deletes the lease.
func (m *Member) release(h *Hold, cause Cause) {
	h.mu.Lock()
	if h.ended || h.stopCalled {
		h.mu.Unlock()
		return
	}
	h.stopCalled, h.releasing = true, true
	h.mu.Unlock()
	m.wg.Add(1)
	go func() {
		defer m.wg.Done()
		m.holder.Stop(h, cause)
		select {
		case m.released <- h:
		case <-m.ctx.Done():
		}
	}()
}

// finish ends a released hold whose Stop returned: a final write saying
// when it was released, then the delete, both conditional on our revision.
func (m *Member) finish(h *Hold) {
	if ended, _ := m.drop(h); !ended {
		return // lost while stopping
	}
	h.mu.Lock()
	rev := h.rev
	h.mu.Unlock()
	ctx, cancel := m.opCtx()
	defer cancel()
	now := time.Now()
	v := leaseValue{Member: m.o.Member, Token: h.Token, Since: h.Since, Seen: now, ReleasedAt: &now}
	r, err := m.kv.Update(ctx, h.key, mustJSON(v), rev)
	m.ops.Add(1)
	if err == nil {
		err = m.kv.Delete(ctx, h.key, jetstream.LastRevision(r))
		m.ops.Add(1)
	}
	if err != nil {
		m.failures.Add(1)
		m.log.Warn("release failed: the lease expires instead", "key", h.key, "err", err)
		return
	}
	m.releasedN.Add(1)
	m.log.Info("hold released", "key", h.key, "token", h.Token)
}

// deleteMember deletes the member key (leaving).
func (m *Member) deleteMember() error {
	ctx, cancel := m.opCtx()
	defer cancel()
	err := m.kv.Delete(ctx, "member."+m.o.Member, jetstream.LastRevision(m.memberRv))
	m.ops.Add(1)
	if err != nil {
		m.failures.Add(1)
		return err
	}
	return nil
}
