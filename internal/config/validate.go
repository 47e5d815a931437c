package config

import (
	"fmt"
	"math"
	"net/url"
	"os"
	"regexp"
	"slices"
	"strings"
	"time"

	"tallyd/events"
	"tallyd/events/bus"
	"tallyd/track"
)

var tokenRE = regexp.MustCompile(`^[A-Za-z0-9_-]+$`)

// A Check is a validation run together with the site file's own, so that its
// problems are reported with the others, all at once. The pipeline passes
// the stages' checks (settings only a stage can judge) this way.
type Check func(*Config) Errors

// Validate checks every rule of a site file, then the extra checks, and
// reports all problems at once, each naming the key path, the rule broken and
// the value found.
func (c *Config) Validate(checks ...Check) error {
	v := validator{c: c}
	v.token("site", c.Site)
	switch {
	case len(c.Sources) == 0:
		v.fail("sources", "at least one source is required")
	case len(c.Sources) > MaxSources:
		v.fail("sources", "at most %d sources in one site file (found %d)", MaxSources, len(c.Sources))
	}
	if len(c.Rules) > MaxRules {
		v.fail("rules", "at most %d rules in one site file (found %d)", MaxRules, len(c.Rules))
	}
	ids := map[string]bool{}
	for i, s := range c.Sources {
		v.source(fmt.Sprintf("sources[%d]", i), s, ids)
	}
	v.detector(ids)
	v.tracker()
	names := map[string]bool{}
	for i, r := range c.Rules {
		v.rule(fmt.Sprintf("rules[%d]", i), r, ids, names)
	}
	v.output()
	v.delivery()
	v.http()
	v.fleet()
	for _, check := range checks {
		v.errs = append(v.errs, check(c)...)
	}
	if len(v.errs) > 0 {
		return v.errs
	}
	return nil
}

type validator struct {
	c    *Config
	errs Errors
}

func (v *validator) fail(path, format string, args ...any) {
	v.errs = append(v.errs, v.c.Errorf(path, format, args...))
}

func (v *validator) token(path, s string) {
	switch {
	case s == "":
		v.fail(path, "is required")
	case len(s) > MaxTokenLen:
		v.fail(path, "at most %d characters (found %d)", MaxTokenLen, len(s))
	case !tokenRE.MatchString(s):
		v.fail(path, "use only letters, digits, '-' and '_' (found %q)", s)
	}
}

// name checks a free-form name such as a class: not empty, not too long.
func (v *validator) name(path, s string) {
	switch {
	case s == "":
		v.fail(path, "class name is empty")
	case len(s) > MaxTokenLen:
		v.fail(path, "at most %d characters (found %d)", MaxTokenLen, len(s))
	}
}

// path checks the length of a path or URL from the site file.
func (v *validator) pathLen(key, s string) bool {
	if len(s) > MaxPathLen {
		v.fail(key, "at most %d characters (found %d)", MaxPathLen, len(s))
		return false
	}
	return true
}

