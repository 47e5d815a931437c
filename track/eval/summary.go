package eval

// Summary is the score of one sequence (or of several combined) in the form
// `tallyd score --json` prints, one JSON object per line. Metric names are
// those of the benchmark papers (CLEAR MOT, IDF1, HOTA); counts and
// trajectory classes are spelled out in words.
type Summary struct {
	Sequence string  `json:"sequence"` // sequence name, or "COMBINED"
	MOTA     float64 `json:"mota"`
	MOTP     float64 `json:"motp"` // mean IoU of the matched pairs
	IDF1     float64 `json:"idf1"`
	IDP      float64 `json:"idp"`
	IDR      float64 `json:"idr"`
	HOTA     float64 `json:"hota"`
	DetA     float64 `json:"deta"`
	AssA     float64 `json:"assa"`

	Counts       SummaryCounts       `json:"counts"`
	Trajectories SummaryTrajectories `json:"trajectories"`
}

// SummaryCounts are the box counts behind CLEAR MOT.
type SummaryCounts struct {
	TruthBoxes     int `json:"truth_boxes"`     // ground-truth boxes scored
	TrackBoxes     int `json:"track_boxes"`     // tracker boxes scored
	Matches        int `json:"matches"`         // matched pairs, identity switches included
	FalsePositives int `json:"false_positives"` // tracker boxes not matched
	Misses         int `json:"misses"`          // ground-truth boxes not matched
	IDSwitches     int `json:"id_switches"`
	Fragmentations int `json:"fragmentations"`
}

// SummaryTrajectories classes the ground-truth trajectories by the share of
// their frames in which they are matched.
type SummaryTrajectories struct {
	Truth         int `json:"truth"`          // ground-truth ids scored
	MostlyTracked int `json:"mostly_tracked"` // matched in more than 80 % of their frames
	PartlyTracked int `json:"partly_tracked"`
	MostlyLost    int `json:"mostly_lost"` // matched in less than 20 % of their frames
}

// CombinedName is the Sequence of the row that combines every sequence.
const CombinedName = "COMBINED"

// Summary returns m in the printed form, named sequence.
func (m Metrics) Summary(sequence string) Summary {
	return Summary{
		Sequence: sequence,
		MOTA:     m.MOTA, MOTP: m.MOTP, IDF1: m.IDF1, IDP: m.IDP, IDR: m.IDR,
		HOTA: m.HOTA, DetA: m.DetA, AssA: m.AssA,
		Counts: SummaryCounts{TruthBoxes: m.GT, TrackBoxes: m.Pred, Matches: m.TP, FalsePositives: m.FP,
			Misses: m.FN, IDSwitches: m.IDSW, Fragmentations: m.Frag},
		Trajectories: SummaryTrajectories{Truth: m.GTIDs, MostlyTracked: m.MT, PartlyTracked: m.PT, MostlyLost: m.ML},
	}
}
