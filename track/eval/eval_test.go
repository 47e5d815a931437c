package eval

import (
	"bytes"
	"compress/gzip"
	"encoding/json"
	"errors"
	"flag"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"reflect"
	"strings"
	"testing"

	"tallyd/internal/motfmt"
)

var update = flag.Bool("update", false, "rewrite golden files in testdata")

func walk(t *testing.T) (gt, tracks []motfmt.Row) {
	t.Helper()
	return readRows(t, "testdata/walk.gt.txt"), readRows(t, "testdata/walk.tracks.txt")
}

// The hand-made walk sequence, counted by hand (testdata/README.md).
func TestWalkByHand(t *testing.T) {
	gt, tracks := walk(t)
	m, err := Evaluate(gt, tracks, Options{})
	if err != nil {
		t.Fatal(err)
	}
	const src = "testdata/README.md, counted by hand"
	same(t, "rules", m.Rules, RulesMOT17, src)
	same(t, "frames", m.Frames, 6, src)
	same(t, "GT boxes / ids", [2]int{m.GT, m.GTIDs}, [2]int{15, 3}, src)
	same(t, "tracker boxes / ids / dropped", [3]int{m.Pred, m.PredIDs, m.Suppressed}, [3]int{12, 4, 6}, src)
	same(t, "TP/FP/FN", [3]int{m.TP, m.FP, m.FN}, [3]int{11, 1, 4}, src)
	same(t, "IDSW/Frag", [2]int{m.IDSW, m.Frag}, [2]int{1, 1}, src)
	same(t, "MT/PT/ML", [3]int{m.MT, m.PT, m.ML}, [3]int{2, 0, 1}, src)
	same(t, "IDTP/IDFP/IDFN", [3]int{m.IDTP, m.IDFP, m.IDFN}, [3]int{9, 3, 6}, src)
	near(t, "MOTA", m.MOTA, 0.6, 1e-12, src)
	near(t, "IDF1", m.IDF1, 2.0/3, 1e-12, src)
	near(t, "MOTP", m.MOTP, (6*58.0/62+5*118.0/122)/11, 1e-12, src)

	// Without class rules the box on the static person is a false positive.
	m15, err := Evaluate(gt, tracks, Options{Rules: RulesMOT15})
	if err != nil {
		t.Fatal(err)
	}
	same(t, "mot15 FP", m15.FP, 7, src)
	same(t, "mot15 tracker boxes", m15.Pred, 18, src)
	same(t, "mot15 GT boxes (flag 0 row dropped)", m15.GT, 15, src)
}

func TestDetectRules(t *testing.T) {
	row := func(class int) motfmt.Row { return motfmt.Row{Frame: 1, Class: class} }
	for _, c := range []struct {
		name string
		gt   []motfmt.Row
		want Rules
	}{
		{"empty", nil, RulesMOT15},
		{"no class column (MOT15 layout)", []motfmt.Row{row(-1), row(-1)}, RulesMOT15},
		{"MOTChallenge classes", []motfmt.Row{row(1), row(7), row(13)}, RulesMOT17},
		{"other scheme (class 0)", []motfmt.Row{row(1), row(0)}, RulesMOT15},
		{"other scheme (class 42)", []motfmt.Row{row(42)}, RulesMOT15},
	} {
		if got := DetectRules(c.gt); got != c.want {
			t.Errorf("%s: DetectRules = %s, want %s", c.name, got, c.want)
		}
	}
}

// Gzipped inputs are read directly (motfmt.ReadFile sniffs the magic bytes).
func TestGzipInput(t *testing.T) {
	raw, err := os.ReadFile("testdata/walk.tracks.txt")
	if err != nil {
		t.Fatal(err)
	}
	var buf bytes.Buffer
	zw := gzip.NewWriter(&buf)
	zw.Write(raw)
	zw.Close()
	path := filepath.Join(t.TempDir(), "tracks.txt.gz")
	if err := os.WriteFile(path, buf.Bytes(), 0o644); err != nil {
		t.Fatal(err)
	}
	gt, plain := walk(t)
	zipped := readRows(t, path)
	if !reflect.DeepEqual(plain, zipped) {
		t.Fatal("gzipped rows differ from plain rows")
	}
	a, _ := Evaluate(gt, plain, Options{})
	b, _ := Evaluate(gt, zipped, Options{})
	if !reflect.DeepEqual(a, b) {
		t.Fatal("metrics differ between plain and gzipped input")
	}
}

