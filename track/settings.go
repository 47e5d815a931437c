package track

import (
	"errors"
	"fmt"
	"strings"
	"time"

	"tallyd/detect"
)

// Tracker links one source's detections over time. ByteTrack and IoU are
// the two; Settings.New builds the one a configuration names.
type Tracker interface {
	// Update consumes the detections of one frame taken at source time ts
	// (non-decreasing from call to call).
	Update(ts time.Duration, dets []detect.Detection) Result
}

// Kind names a tracker.
type Kind string

// Tracker kinds, as a site file and the command line spell them.
const (
	KindByteTrack Kind = "bytetrack" // ByteTrack: motion model, two-stage association
	KindBaseline  Kind = "baseline"  // IoU: the first-version tracker, greedy on IoU
)

// Kinds lists the accepted kinds, default first.
var Kinds = []Kind{KindByteTrack, KindBaseline}

// DefaultKind is the tracker used unless another is asked for.
const DefaultKind = KindByteTrack

// Settings selects and configures a tracker.
type Settings struct {
	Kind      Kind
	ByteTrack ByteTrackConfig // used when Kind is KindByteTrack
	Baseline  IoUConfig       // used when Kind is KindBaseline
}

// DefaultSettings returns DefaultKind with every tracker at its defaults
// (DefaultByteTrackConfig, DefaultIoUConfig): the one place a site file or
// a command line takes tracker defaults from.
func DefaultSettings() Settings {
	return Settings{Kind: DefaultKind, ByteTrack: DefaultByteTrackConfig(), Baseline: DefaultIoUConfig()}
}

// ConfigError is one invalid tracker setting. Field is the setting's key
// path as a site file's tracker block spells it (e.g. "bytetrack.high_score"
// from Settings.Validate, "high_score" from ByteTrackConfig.Validate), so
// callers can prefix their own path.
type ConfigError struct {
	Field string
	Msg   string // the rule and the value found
}

// Error formats the problem as "field: rule (found value)".
func (e *ConfigError) Error() string { return e.Field + ": " + e.Msg }

// Validate reports every problem at once, joined with errors.Join, each a
// *ConfigError: an unknown Kind (field "kind"), or the invalid settings of
// the tracker Kind names, under "bytetrack." or "iou." (the baseline's block
// in a site file). The settings of the other tracker are not used and not
// checked.
func (s Settings) Validate() error {
	switch s.Kind {
	case KindByteTrack:
		return errors.Join(s.ByteTrack.problems("bytetrack.")...)
	case KindBaseline:
		return errors.Join(s.Baseline.problems("iou.")...)
	}
	names := make([]string, len(Kinds))
	for i, k := range Kinds {
		names[i] = string(k)
	}
	return errors.Join(&ConfigError{Field: "kind", Msg: fmt.Sprintf("want %s (found %q)", strings.Join(names, " or "), string(s.Kind))})
}

// New builds the tracker s asks for, or returns Validate's error.
func (s Settings) New() (Tracker, error) {
	if err := s.Validate(); err != nil {
		return nil, err
	}
	if s.Kind == KindBaseline {
		return NewIoU(s.Baseline), nil
	}
	return NewByteTrack(s.ByteTrack), nil
}
