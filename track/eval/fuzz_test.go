package eval

import (
	"errors"
	"math"
	"testing"

	"tallyd/internal/motfmt"
)

// fuzzRows turns bytes into rows: 6 bytes a row (input, frame, id, left,
// top, size) on a coarse grid so that boxes overlap often.
func fuzzRows(data []byte) (gt, tracks []motfmt.Row) {
	for len(data) >= 6 {
		b := data[:6]
		data = data[6:]
		r := motfmt.Row{
			Frame: 1 + int(b[1]%6),
			ID:    int64(b[2] % 5),
			X:     float64(b[3]%16) * 4,
			Y:     float64(b[4]%16) * 4,
			W:     float64(1 + b[5]%24),
			H:     float64(1 + (b[5]/8)%24),
			Conf:  1, Class: 1 + int(b[0]/2%12), Visibility: -1,
		}
		if b[0]%2 == 0 {
			gt = append(gt, r)
		} else {
			r.Class = -1
			tracks = append(tracks, r)
		}
	}
	return gt, tracks
}

// FuzzEvaluate checks, on arbitrary small sequences under every rule set,
// that Evaluate never panics and that the results stay consistent.
func FuzzEvaluate(f *testing.F) {
	f.Add([]byte{0, 0, 1, 2, 2, 9, 1, 0, 1, 2, 3, 9, 0, 1, 1, 2, 2, 9, 1, 1, 2, 2, 2, 9})
	f.Add([]byte{0, 0, 1, 0, 0, 20, 0, 0, 2, 1, 0, 20, 1, 0, 1, 0, 0, 20, 1, 0, 2, 1, 1, 20, 1, 0, 3, 9, 9, 3})
	f.Add([]byte{14, 0, 1, 0, 0, 20, 1, 0, 1, 0, 0, 20, 0, 1, 1, 0, 0, 20, 1, 1, 4, 0, 0, 20})
	f.Fuzz(func(t *testing.T, data []byte) {
		gt, tracks := fuzzRows(data)
		for _, rules := range []Rules{RulesMOT15, RulesMOT17, RulesAuto} {
			m, err := Evaluate(gt, tracks, Options{Rules: rules})
			if err != nil {
				var ie *InputError
				if !errors.As(err, &ie) {
					t.Fatalf("rules %s: unexpected error %v", rules, err)
				}
				return // duplicate ids
			}
			checkInvariants(t, m)
		}
	})
}

func checkInvariants(t *testing.T, m Metrics) {
	t.Helper()
	fail := func(what string) { t.Fatalf("%s: %+v", what, m) }
	if m.TP+m.FN != m.GT || m.TP+m.FP != m.Pred {
		fail("CLEAR counts do not add up")
	}
	if m.IDTP+m.IDFN != m.GT || m.IDTP+m.IDFP != m.Pred || m.IDTP < 0 {
		fail("identity counts do not add up")
	}
	if m.MT+m.PT+m.ML != m.GTIDs || m.IDSW > m.TP || m.Frag > m.TP {
		fail("track counts do not add up")
	}
	if len(m.Alphas) != numAlphas {
		fail("want 19 thresholds")
	}
	prevTP := math.MaxInt
	for _, a := range m.Alphas {
		if a.TP+a.FN != m.GT || a.TP+a.FP != m.Pred || a.TP > prevTP {
			fail("HOTA counts do not add up or grow with α")
		}
		prevTP = a.TP
	}
	for _, v := range []float64{m.MOTP, m.Recall, m.Precision, m.IDF1, m.IDP, m.IDR, m.HOTA, m.DetA, m.AssA,
		m.DetRe, m.DetPr, m.AssRe, m.AssPr, m.LocA, m.OWTA} {
		if !(v >= 0 && v <= 1+1e-12) {
			fail("a ratio outside [0, 1]")
		}
	}
	if !(m.MOTA <= 1) || math.IsNaN(m.MOTA) || math.IsNaN(m.SMOTA) {
		fail("MOTA out of range")
	}
}