// Bad files fail in the reader with the file and line named.
func TestBadFiles(t *testing.T) {
	for _, c := range []struct{ file, want string }{
		{"testdata/bad-columns.txt", `testdata/bad-columns.txt:3: want 6 to 10 columns, have 5 (found "3,1,10,20,30")`},
		{"testdata/bad-width.txt", `testdata/bad-width.txt:2: column 5 (width): want a non-negative number (found "-30")`},
		{"testdata/bad-number.txt", `testdata/bad-number.txt:3: column 4 (top): want a number (found "twenty")`},
	} {
		_, err := motfmt.ReadFile(c.file)
		if err == nil || err.Error() != c.want {
			t.Errorf("ReadFile(%s) error\n got: %v\nwant: %s", c.file, err, c.want)
		}
		var pe *motfmt.ParseError
		if !errors.As(err, &pe) {
			t.Errorf("ReadFile(%s): error %T is not a *motfmt.ParseError", c.file, err)
		}
	}
}

// Rows that cannot be scored: every message checked exactly.
func TestEvaluateInputErrors(t *testing.T) {
	box := func(f int, id int64) motfmt.Row {
		return motfmt.Row{Frame: f, ID: id, X: 0, Y: 0, W: 10, H: 10, Conf: 1, Class: -1, Visibility: -1}
	}
	ok := []motfmt.Row{box(1, 1), box(2, 1)}
	for _, c := range []struct {
		name       string
		gt, tracks []motfmt.Row
		opt        Options
		want       string
		input      string
		frame      int
		id         int64
	}{
		{"duplicate tracker id", ok, []motfmt.Row{box(1, 7), box(2, 7), box(2, 3), box(2, 7)}, Options{},
			"tracks: frame 2, id 7: want each id at most once per frame (found 2 boxes)", "tracks", 2, 7},
		{"duplicate gt id, three boxes", []motfmt.Row{box(1, 4), box(1, 4), box(1, 4)}, ok, Options{},
			"truth: frame 1, id 4: want each id at most once per frame (found 3 boxes)", "truth", 1, 4},
		{"frame beyond the sequence", ok, []motfmt.Row{box(1, 1), box(5, 1)}, Options{Frames: 3},
			"tracks: frame 5, id 1: want a frame from 1 to 3, the sequence length (found 5)", "tracks", 5, 1},
		{"frame 0", []motfmt.Row{box(0, 2)}, ok, Options{},
			"truth: frame 0, id 2: want a frame from 1 to 2, the sequence length (found 0)", "truth", 0, 2},
		{"negative width", []motfmt.Row{{Frame: 1, ID: 1, W: -1, H: 10, Conf: 1}}, ok, Options{},
			"truth: frame 1, id 1: want a non-negative width and height (found -1 x 10)", "truth", 1, 1},
		{"NaN box", ok, []motfmt.Row{{Frame: 1, ID: 1, X: math.NaN(), W: 10, H: 10}}, Options{},
			"tracks: frame 1, id 1: want a finite box (found left NaN, top 0, width 10, height 10)", "tracks", 1, 1},
		{"infinite flag", []motfmt.Row{{Frame: 1, ID: 1, W: 10, H: 10, Conf: math.Inf(1)}}, ok, Options{},
			"truth: frame 1, id 1: want a finite flag in column 7 (found +Inf)", "truth", 1, 1},
		{"class outside the MOTChallenge list", []motfmt.Row{{Frame: 1, ID: 2, W: 10, H: 10, Conf: 1, Class: 0}}, ok, Options{Rules: RulesMOT17},
			"truth: frame 1, id 2: want a MOTChallenge class from 1 to 13 under the mot17 rules (found 0); score with rules mot15 to ignore classes", "truth", 1, 2},
	} {
		t.Run(c.name, func(t *testing.T) {
			_, err := Evaluate(c.gt, c.tracks, c.opt)
			if err == nil || err.Error() != c.want {
				t.Fatalf("error\n got: %v\nwant: %s", err, c.want)
			}
			var ie *InputError
			if !errors.As(err, &ie) {
				t.Fatalf("error %T is not an *InputError", err)
			}
			if ie.Input != c.input || ie.Frame != c.frame || ie.ID != c.id {
				t.Errorf("InputError fields = %s frame %d id %d, want %s frame %d id %d", ie.Input, ie.Frame, ie.ID, c.input, c.frame, c.id)
			}
		})
	}
}

