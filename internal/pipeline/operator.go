package pipeline

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"os"
	"regexp"
	"strconv"
	"time"

	"tallyd/capture"
	"tallyd/events"
	"tallyd/events/bus"
	"tallyd/internal/config"
	"tallyd/internal/web"
)

// Operator is the pipeline as the operator's HTTP server sees it
// (web.Site): sources, status, readiness, snapshots and rule editing.
type Operator struct {
	p    *Pipeline
	save bool
}

// Operator returns the pipeline's web.Site. With save, the page may write
// edited rules into the site file and reload it.
func (p *Pipeline) Operator(save bool) *Operator { return &Operator{p: p, save: save} }

// downBudget is how long a live source may be down before the daemon is not
// ready: longer than the longest reconnect back-off, so one missed attempt
// does not flap readiness.
var downBudget = capture.DefaultBackoff.Max + 5*time.Second

// Problems lists why the daemon is not ready: the broker not connected, a
// source failed, or a live source down longer than its back-off budget.
func (o *Operator) Problems() []string {
	p := o.p
	var out []string
	if !p.brokerConnected() {
		out = append(out, fmt.Sprintf("nats: not connected to %s", bus.RedactURL(p.natsURL)))
	}
	now := time.Now()
	for _, sr := range p.sources {
		st := sr.worker.Stats()
		switch st.State {
		case capture.StateFailed:
			out = append(out, fmt.Sprintf("source %s: failed: %s", sr.id, st.Err))
		case capture.StateConnecting, capture.StateBackingOff:
			if down := now.Sub(st.Link.Since); !st.Link.Since.IsZero() && down > downBudget {
				out = append(out, fmt.Sprintf("source %s: down for %s (budget %s): %s", sr.id, down.Round(time.Second), downBudget, st.Err))
			}
		}
	}
	return out
}

// Status is each source's status line as JSON values.
func (o *Operator) Status() any {
	st := o.p.Status()
	out := make([]map[string]any, 0, len(st))
	for _, s := range st {
		m := map[string]any{}
		a := s.logAttrs()
		for i := 0; i+1 < len(a); i += 2 {
			m[a[i].(string)] = a[i+1]
		}
		out = append(out, m)
	}
	return map[string]any{"sources": out, "events": o.p.out.stats()}
}

// Sources lists the sources with their rules in force and counts.
func (o *Operator) Sources() web.SitePage {
	p := o.p
	cfg := p.rulesConfig()
	page := web.SitePage{Site: cfg.Site, SaveEnabled: o.save && cfg.File != ""}
	for _, sr := range p.sources {
		totals, occ, w, h := sr.view.counts()
		if totals == nil {
			totals = zeroTotals(cfg, sr.id)
		}
		tj, _ := json.Marshal(totals)
		if occ == nil {
			occ = map[string]int{}
		}
		sp := web.SourcePage{ID: sr.id, State: string(sr.worker.Stats().State), Width: w, Height: h,
			Rules: []web.Rule{}, Totals: tj, Occupancy: occ}
		for _, r := range cfg.Rules {
			if r.Source == sr.id {
				sp.Rules = append(sp.Rules, webRule(r))
			}
		}
		page.Sources = append(page.Sources, sp)
	}
	return page
}

// Snapshot is the source's newest frame, drawn.
func (o *Operator) Snapshot(source, ext string, plain bool) ([]byte, error) {
	b, err := o.p.Snapshot(source, ext, plain)
	switch {
	case errors.Is(err, ErrUnknownSource):
		return nil, fmt.Errorf("%w: %v", web.ErrNotFound, err)
	case errors.Is(err, ErrNoFrame):
		return nil, fmt.Errorf("%w: source %s: %v", web.ErrUnavailable, source, err)
	}
	return b, err
}

// rulePath finds the rule index in a field path such as "rules[3].line".
var rulePath = regexp.MustCompile(`^rules\[(\d+)\]`)

