package config

// Default values, in one place. The README's config reference lists them.
const (
	DefaultDetector     = "motion"
	DefaultClass        = "person"
	DefaultTracker      = "iou"
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
	DefaultMinIoU       = 0.3
	DefaultBirthHits    = 3
	DefaultMaxMisses    = 5
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
		},
		Tracker: Tracker{
			Kind: DefaultTracker,
			IoU:  IoU{MinIoU: DefaultMinIoU, BirthHits: DefaultBirthHits, MaxMisses: DefaultMaxMisses},
		},
		Output: Output{NATS: NATS{
			Embedded: Embedded{Host: DefaultNATSHost, Port: DefaultNATSPort},
			Prefix:   DefaultPrefix,
		}},
		Log: Log{Level: DefaultLogLevel, Format: DefaultLogFormat},
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