func (v *validator) source(path string, s Source, ids map[string]bool) {
	v.token(path+".id", s.ID)
	if s.ID != "" && ids[s.ID] {
		v.fail(path+".id", "duplicate source id %q", s.ID)
	}
	ids[s.ID] = true
	set := 0
	for _, b := range []bool{s.File != "", s.URL != "", s.Device != "", s.Folder != "", s.Scene != nil} {
		if b {
			set++
		}
	}
	if set != 1 {
		v.fail(path, "set exactly one of file, url, device, folder and scene (found %d)", set)
	}
	for _, k := range []struct{ key, val string }{{"file", s.File}, {"url", s.URL}, {"device", s.Device}, {"folder", s.Folder}} {
		v.pathLen(path+"."+k.key, k.val)
	}
	if s.File != "" && len(s.File) <= MaxPathLen {
		p := v.c.Resolve(s.File)
		if st, err := os.Stat(p); err != nil {
			v.fail(path+".file", "cannot open %q: %v", p, unwrapPathErr(err))
		} else if st.IsDir() {
			v.fail(path+".file", "%q is a folder, want a video file", p)
		}
	}
	v.liveSource(path, s)
	if s.FPS < 0 || math.IsNaN(s.FPS) {
		v.fail(path+".fps", "must be 0 (every frame) or positive (found %v)", s.FPS)
	}
	if s.MaxAge.Duration < 0 {
		v.fail(path+".max_age", "must not be negative (found %v)", s.MaxAge.Duration)
	}
	if g := s.Gate; g != nil {
		if g.Where != "anywhere" && g.Where != "rules" {
			v.fail(path+".gate.where", "want anywhere or rules (found %q)", g.Where)
		}
		if !(g.Threshold > 0 && g.Threshold < 1) {
			v.fail(path+".gate.threshold", "must be a fraction of the frame within (0, 1) (found %v)", g.Threshold)
		}
		if g.Hold.Duration < 0 {
			v.fail(path+".gate.hold", "must not be negative (found %v)", g.Hold.Duration)
		}
	}
	if s.StartTime != "" {
		t, err := time.Parse(time.RFC3339, s.StartTime)
		switch {
		case err != nil:
			v.fail(path+".start_time", "want an RFC 3339 time such as 2026-06-01T08:00:00Z (found %q)", s.StartTime)
		case t.Before(MinStartTime) || !t.Before(MaxStartTime):
			v.fail(path+".start_time", "must be from %s to before %s (found %s)",
				MinStartTime.Format(time.DateOnly), MaxStartTime.Format(time.DateOnly), s.StartTime)
		}
	}
	if s.MaxFramePixels < 0 || s.MaxFramePixels > MaxFramePixels {
		v.fail(path+".max_frame_pixels", "must be within 0..%d, 0 for the default of 16 megapixels (found %d)", MaxFramePixels, s.MaxFramePixels)
	}
}

func (v *validator) detector(ids map[string]bool) {
	d := v.c.Detector
	switch d.Kind {
	case DetectorMotion:
		m := d.Motion
		p := "detector.motion."
		if m.History < 1 {
			v.fail(p+"history", "must be at least 1 (found %d)", m.History)
		}
		if !(m.VarThreshold > 0) {
			v.fail(p+"var_threshold", "must be positive (found %v)", m.VarThreshold)
		}
		if !(m.LearningRate >= 0 && m.LearningRate <= 1) {
			v.fail(p+"learning_rate", "must be within 0..1 (found %v)", m.LearningRate)
		}
		if m.WarmupFrames < 0 {
			v.fail(p+"warmup_frames", "must not be negative (found %d)", m.WarmupFrames)
		}
		if !(m.MinArea >= 0) {
			v.fail(p+"min_area", "must not be negative (found %v)", m.MinArea)
		}
		for _, k := range []struct {
			key string
			n   int
		}{{"open_kernel", m.OpenKernel}, {"close_kernel", m.CloseKernel}} {
			if k.n < 0 || k.n > 99 {
				v.fail(p+k.key, "must be within 0..99 pixels (found %d)", k.n)
			}
		}
	case DetectorFile:
		for id := range ids {
			if _, ok := d.File.Paths[id]; !ok && id != "" {
				v.fail("detector.file.paths", "no detections file for source %q", id)
			}
		}
		for id, p := range d.File.Paths {
			if !ids[id] {
				v.fail("detector.file.paths."+id, "no source has this id")
				continue
			}
			if !v.pathLen("detector.file.paths."+id, p) {
				continue
			}
			if _, err := os.Stat(v.c.Resolve(p)); err != nil {
				v.fail("detector.file.paths."+id, "cannot open %q: %v", v.c.Resolve(p), unwrapPathErr(err))
			}
		}
	case DetectorONNX:
		v.onnx()
	default:
		v.fail("detector.kind", "want %s (found %q)", orList(toStrings(DetectorKinds)), d.Kind)
	}
	if d.Class == "" {
		v.fail("detector.class", "is required")
	} else {
		v.name("detector.class", d.Class)
	}
}

// toStrings turns typed names into strings.
func toStrings[T ~string](vs []T) []string {
	out := make([]string, len(vs))
	for i, v := range vs {
		out[i] = string(v)
	}
	return out
}

// tracker checks the tracker kind; the pipeline's check judges its
// settings with the tracker's own rules.
func (v *validator) tracker() {
	if k := v.c.Tracker.Kind; !slices.Contains(track.Kinds, k) {
		v.fail("tracker.kind", "want %s (found %q)", orList(toStrings(track.Kinds)), k)
	}
}