// Rules checks a source's edited rule list with the same validation as
// `tallyd check` (the whole site file, this source's rules replaced) and,
// with save, writes the file atomically and reloads it.
func (o *Operator) Rules(_ context.Context, source string, rules []web.Rule, save bool) (web.RulesResult, error) {
	p := o.p
	if p.source(source) == nil {
		return web.RulesResult{}, fmt.Errorf("%w: no source %q", web.ErrNotFound, source)
	}
	cfg := p.rulesConfig()
	if save && !o.save {
		return web.RulesResult{}, fmt.Errorf("%w: saving is off (set http.save_rules: true in the site file)", web.ErrForbidden)
	}
	if cfg.File == "" {
		return web.RulesResult{}, fmt.Errorf("%w: the site was not read from a file", web.ErrForbidden)
	}
	if len(rules) > config.MaxRules {
		return web.RulesResult{}, fmt.Errorf("%w: at most %d rules (found %d)", web.ErrInvalid, config.MaxRules, len(rules))
	}
	var res web.RulesResult
	crules := make([]config.Rule, len(rules))
	// The page does not edit areas: a rule keeps the area it had.
	areas := map[string]string{}
	for _, r := range cfg.Rules {
		if r.Source == source {
			areas[r.Name] = r.Area
		}
	}
	for i, r := range rules {
		cr, err := configRule(r, source)
		if err != nil {
			res.Errors = append(res.Errors, web.RuleError{Rule: r.Name, Index: i, Message: err.Error()})
		}
		if cr.Area == "" && cr.Zone != nil {
			cr.Area = areas[cr.Name]
		}
		crules[i] = cr
	}
	res.YAML = config.RulesYAML(crules)
	if len(res.Errors) > 0 {
		return res, nil
	}
	data, err := os.ReadFile(cfg.File)
	if err != nil {
		return res, fmt.Errorf("read site file: %w", err)
	}
	edited, pos, err := config.ReplaceRules(data, source, crules)
	if err != nil {
		return res, fmt.Errorf("%w: %v", web.ErrInvalid, err)
	}
	index := map[int]int{}
	for i, at := range pos {
		index[at] = i
	}
	newCfg, err := Parse(cfg.File, edited)
	if err != nil {
		var errs config.Errors
		var fe config.FieldError
		switch {
		case errors.As(err, &errs):
		case errors.As(err, &fe):
			errs = config.Errors{fe}
		default:
			return res, err
		}
		for _, fe := range errs {
			re := web.RuleError{Index: -1, Message: fe.Msg}
			if fe.Path != "" {
				re.Message = fe.Path + ": " + fe.Msg
			}
			if m := rulePath.FindStringSubmatch(fe.Path); m != nil {
				n, _ := strconv.Atoi(m[1])
				if i, ok := index[n]; ok {
					re.Index, re.Rule = i, rules[i].Name
					re.Message = "rules[" + strconv.Itoa(i) + "]" + fe.Path[len(m[0]):] + ": " + fe.Msg
				}
			}
			res.Errors = append(res.Errors, re)
		}
		return res, nil
	}
	res.OK = true
	if !save {
		return res, nil
	}
	if err := config.WriteFileAtomic(cfg.File, edited); err != nil {
		return res, fmt.Errorf("write %s: %w", cfg.File, err)
	}
	res.Saved = cfg.File
	rep := p.Reload(newCfg)
	res.Reload = rep.String() + "; comments inside this source's rules are not kept (comments elsewhere are)"
	return res, nil
}

func webRule(r config.Rule) web.Rule {
	w := web.Rule{Name: r.Name, Line: r.Line, Zone: r.Zone, Classes: r.Classes}
	if r.Anchor != "" {
		w.Anchor = string(r.Anchor)
	}
	if r.Dwell.Duration > 0 {
		w.Dwell = r.Dwell.Duration.String()
	}
	if r.Band != nil && *r.Band != config.DefaultBand {
		w.Band = r.Band
	}
	return w
}

func configRule(w web.Rule, source string) (config.Rule, error) {
	r := config.Rule{Name: w.Name, Source: source, Line: w.Line, Zone: w.Zone, Classes: w.Classes, Band: w.Band}
	if w.Anchor != "" {
		r.Anchor = events.Anchor(w.Anchor)
	}
	if w.Dwell != "" {
		d, err := time.ParseDuration(w.Dwell)
		if err != nil {
			return r, fmt.Errorf("dwell: want a duration such as 10s (found %q)", w.Dwell)
		}
		r.Dwell.Duration = d
	}
	return r, nil
}
