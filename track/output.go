package track

import (
	"cmp"
	"slices"
	"time"

	"tallyd/internal/motfmt"
)

// DefaultLostOutput is how long a lost track is still written to a tracks
// file at its predicted box: long enough to bridge a missed detection or two,
// short enough not to draw a person who has left.
const DefaultLostOutput = 300 * time.Millisecond

// OutputRows turns one frame's result into MOTChallenge rows for a tracks
// file: every active track at its matched box, and every lost track seen
// within lostWindow at its predicted box (Estimate). Rows are ordered by ID.
func OutputRows(frame int, ts time.Duration, res Result, lostWindow time.Duration) []motfmt.Row {
	tracks := append([]Track(nil), res.Active...)
	for _, t := range res.Lost {
		if ts-t.LastSeen <= lostWindow && t.Estimate.Area() > 0 {
			t.Box = t.Estimate
			tracks = append(tracks, t)
		}
	}
	rows := ToRows(frame, tracks)
	slices.SortStableFunc(rows, func(a, b motfmt.Row) int { return cmp.Compare(a.ID, b.ID) })
	return rows
}
