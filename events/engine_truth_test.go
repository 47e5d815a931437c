package events

import (
	"bufio"
	"bytes"
	"encoding/json"
	"flag"
	"math/rand/v2"
	"os"
	"path/filepath"
	"testing"
	"time"

	"tallyd/detect"
	"tallyd/track"
)

var update = flag.Bool("update", false, "rewrite golden files in testdata")

// walker is one synthetic object: a random walk of its anchor over a span of
// frames.
type walker struct {
	id          int64
	class       string
	first, last int // frames it is visible in, inclusive
	pts         []Point
}

func randomWalkers(r *rand.Rand, n, nFrames int) []walker {
	ws := make([]walker, n)
	classes := []string{"person", "car"}
	for i := range ws {
		first := r.IntN(nFrames)
		last := first + r.IntN(nFrames-first)
		p := Point{r.Float64() * 300, r.Float64() * 300}
		w := walker{id: int64(i + 1), class: classes[r.IntN(2)], first: first, last: last}
		for range last - first + 1 {
			w.pts = append(w.pts, p)
			p = Point{p.X + r.NormFloat64()*25, p.Y + r.NormFloat64()*25}
		}
		ws[i] = w
	}
	return ws
}

func boxAt(p Point) detect.Box { return detect.Box{X1: p.X - 5, Y1: p.Y - 20, X2: p.X + 5, Y2: p.Y} }

// The engine with no hysteresis band, fed perfect tracks, must agree with
// the plain-geometry reference on every total.
func TestEngineAgreesWithTruthWithoutBand(t *testing.T) {
	r := newRand(t)
	lines := []LineRule{
		{Name: "short", A: Point{80, 150}, B: Point{220, 150}},
		{Name: "slanted", A: Point{50, 50}, B: Point{250, 260}, Classes: []string{"person"}},
	}
	zones := []ZoneRule{
		{Name: "square", Polygon: []Point{{100, 100}, {200, 100}, {200, 200}, {100, 200}}, DwellThreshold: 500 * time.Millisecond},
		{Name: "notched", Polygon: []Point{{20, 20}, {280, 20}, {280, 280}, {150, 120}, {20, 280}}, DwellThreshold: time.Second, Classes: []string{"car"}},
	}
	const nFrames = 80
	for trial := range 300 {
		ws := randomWalkers(r, 1+r.IntN(8), nFrames)
		e := NewEngine(testMeta, lines, zones)
		var truth []TruthFrame
		for f := range nFrames {
			ts := time.Duration(f) * 100 * time.Millisecond
			var res track.Result
			tf := TruthFrame{TS: ts}
			for _, w := range ws {
				switch {
				case f >= w.first && f <= w.last:
					p := w.pts[f-w.first]
					res.Active = append(res.Active, track.Track{ID: w.id, Class: w.class, Box: boxAt(p), Confirmed: true, LastSeen: ts})
					tf.Objects = append(tf.Objects, TruthObject{ID: w.id, Class: w.class, Box: boxAt(p)})
				case f == w.last+1:
					res.Ended = append(res.Ended, track.Track{
						ID: w.id, Class: w.class, Box: boxAt(w.pts[len(w.pts)-1]), Confirmed: true,
						LastSeen: time.Duration(w.last) * 100 * time.Millisecond,
					})
				}
			}
			e.Step(int64(f), ts, res)
			truth = append(truth, tf)
		}
		e.CloseAll(nFrames, nFrames*100*time.Millisecond, ReasonStreamEnd)
		got, want := e.Totals(), TruthTotals(lines, zones, truth)
		for name, w := range want {
			if got[name] != w {
				t.Fatalf("trial %d, rule %s: engine %+v, truth %+v", trial, name, got[name], w)
			}
		}
	}
}