func (v *validator) rule(path string, r Rule, ids, names map[string]bool) {
	v.token(path+".name", r.Name)
	if r.Name != "" && names[r.Name] {
		v.fail(path+".name", "duplicate rule name %q", r.Name)
	}
	names[r.Name] = true
	if r.Source == "" {
		v.fail(path+".source", "is required")
	} else if !ids[r.Source] {
		v.fail(path+".source", "no source has id %q", r.Source)
	}
	if (len(r.Line) > 0) == (len(r.Zone) > 0) {
		v.fail(path, "set exactly one of line and zone")
		return
	}
	pts := r.Line
	key := path + ".line"
	if r.Kind() == events.RuleZone {
		pts, key = r.Zone, path+".zone"
	}
	if len(pts) > MaxZonePoints {
		v.fail(key, "at most %d points (found %d)", MaxZonePoints, len(pts))
		return
	}
	for i, p := range pts {
		if p[0] < 0 || p[0] > 1 || p[1] < 0 || p[1] > 1 || math.IsNaN(p[0]) || math.IsNaN(p[1]) {
			v.fail(fmt.Sprintf("%s[%d]", key, i), "coordinates are fractions of the frame within 0..1 (found [%v, %v])", p[0], p[1])
		}
	}
	if r.Kind() == events.RuleLine {
		switch {
		case len(pts) != 2:
			v.fail(key, "a line has exactly 2 points (found %d)", len(pts))
		case pts[0] == pts[1]:
			v.fail(key, "line has zero length (both points are [%v, %v])", pts[0][0], pts[0][1])
		}
		if r.Dwell.Duration != 0 {
			v.fail(path+".dwell", "applies to zones only")
		}
	} else {
		poly := make([]events.Point, len(pts))
		for i, p := range pts {
			poly[i] = events.Point{X: p[0], Y: p[1]}
		}
		switch {
		case len(pts) < 3:
			v.fail(key, "a zone has at least 3 points (found %d)", len(pts))
		case events.PolygonArea(poly) == 0:
			v.fail(key, "zone has zero area")
		default:
			if i, j, bad := events.SelfIntersection(poly); bad {
				v.fail(key, "zone edges %d and %d cross each other (self-intersecting polygon)", i+1, j+1)
			}
		}
		if r.Dwell.Duration < 0 {
			v.fail(path+".dwell", "must not be negative (found %v)", r.Dwell.Duration)
		}
	}
	if r.Anchor.Validate() != nil {
		v.fail(path+".anchor", "want %s (found %q)", orList(toStrings(events.Anchors)), r.Anchor)
	}
	if r.Band != nil && !(*r.Band >= 0 && *r.Band < 0.5) {
		v.fail(path+".band", "must be within 0..0.5 of the frame height (found %v)", *r.Band)
	}
	for i, cl := range r.Classes {
		v.name(fmt.Sprintf("%s.classes[%d]", path, i), cl)
	}
	if r.Area != "" {
		if r.Kind() != events.RuleZone {
			v.fail(path+".area", "only zones have an area")
		} else {
			v.token(path+".area", r.Area)
		}
	}
}

func (v *validator) output() {
	n := v.c.Output.NATS
	if n.URL != "" && v.pathLen("output.nats.url", n.URL) {
		// One server, or several of a cluster separated by commas.
		for _, one := range strings.Split(n.URL, ",") {
			u, err := url.Parse(strings.TrimSpace(one))
			if err != nil || (u.Scheme != "nats" && u.Scheme != "tls" && u.Scheme != "ws" && u.Scheme != "wss") || u.Host == "" {
				v.fail("output.nats.url", "want nats://host:port, or several separated by commas (found %q)", bus.RedactURL(n.URL))
				break
			}
		}
	}
	if n.Embedded.Port < 0 || n.Embedded.Port > 65535 {
		v.fail("output.nats.embedded.port", "must be within 0..65535, 0 picks a free port (found %d)", n.Embedded.Port)
	}
	v.token("output.nats.prefix", n.Prefix)
	v.pathLen("output.jsonl", v.c.Output.JSONL)
	switch v.c.Log.Level {
	case "debug", "info", "warn", "error":
	default:
		v.fail("log.level", "want debug, info, warn or error (found %q)", v.c.Log.Level)
	}
	if f := v.c.Log.Format; f != "text" && f != "json" {
		v.fail("log.format", "want text or json (found %q)", f)
	}
}
