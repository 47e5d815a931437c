package pipeline

import (
	"sort"
	"time"

	"tallyd/events"
)

// Summary is what a run did: the line replay prints with --summary json.
type Summary struct {
	FramesRead      int64                    `json:"frames_read"`
	FramesProcessed int64                    `json:"frames_processed"`
	FramesDropped   int64                    `json:"frames_dropped"`
	EventsPublished int64                    `json:"events_published"`
	Rules           map[string]events.Totals `json:"rules"`
}

// SourceStatus is one source's health for status lines and tests.
type SourceStatus struct {
	ID             string
	State          string
	Err            string
	Read           int64
	Processed      int64
	DroppedRate    int64
	DroppedMailbox int64
	DroppedPrep    int64
	DroppedOld     int64 // waited longer than max_age for the detector
	Gated          int64 // skipped by the motion gate
	AgeP50ms       float64
	AgeP99ms       float64
	DetectTime     time.Duration // total time in Detect attributed to this source
}

// RuleNames lists rule names in a stable order.
func RuleNames(m map[string]events.Totals) []string {
	names := make([]string, 0, len(m))
	for n := range m {
		names = append(names, n)
	}
	sort.Strings(names)
	return names
}