// TestGoldenEvents pins the exact event stream of a scripted scene. Run with
// -update to rewrite testdata/engine_events.golden.jsonl after a deliberate
// change.
func TestGoldenEvents(t *testing.T) {
	lines := []LineRule{{Name: "door", A: Point{0, 100}, B: Point{200, 100}, BandPx: 4}}
	zones := []ZoneRule{{Name: "desk", Polygon: []Point{{50, 150}, {150, 150}, {150, 250}, {50, 250}}, BandPx: 4, DwellThreshold: 300 * time.Millisecond}}
	e := NewEngine(testMeta, lines, zones)
	var buf bytes.Buffer
	enc := json.NewEncoder(&buf)
	emit := func(evs []Event) {
		for _, ev := range evs {
			if err := enc.Encode(ev); err != nil {
				t.Fatal(err)
			}
		}
	}
	// Track 1 walks down through the door into the desk zone and stays;
	// track 2 walks up and out; track 3 lingers on the door line.
	for f := range 10 {
		ts := time.Duration(f) * 100 * time.Millisecond
		y1 := 40 + float64(f)*20
		y2 := 180 - float64(f)*15
		res := track.Result{Active: []track.Track{
			{ID: 1, Class: "person", Box: boxAt(Point{100, min(y1, 200)}), Confirmed: true, LastSeen: ts},
			{ID: 2, Class: "person", Box: boxAt(Point{170, y2}), Confirmed: true, LastSeen: ts},
			{ID: 3, Class: "cart", Box: boxAt(Point{30, 100 + float64(f%3-1)*3}), Confirmed: true, LastSeen: ts},
		}}
		emit(e.Step(int64(f), ts, res))
	}
	emit(e.CloseAll(10, time.Second, ReasonStreamEnd))
	totals, err := json.Marshal(e.Totals())
	if err != nil {
		t.Fatal(err)
	}
	buf.Write(totals)
	buf.WriteByte('\n')

	golden := filepath.Join("testdata", "engine_events.golden.jsonl")
	if *update {
		if err := os.MkdirAll("testdata", 0o755); err != nil {
			t.Fatal(err)
		}
		if err := os.WriteFile(golden, buf.Bytes(), 0o644); err != nil {
			t.Fatal(err)
		}
	}
	want, err := os.ReadFile(golden)
	if err != nil {
		t.Fatalf("%v (run go test -run TestGoldenEvents -update to create it)", err)
	}
	if !bytes.Equal(buf.Bytes(), want) {
		t.Errorf("event stream differs from %s:\n%s", golden, diffLines(buf.Bytes(), want))
	}
	// Every line but the last is an event that parses back.
	sc := bufio.NewScanner(bytes.NewReader(want))
	var n int
	for sc.Scan() {
		n++
		if _, err := Parse(sc.Bytes()); err != nil && !bytes.HasPrefix(sc.Bytes(), []byte(`{"desk"`)) {
			t.Errorf("golden line %d: %v", n, err)
		}
	}
}

// diffLines shows the first differing line of two texts.
func diffLines(got, want []byte) string {
	g, w := bytes.Split(got, []byte("\n")), bytes.Split(want, []byte("\n"))
	for i := 0; i < len(g) || i < len(w); i++ {
		var gl, wl []byte
		if i < len(g) {
			gl = g[i]
		}
		if i < len(w) {
			wl = w[i]
		}
		if !bytes.Equal(gl, wl) {
			return "line " + itoa(i+1) + "\n got: " + string(gl) + "\nwant: " + string(wl)
		}
	}
	return ""
}

func itoa(i int) string { b, _ := json.Marshal(i); return string(b) }

func BenchmarkEngineStep(b *testing.B) {
	r := rand.New(rand.NewPCG(1, 2))
	var lines []LineRule
	var zones []ZoneRule
	for i := range 4 {
		lines = append(lines, LineRule{Name: "l" + itoa(i), A: Point{0, 100 + float64(i)*200}, B: Point{1920, 150 + float64(i)*200}, BandPx: 5})
		zones = append(zones, ZoneRule{Name: "z" + itoa(i), Polygon: regular(Point{300 + float64(i)*400, 500}, 180, 0.3, 8), BandPx: 5, DwellThreshold: 5 * time.Second})
	}
	e := NewEngine(testMeta, lines, zones)
	const nTracks = 50
	pts := make([]Point, nTracks)
	for i := range pts {
		pts[i] = Point{r.Float64() * 1920, r.Float64() * 1080}
	}
	active := make([]track.Track, nTracks)
	b.ReportAllocs()
	f := int64(0)
	for b.Loop() {
		for i := range pts {
			pts[i].X += r.NormFloat64() * 5
			pts[i].Y += r.NormFloat64() * 5
			active[i] = track.Track{ID: int64(i + 1), Class: "person", Box: boxAt(pts[i]), Confirmed: true}
		}
		e.Step(f, time.Duration(f)*40*time.Millisecond, track.Result{Active: active})
		f++
	}
}

func BenchmarkPointInPolygon(b *testing.B) {
	poly := regular(Point{500, 500}, 300, 0.1, 16)
	p := Point{610, 420}
	for b.Loop() {
		PointInPolygon(p, poly)
	}
}
