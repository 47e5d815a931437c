package pipeline

import (
	"fmt"
	"reflect"
	"slices"
	"strings"

	"tallyd/internal/config"
)

// ReloadReport says what a reload changed, by rule name.
type ReloadReport struct {
	Kept    []string `json:"kept"`    // unchanged: counting goes on without a gap
	Changed []string `json:"changed"` // new definition: restarts at 0 (a reset event says so)
	Added   []string `json:"added"`   // new: starts at 0
	Removed []string `json:"removed"`
	// NotApplied lists sections of the file that changed but need a
	// restart (only rules are reloaded).
	NotApplied []string `json:"not_applied,omitempty"`
}

// String is the report in one line for the log and the page.
func (r ReloadReport) String() string {
	var b strings.Builder
	fmt.Fprintf(&b, "kept %d, changed %d, added %d, removed %d", len(r.Kept), len(r.Changed), len(r.Added), len(r.Removed))
	if len(r.NotApplied) > 0 {
		fmt.Fprintf(&b, "; changes to %s need a restart and were not applied", strings.Join(r.NotApplied, ", "))
	}
	return b.String()
}

// rulesConfig is the site file whose rules are in force (the one Build got,
// or the last one reloaded).
func (p *Pipeline) rulesConfig() *config.Config {
	if c := p.rules.Load(); c != nil {
		return c
	}
	return p.cfg
}

// Reload puts the rules of cfg (a site file that passed Load) in force. Each
// source switches at its next processed frame: unchanged rules keep counting
// without a gap, changed and new ones start at 0 with a reset event, stays
// in changed or removed zones are closed. Other sections that changed are
// reported and left as they were: they need a restart. Safe while Run runs.
func (p *Pipeline) Reload(cfg *config.Config) ReloadReport {
	p.reloadMu.Lock()
	defer p.reloadMu.Unlock()
	old := p.rulesConfig()
	rep := ReloadReport{NotApplied: changedSections(old, cfg)}
	oldRules := map[string]config.Rule{}
	for _, r := range old.Rules {
		oldRules[r.Name] = r
	}
	for _, r := range cfg.Rules {
		o, had := oldRules[r.Name]
		delete(oldRules, r.Name)
		switch {
		case !had:
			rep.Added = append(rep.Added, r.Name)
		case reflect.DeepEqual(o, r):
			rep.Kept = append(rep.Kept, r.Name)
		default:
			rep.Changed = append(rep.Changed, r.Name)
		}
	}
	for name := range oldRules {
		rep.Removed = append(rep.Removed, name)
	}
	slices.Sort(rep.Removed)
	next := *old // everything but the rules stays as it runs
	next.Rules = slices.Clone(cfg.Rules)
	p.rules.Store(&next)
	for _, sr := range p.sources {
		sr.reloaded.Store(true)
	}
	if s := p.sched.Load(); s != nil {
		s.poke()
	}
	p.log.Info("site file reloaded", "kept", len(rep.Kept), "changed", len(rep.Changed), "added", len(rep.Added),
		"removed", len(rep.Removed), "not_applied", strings.Join(rep.NotApplied, ","))
	return rep
}

// changedSections names the top-level sections other than rules that differ.
func changedSections(a, b *config.Config) []string {
	var out []string
	for _, s := range []struct {
		name string
		x, y any
	}{
		{"site", a.Site, b.Site}, {"sources", a.Sources, b.Sources}, {"detector", a.Detector, b.Detector},
		{"tracker", a.Tracker, b.Tracker}, {"output", a.Output, b.Output}, {"log", a.Log, b.Log},
		{"state_dir", a.StateDir, b.StateDir}, {"intervals", a.Intervals, b.Intervals}, {"http", a.HTTP, b.HTTP},
		{"fleet", a.Fleet, b.Fleet}, {"areas", a.Areas(), b.Areas()},
	} {
		if !reflect.DeepEqual(s.x, s.y) {
			out = append(out, s.name)
		}
	}
	return out
}

// applyReload switches a source to the rules in force; called by the detect
// worker holding the source, before its next frame.
func (p *Pipeline) applyReload(sr *sourceRun) {
	if !sr.reloaded.Swap(false) {
		return
	}
	st := &sr.stages
	if st.engine == nil {
		return // no frame yet: setupRules will read the rules in force
	}
	lines, zones := RulesFor(p.rulesConfig(), sr.id, st.w, st.h)
	c := sr.cursor
	evs, ch := st.engine.Replace(c.seq, c.pts, lines, zones)
	st.lines, st.zones = lines, zones
	if st.gate != nil && sr.set.gate != nil {
		_ = st.gate.Close()
		st.gate = newGate(sr, st)
	}
	p.publish(sr, c.captured, evs)
	sr.view.setCounts(st) // also when the change produced no event (a removed line)
	p.out.state.update(sr.id, st.engine.State(c.pts))
	if len(ch.Changed)+len(ch.Added)+len(ch.Removed) > 0 {
		p.log.Info("rules switched", "source", sr.id, "kept", ch.Kept, "changed", ch.Changed, "added", ch.Added, "removed", ch.Removed)
	}
}
