package config

import (
	"time"

	"tallyd/detect/motion"
	"tallyd/detect/onnx"
	"tallyd/events"
	"tallyd/events/bus"
	"tallyd/events/outbox"
	"tallyd/track"
)

// Defaults of the site file's own settings. Everything a stage does with a
// value (detector, tracker, capture, bus) takes its default from that stage;
// Defaults below copies them into site-file form.
const (
	DefaultBand      = 0.01 // rules[].band, as a fraction of the frame height
	DefaultLogLevel  = "info"
	DefaultLogFormat = "text"
)

// Limits of a site file. Each is checked with an error naming it; the
// README's "Limits" section lists them.
const (
	MaxFileBytes   = 1 << 20 // the site file itself
	MaxSources     = 256
	MaxRules       = 1024
	MaxZonePoints  = 1000 // vertices of one zone polygon
	MaxTokenLen    = 64   // site, source ids, rule names, class names, the subject prefix
	MaxPathLen     = 4096 // file, folder, model paths and URLs
	MaxFramePixels = 100_000_000
)

// Time range of start_time: event times must stay writable as RFC 3339 for
// any stream length, and times far outside it are typing mistakes.
var (
	MinStartTime = time.Date(1970, 1, 1, 0, 0, 0, 0, time.UTC)
	MaxStartTime = time.Date(2200, 1, 1, 0, 0, 0, 0, time.UTC)
)

// Defaults is the configuration every site file starts from.
func Defaults() Config {
	m := motion.DefaultConfig()
	o := onnx.Defaults()
	tr := track.DefaultSettings()
	js := bus.DefaultStreamSettings()
	bt, iou := tr.ByteTrack, tr.Baseline
	return Config{
		Detector: Detector{
			Kind:  DetectorMotion,
			Class: m.Class,
			Motion: Motion{
				History: m.History, VarThreshold: m.VarThreshold, LearningRate: m.LearningRate,
				WarmupFrames: m.WarmupFrames, MinArea: m.MinArea, OpenKernel: m.OpenKernel, CloseKernel: m.CloseKernel,
			},
			ONNX: ONNX{
				Engine: o.Engine, Optimization: o.Optimization, Channels: channelsOf(o.RGB), Scale: o.Scale,
				Threads:  ONNXThreads{Intra: o.IntraThreads, Inter: o.InterThreads, Spin: o.Spin},
				Sessions: o.Sessions, DisableOptimizers: append([]string(nil), o.DisableOptimizers...),
				Letterbox: ONNXLetterbox{Pad: int(o.Pad), Place: o.Place}, Layout: o.Layout,
				ScoreThreshold: o.ScoreThreshold,
				NMS:            ONNXNMS{Kind: o.NMS, IoU: o.IoU, ClassAware: o.ClassAware},
				MaxDetections:  o.MaxDetections,
			},
		},
		Tracker: Tracker{
			Kind: tr.Kind,
			IoU:  IoU{MinIoU: iou.MinIoU, BirthHits: iou.BirthHits, MaxMisses: iou.MaxMisses, PerClass: iou.PerClass},
			ByteTrack: ByteTrack{
				HighScore: bt.HighScore, LowScore: bt.LowScore, NewTrackScore: bt.NewTrackScore,
				MatchIoU: bt.MatchIoU, LowMatchIoU: bt.LowMatchIoU, BirthHits: bt.BirthHits,
				LostTTL: Duration{bt.LostTTL}, LostFrames: bt.LostFrames, PerClass: bt.PerClass,
				Scores: TrackScores{Mode: bt.Scores.Mode, WarmupDetections: bt.Scores.WarmupDetections,
					HighQuantile: bt.Scores.HighQuantile, NewQuantile: bt.Scores.NewQuantile},
				Motion: TrackMotion{MeasurementNoise: bt.Motion.MeasurementNoise,
					Acceleration: bt.Motion.Acceleration, SizeAcceleration: bt.Motion.SizeAcceleration},
			},
		},
		Output: Output{
			NATS: NATS{
				Embedded: Embedded{Host: bus.DefaultHost, Port: bus.DefaultPort},
				Prefix:   bus.DefaultPrefix,
				JetStream: JetStream{Mode: JetStreamAuto, MaxAge: Duration{js.MaxAge}, MaxBytes: js.MaxBytes,
					DuplicateWindow: Duration{js.Duplicates}, Replicas: js.Replicas, MaxPending: bus.DefaultMaxPending},
			},
			Outbox: Outbox{MaxBytes: outbox.DefaultMaxBytes, MaxAge: Duration{outbox.DefaultMaxAge}},
		},
		Log:       Log{Level: DefaultLogLevel, Format: DefaultLogFormat},
		StateDir:  DefaultStateDir,
		Intervals: Intervals{TimeZone: DefaultTimeZone},
		Fleet:     Fleet{LeaseTTL: Duration{DefaultLeaseTTL}},
	}
}

func channelsOf(rgb bool) string {
	if rgb {
		return "rgb"
	}
	return "bgr"
}

func (c *Config) fillSourceDefaults() {
	d := motion.DefaultGateConfig()
	for i := range c.Sources {
		if g := c.Sources[i].Gate; g != nil {
			if g.Where == "" {
				g.Where = d.Where
			}
			if g.Threshold == 0 {
				g.Threshold = d.Threshold
			}
			if g.Hold.Duration == 0 {
				g.Hold.Duration = d.Hold
			}
		}
	}
}

func (c *Config) fillRuleDefaults() {
	for i := range c.Rules {
		r := &c.Rules[i]
		if r.Anchor == "" {
			r.Anchor = events.AnchorBottomCenter
		}
		if r.Band == nil {
			b := DefaultBand
			r.Band = &b
		}
	}
}
