package pipeline

// Every conversion from the site file (internal/config) to the settings of a
// stage lives in this file: stages never import the config package, and each
// stage owns its own defaults (the config package copies them).

import (
	"crypto/rand"
	"errors"
	"fmt"
	"image"
	"math"
	"slices"
	"strings"
	"time"

	"tallyd/capture"
	"tallyd/capture/scene"
	"tallyd/detect"
	"tallyd/detect/motion"
	"tallyd/detect/onnx"
	"tallyd/events"
	"tallyd/events/bus"
	"tallyd/internal/config"
	"tallyd/internal/motfmt"
	"tallyd/track"
)

// sourceSpec is how capture opens a file, stream, device or folder source.
func sourceSpec(cfg *config.Config, sc config.Source) capture.SourceSpec {
	return capture.SourceSpec{ID: sc.ID, URL: sc.URL, Device: sc.Device,
		File: cfg.Resolve(sc.File), Folder: cfg.Resolve(sc.Folder), FolderFPS: sc.FolderFPS,
		Transport: sc.Transport, Username: sc.Username, Password: sc.Password.Value(),
		OpenTimeout: sc.OpenTimeout.Duration, ReadTimeout: sc.ReadTimeout.Duration,
		MaxFramePixels: sc.MaxFramePixels}
}

