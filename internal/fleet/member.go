package fleet

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"hash/fnv"
	"log/slog"
	"os"
	"sort"
	"strings"
	"sync"
	"sync/atomic"
	"time"

	"github.com/nats-io/nats.go/jetstream"
)

// DefaultTTL is a lease's time to live when Options.TTL is zero.
const DefaultTTL = 10 * time.Second

// Options configure a member of a site.
type Options struct {
	Site     string
	Member   string        // this daemon's name, unique in the site (default: hostname-pid)
	TTL      time.Duration // lease time to live (default DefaultTTL)
	Renew    time.Duration // renewal period (default TTL/3)
	Capacity int           // most sources this member holds (>= 1)
	Sources  []string      // the site's source ids
	Areas    []string      // the site's area names: one member keeps each
	Replicas int           // bucket replicas (1 or 3; 0 means 1)
	Log      *slog.Logger

	// pause, when set (tests), is called before each renewal pass: a
	// blocking pause simulates a frozen daemon.
	pause func()
	// deafWatch, when set (tests), is asked as each bucket watcher starts:
	// a duration > 0 makes that watcher drop everything it delivers after
	// that long (a stuck one).
	deafWatch func() time.Duration
}

// Stats count a member's lease work.
type Stats struct {
	Ops       int64 // lease operations sent: create, update, delete, put
	Failures  int64 // operations that failed (refusals included)
	Started   int64 // holds started
	Released  int64 // holds released cleanly (stopping, rebalance)
	Lost      int64 // holds lost (renewal refused or late)
	Expired   int64 // other members' stale keys this member deleted
	Holding   int   // holds now
	Rebalance int64 // holds released for the spread
	Rewatch   int64 // bucket watchers restarted because they fell behind
}

// leaseValue is the JSON value of source.*, area.* and member.* keys.
type leaseValue struct {
	Member     string     `json:"member"`
	Token      uint64     `json:"token,omitempty"`
	Capacity   int        `json:"capacity,omitempty"` // member keys
	Since      time.Time  `json:"since"`
	Seen       time.Time  `json:"seen"` // the writer's wall time at this write
	ReleasedAt *time.Time `json:"released_at,omitempty"`
}

// handoverRecord is the JSON value of last.<kind>.<name> keys.
type handoverRecord struct {
	From  string    `json:"from,omitempty"`
	To    string    `json:"to"`
	Cause Cause     `json:"cause"`
	At    time.Time `json:"at"`
	GapS  *float64  `json:"gap_s,omitempty"`
	Token uint64    `json:"token"`
}

// seen is what this member observed of one key of the lease bucket.
type seen struct {
	rev     uint64
	present bool       // the last operation was a put
	val     leaseValue // parsed value while present
	at      time.Time  // local time rev was first observed
	last    *leaseValue
}

// Member is this daemon's membership in a site: it keeps its member key,
// claims free and expired leases up to its fair share, renews them and
// runs a Holder for each hold.
type Member struct {
	o      Options
	kv     jetstream.KeyValue
	holder Holder
	log    *slog.Logger
	margin time.Duration
	joined time.Time
	order  []string // keys in this member's claim order: sources then areas

	ctx    context.Context
	cancel context.CancelFunc
	wg     sync.WaitGroup

	mu       sync.Mutex
	obs      map[string]*seen
	holds    map[string]*Hold // by lease key
	memberRv uint64
	leaving  bool

	wake     chan struct{}
	released chan *Hold
	// rewatch restarts the bucket watcher; behindSince is when plan first
	// saw the watcher miss this member's own latest member-key write.
	rewatch     chan struct{}
	behindSince time.Time
	leave       chan chan error
	stopped     chan struct{}

	ops, failures, started, releasedN, lost, expired, rebalance atomic.Int64
	rewatches                                                   atomic.Int64
	lastRebalance                                               time.Time
	rebalanceWait                                               time.Duration // grows while rebalanced sources come back (plan)
}