// Invalid options are reported all at once, each an *OptionError.
func TestEvaluateOptionErrors(t *testing.T) {
	for _, c := range []struct {
		name string
		opt  Options
		want string
	}{
		{"iou above 1", Options{IoU: 1.5}, "score options: iou: want a number within (0, 1] (found 1.5)"},
		{"iou NaN", Options{IoU: math.NaN()}, "score options: iou: want a number within (0, 1] (found NaN)"},
		{"unknown rules", Options{Rules: "mot16"}, `score options: rules: want one of mot15, mot17, mot20, auto (found "mot16")`},
		{"negative frames", Options{Frames: -1}, "score options: frames: want 0 (from the data) or a positive sequence length (found -1)"},
		{"suppression IoU", Options{SuppressIoU: -0.5}, "score options: suppress_iou: want a number within (0, 1] (found -0.5)"},
		{"all at once", Options{IoU: -1, Rules: "x", Frames: -2}, "score options: iou: want a number within (0, 1] (found -1)\n" +
			"frames: want 0 (from the data) or a positive sequence length (found -2)\n" +
			`rules: want one of mot15, mot17, mot20, auto (found "x")`},
	} {
		t.Run(c.name, func(t *testing.T) {
			_, err := Evaluate(nil, nil, c.opt)
			if err == nil || err.Error() != c.want {
				t.Fatalf("error\n got: %v\nwant: %s", err, c.want)
			}
			var oe *OptionError
			if !errors.As(err, &oe) {
				t.Fatalf("error %T holds no *OptionError", err)
			}
		})
	}
}

// TestSummaryJSON: the printed form has exactly the keys of the project's
// schema (issue 11), nested as there.
func TestSummaryJSON(t *testing.T) {
	gt, tracks := walk(t)
	m, err := Evaluate(gt, tracks, Options{})
	if err != nil {
		t.Fatal(err)
	}
	raw, err := json.Marshal(m.Summary("walk"))
	if err != nil {
		t.Fatal(err)
	}
	const want = `{"sequence":"walk","mota":MOTA,"motp":MOTP,"idf1":IDF1,"idp":IDP,"idr":IDR,"hota":HOTA,"deta":DETA,"assa":ASSA,` +
		`"counts":{"truth_boxes":%d,"track_boxes":%d,"matches":%d,"false_positives":%d,"misses":%d,"id_switches":%d,"fragmentations":%d},` +
		`"trajectories":{"truth":%d,"mostly_tracked":%d,"partly_tracked":%d,"mostly_lost":%d}}`
	r := strings.NewReplacer("MOTA", js(t, m.MOTA), "MOTP", js(t, m.MOTP), "IDF1", js(t, m.IDF1), "IDP", js(t, m.IDP),
		"IDR", js(t, m.IDR), "HOTA", js(t, m.HOTA), "DETA", js(t, m.DetA), "ASSA", js(t, m.AssA))
	w := fmt.Sprintf(r.Replace(want), m.GT, m.Pred, m.TP, m.FP, m.FN, m.IDSW, m.Frag, m.GTIDs, m.MT, m.PT, m.ML)
	if string(raw) != w {
		t.Errorf("summary JSON\n got %s\nwant %s", raw, w)
	}
	same(t, "id switches", m.IDSW, 1, "testdata/README.md")
}