// SceneConfig is the generator's configuration of a scene source: keys left
// out take the scene's defaults; an explicit 0 (noise, crossings, visitors)
// means none.
func SceneConfig(s config.Scene) scene.Config {
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

// gateConfig is the motion gate of a source, nil when it has none.
func gateConfig(g *config.Gate) *motion.GateConfig {
	if g == nil {
		return nil
	}
	return &motion.GateConfig{Where: g.Where, Threshold: g.Threshold, Hold: g.Hold.Duration}
}

// gateRegion is where a source's rules are, for a gate that watches only
// there.
func gateRegion(lines []events.LineRule, zones []events.ZoneRule) motion.GateRegion {
	pt := func(p events.Point) image.Point { return image.Pt(int(math.Round(p.X)), int(math.Round(p.Y))) }
	var r motion.GateRegion
	for _, z := range zones {
		poly := make([]image.Point, len(z.Polygon))
		for i, p := range z.Polygon {
			poly[i] = pt(p)
		}
		r.Zones = append(r.Zones, poly)
	}
	for _, l := range lines {
		r.Lines = append(r.Lines, [2]image.Point{pt(l.A), pt(l.B)})
	}
	return r
}

// motionConfig is the background-subtraction detector's configuration.
func motionConfig(d config.Detector) motion.Config {
	m := d.Motion
	return motion.Config{
		History: m.History, VarThreshold: m.VarThreshold, LearningRate: m.LearningRate,
		WarmupFrames: m.WarmupFrames, MinArea: m.MinArea, OpenKernel: m.OpenKernel,
		CloseKernel: m.CloseKernel, Class: d.Class,
	}
}

// ONNXConfig is the ONNX detector's configuration of a site file, for
// commands that open detectors themselves (tallyd models).
func ONNXConfig(cfg *config.Config) onnx.Config { return onnxConfig(cfg) }

// onnxConfig is the ONNX detector's configuration, with paths resolved
// against the site file's folder.
func onnxConfig(cfg *config.Config) onnx.Config {
	o := cfg.Detector.ONNX
	c := onnx.Config{
		Model: cfg.Resolve(o.Model), Names: cfg.Resolve(o.Names), Engine: o.Engine,
		Library: cfg.Resolve(o.Library), IntraThreads: o.Threads.Intra, InterThreads: o.Threads.Inter,
		Sessions: o.Sessions, Spin: o.Threads.Spin, DisableOptimizers: o.DisableOptimizers,
		Optimization: o.Optimization, Width: o.Input.Width, Height: o.Input.Height,
		RGB: o.Channels == "rgb", Scale: o.Scale, Std: [3]float64{1, 1, 1},
		Pad: uint8(min(max(o.Letterbox.Pad, 0), 255)), Place: o.Letterbox.Place,
		Layout: o.Layout, ScoreThreshold: o.ScoreThreshold, ClassThresholds: o.ClassThresholds,
		Classes: o.Classes, NMS: o.NMS.Kind, IoU: o.NMS.IoU, ClassAware: o.NMS.ClassAware,
		MaxDetections: o.MaxDetections, MinBox: o.MinBox,
		Anchors: o.Anchors, ScaleXY: o.ScaleXY, SigmoidApplied: o.SigmoidApplied, DarknetCfg: cfg.Resolve(o.Cfg),
	}
	copy(c.Mean[:], o.Mean)
	if len(o.Std) == 3 {
		copy(c.Std[:], o.Std)
	}
	return c
}

// onnxError locates an ONNX start-up error in the site file: a
// *onnx.SetupError becomes a config.FieldError on its detector.onnx key (so
// it wraps config.ErrInvalid and names the file and line); other errors are
// returned as they are.
func onnxError(cfg *config.Config, err error) error {
	var se *onnx.SetupError
	if errors.As(err, &se) {
		return cfg.Errorf("detector.onnx."+se.Key, "%s", se.Msg)
	}
	return err
}

// trackerSettings is the tracker every source gets.
func trackerSettings(t config.Tracker) track.Settings {
	b, i := t.ByteTrack, t.IoU
	return track.Settings{
		Kind: t.Kind,
		ByteTrack: track.ByteTrackConfig{
			HighScore: b.HighScore, LowScore: b.LowScore, NewTrackScore: b.NewTrackScore,
			MatchIoU: b.MatchIoU, LowMatchIoU: b.LowMatchIoU, BirthHits: b.BirthHits,
			LostTTL: b.LostTTL.Duration, LostFrames: b.LostFrames, PerClass: b.PerClass,
			Scores: track.ScoreCalibration{Mode: b.Scores.Mode, WarmupDetections: b.Scores.WarmupDetections,
				HighQuantile: b.Scores.HighQuantile, NewQuantile: b.Scores.NewQuantile},
			Motion: track.MotionConfig{MeasurementNoise: b.Motion.MeasurementNoise,
				Acceleration: b.Motion.Acceleration, SizeAcceleration: b.Motion.SizeAcceleration},
		},
		Baseline: track.IoUConfig{MinIoU: i.MinIoU, BirthHits: i.BirthHits, MaxMisses: i.MaxMisses, PerClass: i.PerClass},
	}
}

// RulesFor converts the rules of one source from frame fractions to pixels
// of its w x h frames; band, a fraction of the frame height, becomes BandPx.
func RulesFor(cfg *config.Config, sourceID string, w, h int) ([]events.LineRule, []events.ZoneRule) {
	pt := func(p [2]float64) events.Point { return events.Point{X: p[0] * float64(w), Y: p[1] * float64(h)} }
	var lines []events.LineRule
	var zones []events.ZoneRule
	for _, r := range cfg.Rules {
		if r.Source != sourceID {
			continue
		}
		bandPx := *r.Band * float64(h)
		if r.Kind() == events.RuleLine {
			lines = append(lines, events.LineRule{Name: r.Name, A: pt(r.Line[0]), B: pt(r.Line[1]),
				Classes: r.Classes, Anchor: r.Anchor, BandPx: bandPx})
			continue
		}
		poly := make([]events.Point, len(r.Zone))
		for i, p := range r.Zone {
			poly[i] = pt(p)
		}
		zones = append(zones, events.ZoneRule{Name: r.Name, Polygon: poly, Classes: r.Classes,
			Anchor: r.Anchor, BandPx: bandPx, DwellThreshold: r.Dwell.Duration})
	}
	return lines, zones
}

// zeroTotals is every rule of a source with nothing counted yet.
func zeroTotals(cfg *config.Config, sourceID string) map[string]events.Totals {
	m := map[string]events.Totals{}
	for _, r := range cfg.Rules {
		if r.Source == sourceID {
			m[r.Name] = events.Totals{Kind: r.Kind()}
		}
	}
	return m
}

// buildDetector makes the detector the site file asks for.
func buildDetector(cfg *config.Config) (Detector, error) {
	d := cfg.Detector
	switch d.Kind {
	case config.DetectorFile:
		fd := &fileDetector{class: d.Class, bySource: map[string]*detect.FileDetector{}}
		for id, path := range d.File.Paths {
			rows, err := motfmt.ReadFile(cfg.Resolve(path))
			if err != nil {
				return nil, cfg.Errorf("detector.file.paths."+id, "%v", err)
			}
			fd.bySource[id] = detect.NewFileDetector(rows, d.Class, d.File.MinScore)
		}
		return fd, nil
	case config.DetectorMotion:
		return motion.New(motionConfig(d)), nil
	case config.DetectorONNX:
		det, err := onnx.New(onnxConfig(cfg))
		if err != nil {
			return nil, onnxError(cfg, err)
		}
		return det, nil
	}
	return nil, cfg.Errorf("detector.kind", "unknown detector %q", d.Kind)
}

// checkClasses refuses rule classes the detector never reports (a typing
// mistake such as "persn" would otherwise count nothing, silently), and on
// generated scenes, classes the scene does not show.
func checkClasses(cfg *config.Config, det Detector) config.Errors {
	var errs config.Errors
	var known []string
	if cl, ok := det.(ClassLister); ok {
		known = cl.Classes()
	}
	scenes := map[string]bool{}
	for _, s := range cfg.Sources {
		scenes[s.ID] = s.Scene != nil
	}
	for i, r := range cfg.Rules {
		for j, c := range r.Classes {
			path := fmt.Sprintf("rules[%d].classes[%d]", i, j)
			switch {
			case known != nil && !slices.Contains(known, c):
				errs = append(errs, cfg.Errorf(path, "the %s detector never reports class %q%s", cfg.Detector.Kind, c, suggest(c, known)))
			case scenes[r.Source] && c != scene.ClassPerson:
				errs = append(errs, cfg.Errorf(path, "the generated scene of source %s shows only %s, never %q", r.Source, scene.ClassPerson, c))
			}
		}
	}
	return errs
}

// suggest names the known class closest to c, or lists a few when none is
// close.
func suggest(c string, known []string) string {
	best, bestD := "", 3 // at most two edits away
	for _, k := range known {
		if d := editDistance(strings.ToLower(c), strings.ToLower(k)); d < bestD {
			best, bestD = k, d
		}
	}
	if best != "" {
		return fmt.Sprintf(" (did you mean %q?)", best)
	}
	if len(known) <= 5 {
		return fmt.Sprintf(" (it reports %s)", strings.Join(known, ", "))
	}
	return fmt.Sprintf(" (it reports %d classes: %s, ...)", len(known), strings.Join(known[:5], ", "))
}

// editDistance is the Levenshtein distance between two short strings.
func editDistance(a, b string) int {
	prev := make([]int, len(b)+1)
	for j := range prev {
		prev[j] = j
	}
	for i := 1; i <= len(a); i++ {
		cur := make([]int, len(b)+1)
		cur[0] = i
		for j := 1; j <= len(b); j++ {
			cost := 1
			if a[i-1] == b[j-1] {
				cost = 0
			}
			cur[j] = min(prev[j]+1, cur[j-1]+1, prev[j-1]+cost)
		}
		prev = cur
	}
	return prev[len(b)]
}

// Load reads a site file and checks it, the stages' own rules for their
// settings included, reporting every problem at once.
func Load(path string) (*config.Config, error) { return config.Load(path, checkStages) }

// Parse is Load for a site file held in memory.
func Parse(name string, data []byte) (*config.Config, error) {
	return config.Parse(name, data, checkStages)
}

// checkStages judges the settings only a stage can: a generated scene's
// size, length and crowd, the tracker's thresholds.
func checkStages(cfg *config.Config) config.Errors {
	var errs config.Errors
	for i, s := range cfg.Sources {
		if s.Scene == nil {
			continue
		}
		path := fmt.Sprintf("sources[%d].scene", i)
		for _, err := range unjoin(SceneConfig(*s.Scene).Validate()) {
			var fe *scene.FieldError
			if errors.As(err, &fe) {
				errs = append(errs, cfg.Errorf(path+"."+fe.Field, "%s (found %v)", fe.Rule, fe.Value))
			} else {
				errs = append(errs, cfg.Errorf(path, "%v", err))
			}
		}
	}
	if slices.Contains(track.Kinds, cfg.Tracker.Kind) { // the config package reports an unknown kind
		for _, err := range unjoin(trackerSettings(cfg.Tracker).Validate()) {
			var ce *track.ConfigError
			if errors.As(err, &ce) {
				errs = append(errs, cfg.Errorf("tracker."+ce.Field, "%s", ce.Msg))
			} else {
				errs = append(errs, cfg.Errorf("tracker", "%v", err))
			}
		}
	}
	return errs
}

// unjoin lists the errors inside an errors.Join (nil: none).
func unjoin(err error) []error {
	if err == nil {
		return nil
	}
	if j, ok := err.(interface{ Unwrap() []error }); ok {
		return j.Unwrap()
	}
	return []error{err}
}

// embeddedOptions is the in-process NATS server: JetStream on state_dir,
// and a login when the site file sets one.
func embeddedOptions(cfg *config.Config) bus.EmbeddedOptions {
	e := cfg.Output.NATS.Embedded
	return bus.EmbeddedOptions{Host: e.Host, Port: e.Port, StoreDir: cfg.StatePath("jetstream"),
		User: e.User, Password: e.Password.Value(), NKey: e.NKey}
}

// connectOptions are how tallyd logs in to the NATS server: the external
// server's auth and TLS, or the embedded server's own login.
func connectOptions(cfg *config.Config, external bool) []bus.Option {
	n := cfg.Output.NATS
	if !external {
		if e := n.Embedded; e.User != "" {
			return []bus.Option{bus.UserPassword(e.User, e.Password.Value())}
		}
		return nil
	}
	var opts []bus.Option
	a := n.Auth
	switch {
	case a.User != "":
		opts = append(opts, bus.UserPassword(a.User, a.Password.Value()))
	case a.Token != "":
		opts = append(opts, bus.Token(a.Token.Value()))
	case a.NKeySeed != "":
		opts = append(opts, bus.NKeySeedFile(cfg.Resolve(a.NKeySeed)))
	case a.Creds != "":
		opts = append(opts, bus.CredsFile(cfg.Resolve(a.Creds)))
	}
	if t := n.TLS; t.CA != "" || t.Cert != "" {
		opts = append(opts, bus.TLSFiles(cfg.Resolve(t.CA), cfg.Resolve(t.Cert), cfg.Resolve(t.Key)))
	}
	return opts
}

// streamSettings is the site's JetStream stream.
func streamSettings(cfg *config.Config) bus.StreamSettings {
	j := cfg.Output.NATS.JetStream
	return bus.StreamSettings{Site: cfg.Site, Prefix: cfg.Output.NATS.Prefix, MaxAge: j.MaxAge.Duration,
		MaxBytes: j.MaxBytes, Duplicates: j.DuplicateWindow.Duration, Replicas: j.Replicas}
}

// bucketName is the key-value bucket of the site's live state.
func bucketName(cfg *config.Config) string {
	if b := cfg.Output.NATS.JetStream.Bucket; b != "" {
		return b
	}
	return "tallyd-" + cfg.Site
}

// intervalConfig is the interval totals every rule engine reports.
func intervalConfig(cfg *config.Config) events.IntervalConfig {
	return events.IntervalConfig{Every: cfg.Intervals.Every.Duration, Zone: cfg.Intervals.Location()}
}

// newRunID names one run of the daemon in live sources' event ids: its start
// time and random bits, so ids never repeat across restarts.
func newRunID(start time.Time) string {
	var b [6]byte
	_, _ = rand.Read(b[:])
	return fmt.Sprintf("%x-%x", start.UnixMilli(), b)
}
