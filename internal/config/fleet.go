package config

import (
	"fmt"
	"slices"
	"time"

	"tallyd/capture"
	"tallyd/events"
)

// Fleet configures a site shared by several daemons through a NATS
// JetStream cluster: each daemon holds some of the sources by leases on a
// key-value bucket. Its settings apply only when the site runs shared.
type Fleet struct {
	// LeaseTTL is how long a lease lives without renewal: a daemon that
	// stops renewing (it died, or lost the network) loses its sources this
	// long after its last renewal, and another daemon takes them over.
	// Default DefaultLeaseTTL, within MinLeaseTTL..MaxLeaseTTL.
	LeaseTTL Duration `yaml:"lease_ttl"`
}

// Lease time-to-live default and bounds (fleet.lease_ttl). Below
// MinLeaseTTL a pause of the garbage collector or a busy server could cost a
// daemon its leases; above MaxLeaseTTL a dead daemon's sources stay
// uncounted too long.
const (
	DefaultLeaseTTL = 10 * time.Second
	MinLeaseTTL     = 2 * time.Second
	MaxLeaseTTL     = 5 * time.Minute
)

// AreaZoneRef names one zone of a site-wide area: a rule on a source.
type AreaZoneRef struct {
	Source, Rule string
}

// Areas maps each area named by a rule's `area:` key to its zones, in the
// order the rules are written in the site file. It is empty (not nil) when
// no rule names an area.
func (c *Config) Areas() map[string][]AreaZoneRef {
	m := map[string][]AreaZoneRef{}
	for _, r := range c.Rules {
		if r.Area != "" && r.Kind() == events.RuleZone {
			m[r.Area] = append(m[r.Area], AreaZoneRef{Source: r.Source, Rule: r.Name})
		}
	}
	return m
}

// AreaNames lists the areas of Areas in increasing order.
func (c *Config) AreaNames() []string {
	var names []string
	for _, r := range c.Rules {
		if r.Area != "" && r.Kind() == events.RuleZone && !slices.Contains(names, r.Area) {
			names = append(names, r.Area)
		}
	}
	slices.Sort(names)
	return names
}

// fleet checks the fleet section.
func (v *validator) fleet() {
	if d := v.c.Fleet.LeaseTTL.Duration; d < MinLeaseTTL || d > MaxLeaseTTL {
		v.fail("fleet.lease_ttl", "must be within %v..%v (found %v)", MinLeaseTTL, MaxLeaseTTL, d)
	}
}

// CheckShared checks the extra rules of a site shared by several daemons,
// for a config that passed Validate: the events, leases and state must go
// through an external NATS server with JetStream, and every source must be
// readable from any machine (a url stream or a generated scene). The errors
// are located like Validate's (an Errors wrapping ErrInvalid), all at once;
// nil when the site can be shared. output.jsonl is allowed: each daemon
// writes the events of the sources it holds to its own file.
func CheckShared(c *Config) error {
	if errs := SharedCheck(c); len(errs) > 0 {
		return errs
	}
	return nil
}

// SharedCheck is CheckShared as a Check, to pass to Load or Parse so that
// its problems are reported together with the site file's own.
func SharedCheck(c *Config) Errors {
	v := validator{c: c}
	n := c.Output.NATS
	if n.URL == "" {
		v.fail("output.nats.url", "a shared site needs an external NATS server: the embedded one lives in one daemon")
	}
	if n.JetStream.Mode == JetStreamOff {
		v.fail("output.nats.jetstream.mode", "a shared site keeps its leases and state in JetStream: want %s or %s (found %q)",
			JetStreamAuto, JetStreamRequired, n.JetStream.Mode)
	}
	for i, s := range c.Sources {
		path := fmt.Sprintf("sources[%d]", i)
		switch s.Kind() {
		case capture.KindFile:
			v.fail(path+".file", "a recorded file cannot be shared: replay it with one daemon")
		case capture.KindFolder:
			v.fail(path+".folder", "an image folder cannot be shared: replay it with one daemon")
		case capture.KindDevice:
			v.fail(path+".device", "a local camera belongs to one machine: serve it as a stream (url) to share it")
		}
	}
	return v.errs
}
