package config

import (
	"errors"
	"fmt"
	"math"
	"net/url"
	"os"
	"regexp"
	"strings"
	"time"

	"tallyd/capture/scene"
	"tallyd/events"
	"tallyd/track"
)

var tokenRE = regexp.MustCompile(`^[A-Za-z0-9_-]+$`)

// Validate checks every rule of a site file and reports all problems at once,
// each naming the key path, the rule broken and the value found.
func (c *Config) Validate() error {
	v := validator{c: c}
	v.token("site", c.Site)
	if len(c.Sources) == 0 {
		v.fail("sources", "at least one source is required")
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
	case !tokenRE.MatchString(s):
		v.fail(path, "use only letters, digits, '-' and '_' (found %q)", s)
	}
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
	if s.File != "" {
		p := v.c.Resolve(s.File)
		if st, err := os.Stat(p); err != nil {
			v.fail(path+".file", "cannot open %q: %v", p, unwrapPathErr(err))
		} else if st.IsDir() {
			v.fail(path+".file", "%q is a folder, want a video file", p)
		}
	}
	v.liveSource(path, s)
	if s.Scene != nil {
		if err := SceneConfig(*s.Scene).Validate(); err != nil {
			v.fail(path+".scene", "%v", err)
		}
	}
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
		if _, err := time.Parse(time.RFC3339, s.StartTime); err != nil {
			v.fail(path+".start_time", "want an RFC 3339 time such as 2026-06-01T08:00:00Z (found %q)", s.StartTime)
		}
	}
}

// SceneConfig converts the site file's scene block into the generator's
// config: keys left out take the scene's defaults; an explicit 0 (noise,
// crossings, visitors) means none.
func SceneConfig(s Scene) scene.Config {
	c := scene.Config{
		Seed: s.Seed, Width: s.Width, Height: s.Height, FPS: s.FPS, Duration: s.Duration.Duration,
	}.WithDefaults()
	if s.Noise != nil {
		c.Noise = *s.Noise
	}
	if s.Crossings != nil {
		c.Crossings = *s.Crossings
	}
	if s.Visitors != nil {
		c.Visitors = *s.Visitors
	}
	return c
}

func (v *validator) detector(ids map[string]bool) {
	d := v.c.Detector
	switch d.Kind {
	case "motion":
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
		for k, n := range map[string]int{"open_kernel": m.OpenKernel, "close_kernel": m.CloseKernel} {
			if n < 0 || n > 99 {
				v.fail(p+k, "must be within 0..99 pixels (found %d)", n)
			}
		}
	case "file":
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
			if _, err := os.Stat(v.c.Resolve(p)); err != nil {
				v.fail("detector.file.paths."+id, "cannot open %q: %v", v.c.Resolve(p), unwrapPathErr(err))
			}
		}
	case "onnx":
		v.onnx()
	default:
		v.fail("detector.kind", "want motion, file or onnx (found %q)", d.Kind)
	}
	if d.Class == "" {
		v.fail("detector.class", "is required")
	}
}

func (v *validator) tracker() {
	t := v.c.Tracker
	var err error
	prefix := "tracker."
	switch t.Kind {
	case "bytetrack":
		err, prefix = ByteTrackConfig(t.ByteTrack).Validate(), prefix+"bytetrack."
	case "baseline":
		err, prefix = IoUConfig(t.IoU).Validate(), prefix+"iou."
	default:
		v.fail("tracker.kind", "want bytetrack or baseline (found %q)", t.Kind)
		return
	}
	var joined interface{ Unwrap() []error }
	if errors.As(err, &joined) {
		for _, e := range joined.Unwrap() {
			var ce *track.ConfigError
			if errors.As(e, &ce) {
				v.fail(prefix+ce.Field, "%s", ce.Msg)
			} else {
				v.fail(strings.TrimSuffix(prefix, "."), "%v", e)
			}
		}
	} else if err != nil {
		v.fail(strings.TrimSuffix(prefix, "."), "%v", err)
	}
}

// ByteTrackConfig converts the site file's bytetrack block for the tracker.
func ByteTrackConfig(b ByteTrack) track.ByteTrackConfig {
	return track.ByteTrackConfig{
		HighScore: b.HighScore, LowScore: b.LowScore, NewTrackScore: b.NewTrackScore,
		MatchIoU: b.MatchIoU, LowMatchIoU: b.LowMatchIoU, BirthHits: b.BirthHits,
		LostTTL: b.LostTTL.Duration, PerClass: b.PerClass,
		Motion: track.MotionConfig{MeasurementNoise: b.Motion.MeasurementNoise,
			Acceleration: b.Motion.Acceleration, SizeAcceleration: b.Motion.SizeAcceleration},
	}
}

// IoUConfig converts the site file's iou block for the baseline tracker.
func IoUConfig(c IoU) track.IoUConfig {
	return track.IoUConfig{MinIoU: c.MinIoU, BirthHits: c.BirthHits, MaxMisses: c.MaxMisses, PerClass: c.PerClass}
}

var anchors = map[string]bool{"bottom-center": true, "center": true, "top-center": true}

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
	if r.Kind() == "zone" {
		pts, key = r.Zone, path+".zone"
	}
	for i, p := range pts {
		if p[0] < 0 || p[0] > 1 || p[1] < 0 || p[1] > 1 || math.IsNaN(p[0]) || math.IsNaN(p[1]) {
			v.fail(fmt.Sprintf("%s[%d]", key, i), "coordinates are fractions of the frame within 0..1 (found [%v, %v])", p[0], p[1])
		}
	}
	if r.Kind() == "line" {
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
	if !anchors[r.Anchor] {
		v.fail(path+".anchor", "want bottom-center, center or top-center (found %q)", r.Anchor)
	}
	if r.Band != nil && !(*r.Band >= 0 && *r.Band < 0.5) {
		v.fail(path+".band", "must be within 0..0.5 of the frame height (found %v)", *r.Band)
	}
	for i, cl := range r.Classes {
		if cl == "" {
			v.fail(fmt.Sprintf("%s.classes[%d]", path, i), "class name is empty")
		}
	}
}

func (v *validator) output() {
	n := v.c.Output.NATS
	if n.URL != "" {
		u, err := url.Parse(n.URL)
		if err != nil || (u.Scheme != "nats" && u.Scheme != "tls" && u.Scheme != "ws" && u.Scheme != "wss") || u.Host == "" {
			v.fail("output.nats.url", "want nats://host:port (found %q)", Redact(n.URL))
		}
	}
	if n.Embedded.Port < 0 || n.Embedded.Port > 65535 {
		v.fail("output.nats.embedded.port", "must be within 0..65535, 0 picks a free port (found %d)", n.Embedded.Port)
	}
	v.token("output.nats.prefix", n.Prefix)
	switch v.c.Log.Level {
	case "debug", "info", "warn", "error":
	default:
		v.fail("log.level", "want debug, info, warn or error (found %q)", v.c.Log.Level)
	}
	if f := v.c.Log.Format; f != "text" && f != "json" {
		v.fail("log.format", "want text or json (found %q)", f)
	}
}

// Redact hides the password of a URL so it can be logged or shown in errors.
func Redact(raw string) string {
	u, err := url.Parse(raw)
	if err != nil || u.User == nil {
		return raw
	}
	return u.Redacted()
}
