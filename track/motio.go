package track

import "tallyd/internal/motfmt"

// ToRows converts the tracks reported for one 1-based frame into
// MOTChallenge rows (conf 1, class and visibility absent), so that tracker
// output can be written with motfmt.Write and scored by standard tools.
func ToRows(frame int, tracks []Track) []motfmt.Row {
	rows := make([]motfmt.Row, 0, len(tracks))
	for _, t := range tracks {
		rows = append(rows, motfmt.Row{
			Frame: frame, ID: t.ID,
			X: t.Box.X1, Y: t.Box.Y1, W: t.Box.W(), H: t.Box.H(),
			Conf: 1, Class: -1, Visibility: -1,
		})
	}
	return rows
}