// Join registers this member (key member.<name>) in the site's lease bucket,
// creating the bucket when absent, and starts the claim loop. The member
// runs until ctx ends (then it stops renewing without releasing: its leases
// expire as a dead daemon's would) or until Leave.
func Join(ctx context.Context, js jetstream.JetStream, o Options, h Holder) (*Member, error) {
	if err := fillOptions(&o); err != nil {
		return nil, fmt.Errorf("join site: %w", err)
	}
	kv, err := openBucket(ctx, js, jetstream.KeyValueConfig{
		Bucket: LeaseBucket(o.Site), Description: "tallyd leases of site " + o.Site,
		// History 2: the final write of a clean release (released_at) stays
		// until watchers got it, though the delete follows at once.
		History: 2, MaxValueSize: 4096, Storage: jetstream.FileStorage, Replicas: o.Replicas,
	})
	if err != nil {
		return nil, fmt.Errorf("join site %s: %w", o.Site, err)
	}
	m := &Member{
		o: o, kv: kv, holder: h, log: o.Log.With("site", o.Site, "member", o.Member),
		margin: o.TTL / 10, obs: map[string]*seen{}, holds: map[string]*Hold{},
		wake: make(chan struct{}, 1), released: make(chan *Hold, 16), rewatch: make(chan struct{}, 1),
		leave: make(chan chan error), stopped: make(chan struct{}),
	}
	m.order = claimOrder(o.Member, o.Sources, o.Areas)
	m.ctx, m.cancel = context.WithCancel(ctx)
	ready := make(chan struct{})
	m.wg.Add(1)
	go m.watch(ready)
	select {
	case <-ready:
	case <-ctx.Done():
		m.cancel()
		m.wg.Wait()
		return nil, fmt.Errorf("join site %s: reading the lease bucket: %w", o.Site, ctx.Err())
	}
	rev, now, err := m.register(ctx)
	if err != nil {
		m.cancel()
		m.wg.Wait()
		return nil, fmt.Errorf("join site %s: %w", o.Site, err)
	}
	m.memberRv, m.joined = rev, now
	m.wg.Add(2)
	go m.loop()
	go m.watchdog()
	m.log.Info("joined site", "ttl", o.TTL, "renew", o.Renew, "capacity", o.Capacity, "sources", len(o.Sources), "areas", len(o.Areas))
	return m, nil
}

// register creates the member key. A key of the same name left by a
// daemon that died is taken once it has not changed for a TTL (a restarted
// daemon keeps its name); one that keeps being renewed is an error.
func (m *Member) register(ctx context.Context) (uint64, time.Time, error) {
	key := "member." + m.o.Member
	var lastRev uint64
	var since time.Time
	give := time.Now().Add(m.o.TTL + 2*m.o.Renew)
	for {
		now := time.Now()
		v := leaseValue{Member: m.o.Member, Capacity: m.o.Capacity, Since: now, Seen: now}
		rev, err := m.kv.Create(ctx, key, mustJSON(v))
		m.ops.Add(1)
		if err == nil {
			return rev, now, nil
		}
		if !isRevisionMismatch(err) {
			return 0, now, fmt.Errorf("register member %s: %w", m.o.Member, err)
		}
		e, err := m.kv.Get(ctx, key)
		m.ops.Add(1)
		switch {
		case err != nil && (errors.Is(err, jetstream.ErrKeyNotFound) || errors.Is(err, jetstream.ErrKeyDeleted)):
			continue // gone meanwhile
		case err != nil:
			return 0, now, fmt.Errorf("register member %s: %w", m.o.Member, err)
		case e.Revision() != lastRev:
			lastRev, since = e.Revision(), now
		case now.Sub(since) >= m.o.TTL:
			err := m.kv.Delete(ctx, key, jetstream.LastRevision(lastRev))
			m.ops.Add(1)
			if err == nil {
				m.expired.Add(1)
				m.log.Info("took over a stale member key of the same name", "key", key)
			}
			continue
		}
		if now.After(give) {
			return 0, now, fmt.Errorf("member name %q is in use: its key was renewed within the last %v", m.o.Member, m.o.TTL)
		}
		if !sleepCtx(ctx, m.o.Renew/2) {
			return 0, now, fmt.Errorf("register member %s: %w", m.o.Member, ctx.Err())
		}
	}
}