func js(t *testing.T, v float64) string {
	b, err := json.Marshal(v)
	if err != nil {
		t.Fatal(err)
	}
	return string(b)
}

func TestTableGolden(t *testing.T) {
	gt, tracks := walk(t)
	m, err := Evaluate(gt, tracks, Options{})
	if err != nil {
		t.Fatal(err)
	}
	got := m.Table()
	const golden = "testdata/walk.table.txt"
	if *update {
		if err := os.WriteFile(golden, []byte(got), 0o644); err != nil {
			t.Fatal(err)
		}
	}
	want, err := os.ReadFile(golden)
	if err != nil {
		t.Fatalf("%v (run with -update to create it)", err)
	}
	if got != string(want) {
		t.Errorf("Table() =\n%s\nwant (%s)\n%s", got, golden, want)
	}
}

// Combining follows the README's "Combining sequences": counts add, ratios
// are recomputed, HOTA parts are TP-weighted per α.
func TestCombine(t *testing.T) {
	gt, tracks := walk(t)
	a, err := Evaluate(gt, tracks, Options{})
	if err != nil {
		t.Fatal(err)
	}
	b, err := Evaluate(gt, tracks, Options{Rules: RulesMOT15})
	if err != nil {
		t.Fatal(err)
	}
	one := Combine(a)
	for _, v := range [][2]float64{{one.MOTA, a.MOTA}, {one.MOTP, a.MOTP}, {one.HOTA, a.HOTA}, {one.AssA, a.AssA}, {one.LocA, a.LocA}, {one.IDF1, a.IDF1}} {
		near(t, "Combine of one sequence", v[0], v[1], 1e-12, "identity of Combine")
	}
	same(t, "rules kept", one.Rules, RulesMOT17, "Combine")

	ab := Combine(a, b)
	same(t, "sequences", ab.Sequences, 2, "Combine")
	same(t, "TP", ab.TP, a.TP+b.TP, "README: counts add")
	same(t, "FP", ab.FP, a.FP+b.FP, "README: counts add")
	same(t, "frames", ab.Frames, 12, "README: counts add")
	same(t, "mixed rules", ab.Rules, Rules(""), "Metrics.Rules doc")
	near(t, "MOTA from sums", ab.MOTA, float64(ab.TP-ab.FP-ab.IDSW)/float64(ab.TP+ab.FN), 1e-12, "README: ratios from sums")
	near(t, "MOTP = Σ IoU / Σ TP", ab.MOTP, (a.MOTP*float64(a.TP)+b.MOTP*float64(b.TP))/float64(a.TP+b.TP), 1e-12, "README")
	for i := range numAlphas {
		x, y, c := a.Alphas[i], b.Alphas[i], ab.Alphas[i]
		same(t, "HOTA TP adds", c.TP, x.TP+y.TP, "README")
		if n := float64(x.TP + y.TP); n > 0 {
			near(t, "AssA is TP-weighted", c.AssA, (x.AssA*float64(x.TP)+y.AssA*float64(y.TP))/n, 1e-12, "README")
		}
		near(t, "DetA recomputed", c.DetA, float64(c.TP)/float64(max(1, c.TP+c.FN+c.FP)), 1e-12, "README")
	}
	// An earlier combination adds like the sequences it holds.
	abb := Combine(ab, b)
	same(t, "sequences after nesting", abb.Sequences, 3, "Accumulator.Add")
	flat := Combine(a, b, b)
	near(t, "HOTA nested = flat", abb.HOTA, flat.HOTA, 1e-12, "Accumulator.Add")
	near(t, "MOTP nested = flat", abb.MOTP, flat.MOTP, 1e-12, "Accumulator.Add")

	empty := Combine()
	same(t, "empty MOTA", empty.MOTA, 0.0, "TrackEval: / max(1, ·)")
	same(t, "empty LocA", empty.LocA, 1.0, "TrackEval hota.py")
}
