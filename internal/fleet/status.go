package fleet

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"sort"
	"strings"
	"time"

	"github.com/nats-io/nats.go/jetstream"
)

// Status is a site's fleet as its lease bucket shows it.
type Status struct {
	Site      string           `json:"site"`
	At        time.Time        `json:"at"` // when it was read (local clock)
	Members   []MemberStatus   `json:"members"`
	Leases    []LeaseStatus    `json:"leases"`
	Handovers []HandoverStatus `json:"handovers"` // the last one of each source and area
}

// MemberStatus is one member (daemon) of the site.
type MemberStatus struct {
	Name        string    `json:"name"`
	Capacity    int       `json:"capacity"`
	Holding     int       `json:"holding"` // sources it holds
	Since       time.Time `json:"since"`
	RenewedAgoS float64   `json:"renewed_ago_s"` // seconds since the broker stored its last renewal
}

// LeaseStatus is one held lease.
type LeaseStatus struct {
	Kind        Kind    `json:"kind"`
	Name        string  `json:"name"`
	Holder      string  `json:"holder"`
	Token       uint64  `json:"token"`
	HeldS       float64 `json:"held_s"`        // seconds since the hold began
	RenewedAgoS float64 `json:"renewed_ago_s"` // seconds since the broker stored its last renewal
}

// HandoverStatus is the last hand-over of a source or area.
type HandoverStatus struct {
	Kind  Kind      `json:"kind"`
	Name  string    `json:"name"`
	From  string    `json:"from,omitempty"`
	To    string    `json:"to"`
	Cause Cause     `json:"cause"`
	At    time.Time `json:"at"`
	GapS  *float64  `json:"gap_s,omitempty"` // seconds from the previous holder's last sign of life to this hold
	Token uint64    `json:"token"`
}

// ErrNoFleet is returned by ReadStatus when the site has no lease bucket: no
// daemon ever joined it.
var ErrNoFleet = errors.New("no lease bucket: no daemon has joined this site")

// ReadStatus reads site's lease bucket: its members, the leases held and
// the last hand-over of each source and area.
func ReadStatus(ctx context.Context, js jetstream.JetStream, site string) (Status, error) {
	if err := checkName("site name", site); err != nil {
		return Status{}, fmt.Errorf("read fleet status: %w", err)
	}
	kv, err := js.KeyValue(ctx, LeaseBucket(site))
	if errors.Is(err, jetstream.ErrBucketNotFound) {
		return Status{}, fmt.Errorf("read fleet status of site %s: bucket %s: %w", site, LeaseBucket(site), ErrNoFleet)
	}
	if err != nil {
		return Status{}, fmt.Errorf("read fleet status of site %s: %w", site, err)
	}
	// The stream's subject list names every key (a watcher's "all current
	// values are in" marker is not reliable on a cluster); then each is read.
	stream, err := js.Stream(ctx, "KV_"+LeaseBucket(site))
	if err != nil {
		return Status{}, fmt.Errorf("read fleet status of site %s: %w", site, err)
	}
	prefix := "$KV." + LeaseBucket(site) + "."
	info, err := stream.Info(ctx, jetstream.WithSubjectFilter(prefix+">"))
	if err != nil {
		return Status{}, fmt.Errorf("read fleet status of site %s: %w", site, err)
	}
	st := Status{Site: site, At: time.Now(), Members: []MemberStatus{}, Leases: []LeaseStatus{}, Handovers: []HandoverStatus{}}
	holding := map[string]int{}
	for subj := range info.State.Subjects {
		e, err := kv.Get(ctx, strings.TrimPrefix(subj, prefix))
		if errors.Is(err, jetstream.ErrKeyNotFound) || errors.Is(err, jetstream.ErrKeyDeleted) {
			continue
		}
		if err != nil {
			return Status{}, fmt.Errorf("read fleet status of site %s: %w", site, err)
		}
		ago := st.At.Sub(e.Created()).Seconds()
		kind, rest, _ := strings.Cut(e.Key(), ".")
		switch kind {
		case "member":
			var v leaseValue
			if json.Unmarshal(e.Value(), &v) == nil {
				st.Members = append(st.Members, MemberStatus{Name: rest, Capacity: v.Capacity, Since: v.Since, RenewedAgoS: ago})
			}
		case string(KindSource), string(KindArea):
			var v leaseValue
			if json.Unmarshal(e.Value(), &v) == nil {
				st.Leases = append(st.Leases, LeaseStatus{Kind: Kind(kind), Name: rest, Holder: v.Member,
					Token: leaseToken(v, e), HeldS: st.At.Sub(v.Since).Seconds(), RenewedAgoS: ago})
				if kind == string(KindSource) {
					holding[v.Member]++
				}
			}
		case "last":
			var r handoverRecord
			k, name, _ := strings.Cut(rest, ".")
			if json.Unmarshal(e.Value(), &r) == nil {
				st.Handovers = append(st.Handovers, HandoverStatus{Kind: Kind(k), Name: name, From: r.From, To: r.To,
					Cause: r.Cause, At: r.At, GapS: r.GapS, Token: r.Token})
			}
		}
	}
	for i := range st.Members {
		st.Members[i].Holding = holding[st.Members[i].Name]
	}
	sort.Slice(st.Members, func(i, j int) bool { return st.Members[i].Name < st.Members[j].Name })
	sort.Slice(st.Leases, func(i, j int) bool {
		a, b := st.Leases[i], st.Leases[j]
		return a.Kind > b.Kind || (a.Kind == b.Kind && a.Name < b.Name) // sources first
	})
	sort.Slice(st.Handovers, func(i, j int) bool { return st.Handovers[i].At.After(st.Handovers[j].At) })
	return st, nil
}

// leaseToken is a lease's fencing token: the value's, or the revision when
// the holder has not written it yet (its first revision is the token).
func leaseToken(v leaseValue, e jetstream.KeyValueEntry) uint64 {
	if v.Token != 0 {
		return v.Token
	}
	return e.Revision()
}