func fillOptions(o *Options) error {
	if err := checkName("site name", o.Site); err != nil {
		return err
	}
	if o.Member == "" {
		host, _ := os.Hostname()
		host = strings.Map(func(r rune) rune {
			if r == '-' || r == '_' || ('a' <= r && r <= 'z') || ('A' <= r && r <= 'Z') || ('0' <= r && r <= '9') {
				return r
			}
			return '_'
		}, host)
		o.Member = fmt.Sprintf("%s-%d", host, os.Getpid())
	}
	if err := checkName("member name", o.Member); err != nil {
		return err
	}
	if o.TTL == 0 {
		o.TTL = DefaultTTL
	}
	if o.TTL < 100*time.Millisecond {
		return fmt.Errorf("lease ttl %v: below 100ms", o.TTL)
	}
	if o.Renew == 0 {
		o.Renew = o.TTL / 3
	}
	if o.Renew <= 0 || o.Renew > o.TTL/2 {
		return fmt.Errorf("renewal period %v: must be above 0 and at most half the ttl %v", o.Renew, o.TTL)
	}
	if o.Capacity < 1 {
		return fmt.Errorf("capacity %d: must be at least 1", o.Capacity)
	}
	if o.Replicas == 0 {
		o.Replicas = 1
	}
	if o.Replicas < 1 || o.Replicas > 5 {
		return fmt.Errorf("replicas %d out of range 1..5", o.Replicas)
	}
	for i, s := range o.Sources {
		if err := checkName(fmt.Sprintf("sources[%d]", i), s); err != nil {
			return err
		}
	}
	for i, a := range o.Areas {
		if err := checkName(fmt.Sprintf("areas[%d]", i), a); err != nil {
			return err
		}
	}
	if o.Log == nil {
		o.Log = slog.New(slog.DiscardHandler)
	}
	return nil
}

// openBucket opens a bucket, creating it when absent.
func openBucket(ctx context.Context, js jetstream.JetStream, cfg jetstream.KeyValueConfig) (jetstream.KeyValue, error) {
	kv, err := js.KeyValue(ctx, cfg.Bucket)
	if errors.Is(err, jetstream.ErrBucketNotFound) {
		kv, err = js.CreateKeyValue(ctx, cfg)
		if errors.Is(err, jetstream.ErrBucketExists) {
			kv, err = js.KeyValue(ctx, cfg.Bucket)
		}
	}
	if err != nil {
		return nil, fmt.Errorf("open bucket %s: %w", cfg.Bucket, err)
	}
	return kv, nil
}

// claimOrder is the order this member tries keys in: the sources rotated by
// a hash of the member name (so members do not all race for one key), then
// the areas rotated the same way.
func claimOrder(member string, sources, areas []string) []string {
	f := fnv.New32a()
	_, _ = f.Write([]byte(member))
	h := int(f.Sum32() >> 1)
	var out []string
	for _, l := range []struct {
		kind  Kind
		names []string
	}{{KindSource, sources}, {KindArea, areas}} {
		n := len(l.names)
		for i := 0; i < n; i++ {
			out = append(out, string(l.kind)+"."+l.names[(i+h)%n])
		}
	}
	return out
}

func mustJSON(v any) []byte {
	b, err := json.Marshal(v)
	if err != nil {
		panic(err) // our own plain structs
	}
	return b
}

// watch keeps m.obs up to date from a watcher on the whole bucket,
// restarting the watcher when it ends; ready is closed once the current
// values are in.
func (m *Member) watch(ready chan struct{}) {
	defer m.wg.Done()
	var once sync.Once
	for m.ctx.Err() == nil {
		w, err := m.kv.WatchAll(m.ctx)
		if err != nil {
			m.log.Warn("lease bucket watcher", "err", err)
			if !sleepCtx(m.ctx, m.o.Renew) {
				return
			}
			continue
		}
		var deafAt time.Time
		if m.o.deafWatch != nil {
			if d := m.o.deafWatch(); d > 0 {
				deafAt = time.Now().Add(d)
			}
		}
		for open := true; open; {
			select {
			case <-m.ctx.Done():
				_ = w.Stop()
				return
			case <-m.rewatch:
				// The watcher fell behind (after the process was frozen,
				// it may deliver nothing more): start a new one, which
				// replays the current values.
				m.log.Info("lease bucket watcher restarted: it missed this member's own renewals")
				m.rewatches.Add(1)
				open = false
			case e, ok := <-w.Updates():
				if !ok {
					open = false
					break
				}
				if e == nil {
					once.Do(func() { close(ready) })
					continue
				}
				if !deafAt.IsZero() && time.Now().After(deafAt) {
					continue
				}
				m.observe(e.Key(), e.Revision(), e.Operation() == jetstream.KeyValuePut, e.Value(), time.Now())
				m.poke()
			}
		}
		_ = w.Stop()
	}
}

