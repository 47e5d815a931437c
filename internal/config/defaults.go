package config

import (
	"time"

	"tallyd/track"
)

// Default values, in one place. The README's config reference lists them.
const (
	DefaultDetector     = "motion"
	DefaultClass        = "person"
	DefaultTracker      = "bytetrack"
	DefaultAnchor       = "bottom-center"
	DefaultBand         = 0.01 // of the frame height
	DefaultNATSHost     = "127.0.0.1"
	DefaultNATSPort     = 4222 // the NATS protocol's registered port (common practice)
	DefaultPrefix       = "tallyd"
	DefaultLogLevel     = "info"
	DefaultLogFormat    = "text"
	DefaultMinArea      = 300
	DefaultHistory      = 500
	DefaultVarThreshold = 16 // OpenCV's MOG2 default
	DefaultLearningRate = 0.0002
	DefaultWarmupFrames = 30
	DefaultOpenKernel   = 3
	DefaultCloseKernel  = 7
	DefaultMinIoU       = track.DefaultMinIoU    // baseline tracker
	DefaultBirthHits    = track.DefaultBirthHits // baseline tracker
	DefaultMaxMisses    = track.DefaultMaxMisses // baseline tracker
)

// ONNX detector defaults: a YOLOX-style model (BGR, pixels 0..255,
// letterboxed top-left with 114, the YOLOX reference preprocessing).
const (
	DefaultONNXEngine       = "ort"
	DefaultONNXOptimization = "all"
	DefaultONNXChannels     = "bgr"
	DefaultONNXScale        = 255
	DefaultONNXPad          = 114
	DefaultONNXPlace        = "top-left"
	DefaultONNXLayout       = "auto"
	DefaultONNXScore        = 0.25
	DefaultONNXNMS          = "greedy"
	DefaultONNXIoU          = 0.45
	DefaultONNXMaxDets      = 100
)

// Defaults is the configuration every site file starts from.
func Defaults() Config {
	return Config{
		Detector: Detector{
			Kind:  DefaultDetector,
			Class: DefaultClass,
			Motion: Motion{
				History:      DefaultHistory,
				VarThreshold: DefaultVarThreshold,
				LearningRate: DefaultLearningRate,
				WarmupFrames: DefaultWarmupFrames,
				MinArea:      DefaultMinArea,
				OpenKernel:   DefaultOpenKernel,
				CloseKernel:  DefaultCloseKernel,
			},
			ONNX: ONNX{
				Engine:         DefaultONNXEngine,
				Optimization:   DefaultONNXOptimization,
				Channels:       DefaultONNXChannels,
				Scale:          DefaultONNXScale,
				Letterbox:      ONNXLetterbox{Pad: DefaultONNXPad, Place: DefaultONNXPlace},
				Layout:         DefaultONNXLayout,
				ScoreThreshold: DefaultONNXScore,
				NMS:            ONNXNMS{Kind: DefaultONNXNMS, IoU: DefaultONNXIoU, ClassAware: true},
				MaxDetections:  DefaultONNXMaxDets,
			},
		},
		Tracker: Tracker{
			Kind:      DefaultTracker,
			IoU:       IoU{MinIoU: DefaultMinIoU, BirthHits: DefaultBirthHits, MaxMisses: DefaultMaxMisses},
			ByteTrack: byteTrackDefaults(),
		},
		Output: Output{NATS: NATS{
			Embedded: Embedded{Host: DefaultNATSHost, Port: DefaultNATSPort},
			Prefix:   DefaultPrefix,
		}},
		Log: Log{Level: DefaultLogLevel, Format: DefaultLogFormat},
	}
}

// Gate defaults.
const (
	DefaultGateWhere     = "anywhere"
	DefaultGateThreshold = 0.001
	DefaultGateHold      = 2 * time.Second
)

func (c *Config) fillSourceDefaults() {
	for i := range c.Sources {
		if g := c.Sources[i].Gate; g != nil {
			if g.Where == "" {
				g.Where = DefaultGateWhere
			}
			if g.Threshold == 0 {
				g.Threshold = DefaultGateThreshold
			}
			if g.Hold.Duration == 0 {
				g.Hold.Duration = DefaultGateHold
			}
		}
	}
}

func (c *Config) fillRuleDefaults() {
	for i := range c.Rules {
		r := &c.Rules[i]
		if r.Anchor == "" {
			r.Anchor = DefaultAnchor
		}
		if r.Band == nil {
			b := DefaultBand
			r.Band = &b
		}
	}
}

// byteTrackDefaults mirrors track.DefaultByteTrackConfig in site-file form.
func byteTrackDefaults() ByteTrack {
	d := track.DefaultByteTrackConfig()
	return ByteTrack{
		HighScore: d.HighScore, LowScore: d.LowScore, NewTrackScore: d.NewTrackScore,
		MatchIoU: d.MatchIoU, LowMatchIoU: d.LowMatchIoU, BirthHits: d.BirthHits,
		LostTTL: Duration{d.LostTTL}, PerClass: d.PerClass,
		Motion: TrackMotion{MeasurementNoise: d.Motion.MeasurementNoise,
			Acceleration: d.Motion.Acceleration, SizeAcceleration: d.Motion.SizeAcceleration},
	}
}
