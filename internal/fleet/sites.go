// Package fleet lets several daemons share one site through a NATS
// JetStream cluster: the site file lives in a key-value bucket (Sites), and
// each source and area is held by one daemon at a time through leases in a
// per-site bucket (Join, Member, Hold), with fencing tokens, client-side
// expiry, a fair spread and hand-over records; KeepArea sums an area's zones
// across daemons and ReadStatus reports who holds what.
package fleet

import (
	"context"
	"errors"
	"fmt"
	"regexp"
	"time"

	"github.com/nats-io/nats.go/jetstream"
)

// SitesBucket is the key-value bucket holding site files: key = site name,
// value = the site file's YAML text.
const SitesBucket = "tallyd-sites"

// MaxSiteSize is the largest site file Push accepts, in bytes.
const MaxSiteSize = 1 << 20

// siteHistory is how many revisions of each site the bucket keeps.
const siteHistory = 10

// ErrNoSite is returned by Sites.Get for a site that was never pushed (or
// was deleted).
var ErrNoSite = errors.New("no such site in the bucket")

// nameRE is what site, member, source and area names must match: they
// become key and subject tokens.
var nameRE = regexp.MustCompile(`^[A-Za-z0-9_-]+$`)

// maxName is the longest name accepted.
const maxName = 128

// checkName checks a name used as a key token; what names the kind of
// name for the error ("site name", "member name").
func checkName(what, name string) error {
	switch {
	case name == "":
		return fmt.Errorf("%s is empty", what)
	case len(name) > maxName:
		return fmt.Errorf("%s %.20q...: %d bytes, limit %d", what, name, len(name), maxName)
	case !nameRE.MatchString(name):
		return fmt.Errorf("%s %q: only letters, digits, '-' and '_' are allowed", what, name)
	}
	return nil
}

// LeaseBucket is the name of a site's lease bucket.
func LeaseBucket(site string) string { return "tallyd-fleet-" + site }

// Sites is the bucket of site files. It is safe for concurrent use.
type Sites struct {
	kv jetstream.KeyValue
}

// SiteVersion is one revision of a site file.
type SiteVersion struct {
	Data     []byte
	Revision uint64
	At       time.Time // when the broker stored it
}

// OpenSites opens the site bucket, creating it with replicas copies (1 or
// more; 0 means 1) when absent.
func OpenSites(ctx context.Context, js jetstream.JetStream, replicas int) (*Sites, error) {
	if replicas == 0 {
		replicas = 1
	}
	if replicas < 1 || replicas > 5 {
		return nil, fmt.Errorf("open site bucket %s: replicas %d out of range 1..5", SitesBucket, replicas)
	}
	kv, err := js.KeyValue(ctx, SitesBucket)
	if errors.Is(err, jetstream.ErrBucketNotFound) {
		kv, err = js.CreateKeyValue(ctx, jetstream.KeyValueConfig{
			Bucket:       SitesBucket,
			Description:  "tallyd site files",
			History:      siteHistory,
			MaxValueSize: MaxSiteSize,
			Storage:      jetstream.FileStorage,
			Replicas:     replicas,
		})
		if errors.Is(err, jetstream.ErrBucketExists) { // created by another daemon meanwhile
			kv, err = js.KeyValue(ctx, SitesBucket)
		}
	}
	if err != nil {
		return nil, fmt.Errorf("open site bucket %s: %w", SitesBucket, err)
	}
	return &Sites{kv: kv}, nil
}

// Push stores yaml as the new revision of site name and returns the
// revision. The caller validates the file first; Push checks only the name
// and the size (at most MaxSiteSize bytes, not empty).
func (s *Sites) Push(ctx context.Context, name string, yaml []byte) (uint64, error) {
	if err := checkName("site name", name); err != nil {
		return 0, fmt.Errorf("push site: %w", err)
	}
	if len(yaml) == 0 {
		return 0, fmt.Errorf("push site %s: the site file is empty", name)
	}
	if len(yaml) > MaxSiteSize {
		return 0, fmt.Errorf("push site %s: the site file has %d bytes, limit %d", name, len(yaml), MaxSiteSize)
	}
	rev, err := s.kv.Put(ctx, name, yaml)
	if err != nil {
		return 0, fmt.Errorf("push site %s to bucket %s: %w", name, SitesBucket, err)
	}
	return rev, nil
}

// Get is the current revision of site name, or an error wrapping ErrNoSite.
func (s *Sites) Get(ctx context.Context, name string) (SiteVersion, error) {
	if err := checkName("site name", name); err != nil {
		return SiteVersion{}, fmt.Errorf("get site: %w", err)
	}
	e, err := s.kv.Get(ctx, name)
	if errors.Is(err, jetstream.ErrKeyNotFound) || errors.Is(err, jetstream.ErrKeyDeleted) {
		return SiteVersion{}, fmt.Errorf("get site %s from bucket %s: %w", name, SitesBucket, ErrNoSite)
	}
	if err != nil {
		return SiteVersion{}, fmt.Errorf("get site %s from bucket %s: %w", name, SitesBucket, err)
	}
	return SiteVersion{Data: e.Value(), Revision: e.Revision(), At: e.Created()}, nil
}

// Watch sends every revision of site name stored after the call (not the
// current one) until ctx ends; then the channel is closed. Deletions are
// not sent. A reader that falls behind delays the watcher, never loses a
// revision.
func (s *Sites) Watch(ctx context.Context, name string) (<-chan SiteVersion, error) {
	if err := checkName("site name", name); err != nil {
		return nil, fmt.Errorf("watch site: %w", err)
	}
	// The revision in force now: a watcher that restarts (after a
	// reconnect) may deliver it, or older ones, again; they are skipped.
	var last uint64
	if e, err := s.kv.Get(ctx, name); err == nil {
		last = e.Revision()
	}
	w, err := s.kv.Watch(ctx, name, jetstream.UpdatesOnly(), jetstream.IgnoreDeletes())
	if err != nil {
		return nil, fmt.Errorf("watch site %s in bucket %s: %w", name, SitesBucket, err)
	}
	out := make(chan SiteVersion)
	go func() {
		defer close(out)
		defer func() { _ = w.Stop() }()
		for {
			select {
			case <-ctx.Done():
				return
			case e, ok := <-w.Updates():
				if !ok {
					return
				}
				if e == nil || e.Revision() <= last {
					continue
				}
				last = e.Revision()
				select {
				case out <- SiteVersion{Data: e.Value(), Revision: e.Revision(), At: e.Created()}:
				case <-ctx.Done():
					return
				}
			}
		}
	}()
	return out, nil
}