// observe records one revision of key seen at local time at.
func (m *Member) observe(key string, rev uint64, put bool, value []byte, at time.Time) {
	m.mu.Lock()
	defer m.mu.Unlock()
	s := m.obs[key]
	if s == nil {
		s = &seen{}
		m.obs[key] = s
	}
	if rev < s.rev || (rev == s.rev && s.at != (time.Time{})) {
		return // old news (a restarted watcher replays current values)
	}
	s.rev, s.present, s.at = rev, put, at
	if put {
		var v leaseValue
		if json.Unmarshal(value, &v) == nil {
			s.val = v
			last := v
			s.last = &last
		}
	}
}

func (m *Member) poke() {
	select {
	case m.wake <- struct{}{}:
	default:
	}
}

func sleepCtx(ctx context.Context, d time.Duration) bool {
	t := time.NewTimer(d)
	defer t.Stop()
	select {
	case <-ctx.Done():
		return false
	case <-t.C:
		return true
	}
}

// Holds are the holds this member has now.
func (m *Member) Holds() []*Hold {
	m.mu.Lock()
	defer m.mu.Unlock()
	out := make([]*Hold, 0, len(m.holds))
	for _, h := range m.holds {
		out = append(out, h)
	}
	sort.Slice(out, func(i, j int) bool { return out[i].key < out[j].key })
	return out
}

// Name is the member's name.
func (m *Member) Name() string { return m.o.Member }

// Stats are the member's lease counters.
func (m *Member) Stats() Stats {
	m.mu.Lock()
	n := len(m.holds)
	m.mu.Unlock()
	return Stats{
		Ops: m.ops.Load(), Failures: m.failures.Load(), Started: m.started.Load(),
		Released: m.releasedN.Load(), Lost: m.lost.Load(), Expired: m.expired.Load(),
		Holding: n, Rebalance: m.rebalance.Load(), Rewatch: m.rewatches.Load(),
	}
}

// Leave stops every hold (Holder.Stop with CauseStopping), then deletes its
// leases and its member key at once so that other members take the sources
// without waiting for expiry. After Leave (or once the Join context ended)
// the member does nothing more.
func (m *Member) Leave(ctx context.Context) error {
	reply := make(chan error, 1)
	select {
	case m.leave <- reply:
	case <-m.stopped:
		m.wg.Wait()
		return nil
	case <-ctx.Done():
		return fmt.Errorf("leave site %s: %w", m.o.Site, ctx.Err())
	}
	select {
	case err := <-reply:
		m.cancel()
		m.wg.Wait()
		return err
	case <-ctx.Done():
		m.cancel()
		m.wg.Wait()
		return fmt.Errorf("leave site %s: %w", m.o.Site, ctx.Err())
	}
}

// watchdog ends holds whose deadline passed (renewals refused, late or not
// sent), independently of the renewal loop.
func (m *Member) watchdog() {
	defer m.wg.Done()
	tick := max(m.o.TTL/50, 5*time.Millisecond)
	t := time.NewTicker(tick)
	defer t.Stop()
	for {
		select {
		case <-m.ctx.Done():
			return
		case now := <-t.C:
			for _, h := range m.Holds() {
				if !h.Valid(now) {
					m.lose(h, "deadline passed")
				}
			}
		}
	}
}

// drop ends h (see Hold.end) and takes it out of the member's holds.
func (m *Member) drop(h *Hold) (ended, callStop bool) {
	ended, callStop = h.end()
	m.mu.Lock()
	if m.holds[h.key] == h {
		delete(m.holds, h.key)
	}
	m.mu.Unlock()
	return ended, callStop
}

// lose ends h after its lease was lost and calls Holder.Stop with CauseLost
// (unless a clean release already called Stop).
func (m *Member) lose(h *Hold, why string) {
	ended, callStop := m.drop(h)
	if !ended {
		return
	}
	m.lost.Add(1)
	m.log.Warn("lease lost", "key", h.key, "token", h.Token, "why", why)
	if callStop {
		m.wg.Add(1)
		go func() {
			defer m.wg.Done()
			m.holder.Stop(h, CauseLost)
		}()
	}
}

// isRevisionMismatch says whether err is a refused conditional write.
func isRevisionMismatch(err error) bool {
	if errors.Is(err, jetstream.ErrKeyRevisionMismatch) || errors.Is(err, jetstream.ErrKeyExists) {
		return true
	}
	var apiErr *jetstream.APIError
	return errors.As(err, &apiErr) && (apiErr.ErrorCode == jetstream.JSErrCodeStreamWrongLastSequence ||
		apiErr.ErrorCode == jetstream.JSErrCodeStreamWrongLastSequenceConstant)
}
