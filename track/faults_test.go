package track

import (
	"fmt"
	"math"
	"math/rand/v2"
	"slices"
	"strings"
	"testing"
	"time"

	"tallyd/detect"
)

// The fault study: synthetic walkers seen by a simulated detector with
// seeded faults, tracked by the baseline and by ByteTrack, and scored with
// CLEAR MOT-style counts (Bernardin, Stiefelhagen, "Evaluating Multiple
// Object Tracking Performance: The CLEAR MOT Metrics", 2008) and IDF1
// (Ristani et al., "Performance Measures and a Data Set for Multi-Target,
// Multi-Camera Tracking", 2016). The scoring here is a small stand-in for
// the evaluator in track/eval: matches need IoU above 0.5, a match kept
// from the previous frame wins while its IoU stays above 0.5, and frames
// that were dropped before the tracker are not scored.

const (
	studyFrames = 600
	studyStep   = 100 * time.Millisecond // 10 frames/s
	studyW      = 1920.0
	studyH      = 1080.0
)

// studyFaults are the detector faults of the study.
type studyFaults struct {
	miss     float64 // chance that an object is not detected in a frame
	falsePos float64 // false detections per true object and frame
	jitter   float64 // box centre and size error, uniform within ±jitter of the size
	dropout  float64 // chance per frame that it and the next are dropped whole
}

var defaultFaults = studyFaults{miss: 0.2, falsePos: 0.05, jitter: 0.05, dropout: 0.03}

// studyObject moves in a straight line at constant speed from frame first
// to frame last (inclusive, 0-based), while inside the image.
type studyObject struct {
	id          int64
	first, last int
	x, y        float64 // centre at frame first
	vx, vy      float64 // pixels per frame
	w, h        float64
}

func (o studyObject) box(f int) (detect.Box, bool) {
	if f < o.first || f > o.last {
		return detect.Box{}, false
	}
	cx, cy := o.x+o.vx*float64(f-o.first), o.y+o.vy*float64(f-o.first)
	if cx < 0 || cx > studyW || cy < 0 || cy > studyH {
		return detect.Box{}, false
	}
	return detect.Box{X1: cx - o.w/2, Y1: cy - o.h/2, X2: cx + o.w/2, Y2: cy + o.h/2}, true
}

// studyScene makes n objects: a quarter in pairs walking towards each other
// along nearly the same row, the rest on random straight lines.
func studyScene(rng *rand.Rand, n int) []studyObject {
	var objs []studyObject
	size := func() (w, h float64) { h = 80 + 80*rng.Float64(); return 0.45 * h, h }
	for len(objs)+1 < n/4*2 {
		meet := 60 + rng.IntN(studyFrames-120)
		mx, my := 300+rng.Float64()*(studyW-600), 150+rng.Float64()*(studyH-300)
		for _, dir := range []float64{1, -1} {
			speed := 4 + 6*rng.Float64()
			w, h := size()
			first := max(0, meet-60-rng.IntN(60))
			y := my + dir*10*rng.Float64()
			objs = append(objs, studyObject{
				first: first, last: meet + 60 + rng.IntN(60),
				x: mx - dir*speed*float64(meet-first), y: y, vx: dir * speed, vy: 0.3 * rng.NormFloat64(),
				w: w, h: h,
			})
		}
	}
	for len(objs) < n {
		w, h := size()
		angle := rng.Float64() * 2 * math.Pi
		speed := 2 + 6*rng.Float64()
		first := rng.IntN(studyFrames - 200)
		objs = append(objs, studyObject{
			first: first, last: first + 200 + rng.IntN(300),
			x: 100 + rng.Float64()*(studyW-200), y: 100 + rng.Float64()*(studyH-200),
			vx: speed * math.Cos(angle), vy: 0.6 * speed * math.Sin(angle),
			w: w, h: h,
		})
	}
	for i := range objs {
		objs[i].id = int64(i + 1)
	}
	return objs
}

type truthBox struct {
	id  int64
	box detect.Box
}

// studyFrame is one frame: the truth and what the faulty detector saw.
// Dropped frames never reach a tracker.
type studyFrame struct {
	dropped bool
	truth   []truthBox
	dets    []detect.Detection
}

// simulate renders the objects through the faulty detector. An object more
// than 30% covered by one nearer the camera (lower in the image) is detected
// with a low score, as detectors do with occluded objects.
func simulate(rng *rand.Rand, objs []studyObject, fl studyFaults) []studyFrame {
	frames := make([]studyFrame, studyFrames)
	drop := 0 // frames of the current dropout still to drop
	for f := range frames {
		fr := &frames[f]
		if drop == 0 && rng.Float64() < fl.dropout {
			drop = 2
		}
		if drop > 0 {
			fr.dropped = true
			drop--
		}
		for _, o := range objs {
			if b, ok := o.box(f); ok {
				fr.truth = append(fr.truth, truthBox{o.id, b})
			}
		}
		for i, t := range fr.truth {
			occluded := false
			for j, u := range fr.truth {
				if i != j && u.box.Y2 > t.box.Y2 && t.box.Intersect(u.box).Area() > 0.3*t.box.Area() {
					occluded = true
				}
			}
			score := 0.55 + 0.4*rng.Float64()
			if occluded {
				score = 0.15 + 0.3*rng.Float64()
			}
			if rng.Float64() < fl.miss {
				continue
			}
			j := func() float64 { return fl.jitter * (2*rng.Float64() - 1) }
			cx, cy := (t.box.X1+t.box.X2)/2+j()*t.box.W(), (t.box.Y1+t.box.Y2)/2+j()*t.box.H()
			w, h := t.box.W()*(1+j()), t.box.H()*(1+j())
			fr.dets = append(fr.dets, detect.Detection{
				Box:   detect.Box{X1: cx - w/2, Y1: cy - h/2, X2: cx + w/2, Y2: cy + h/2},
				Score: score, Class: "person",
			})
		}
		for range fr.truth {
			if rng.Float64() < fl.falsePos {
				h := 60 + 100*rng.Float64()
				x, y := rng.Float64()*(studyW-h), rng.Float64()*(studyH-h)
				fr.dets = append(fr.dets, detect.Detection{
					Box: detect.BoxXYWH(x, y, 0.45*h, h), Score: 0.1 + 0.6*rng.Float64(), Class: "person",
				})
			}
		}
		rng.Shuffle(len(fr.dets), func(a, b int) { fr.dets[a], fr.dets[b] = fr.dets[b], fr.dets[a] })
	}
	return frames
}

// studyScore holds the counts of one tracker over one scene.
type studyScore struct {
	truth, fn, fp, idsw, frag int
	ids                       int // distinct track IDs reported
	idf1, mota                float64
}

// tracker is what the study runs.
type tracker interface {
	Update(time.Duration, []detect.Detection) Result
	Flush() []Track
}

// runStudy feeds the frames that were not dropped to tr (detections scoring
// at least minScore) and scores its Active tracks, and also its Lost ones
// (at their predicted box) up to coast after their last detection.
func runStudy(frames []studyFrame, tr tracker, minScore float64, coast time.Duration) studyScore {
	var s studyScore
	last := map[int64]int64{}       // truth ID → last matched track ID
	tracked := map[int64]bool{}     // truth ID → matched in the last scored frame it was in
	pairCount := map[[2]int64]int{} // (truth, track) → frames matched, for IDF1
	trackDets := 0
	seen := map[int64]bool{}
	for f, fr := range frames {
		if fr.dropped {
			continue
		}
		var ds []detect.Detection
		for _, d := range fr.dets {
			if d.Score >= minScore {
				ds = append(ds, d)
			}
		}
		now := time.Duration(f) * studyStep
		res := tr.Update(now, ds)
		act := res.Active
		for _, l := range res.Lost {
			if now-l.LastSeen <= coast {
				l.Box = l.Estimate
				act = append(act, l)
			}
		}
		trackDets += len(act)
		for _, a := range act {
			seen[a.ID] = true
		}
		s.truth += len(fr.truth)

		// Keep last frame's pairs that still overlap, then assign the rest.
		match := make([]int, len(fr.truth)) // truth index → active index or -1
		usedAct := make([]bool, len(act))
		for i, t := range fr.truth {
			match[i] = -1
			for k, a := range act {
				if prev, ok := last[t.id]; ok && tracked[t.id] && a.ID == prev && !usedAct[k] && t.box.IoU(a.Box) > 0.5 {
					match[i], usedAct[k] = k, true
					break
				}
			}
		}
		var rows, cols []int
		for i := range fr.truth {
			if match[i] < 0 {
				rows = append(rows, i)
			}
		}
		for k := range act {
			if !usedAct[k] {
				cols = append(cols, k)
			}
		}
		cost := make([][]float64, len(rows))
		for r, i := range rows {
			cost[r] = make([]float64, len(cols))
			for c, k := range cols {
				cost[r][c] = 1 - fr.truth[i].box.IoU(act[k].Box)
			}
		}
		for _, p := range Assign(cost, 0.5) {
			match[rows[p[0]]] = cols[p[1]]
			usedAct[cols[p[1]]] = true
		}

		for i, t := range fr.truth {
			k := match[i]
			if k < 0 {
				s.fn++
				tracked[t.id] = false
				continue
			}
			id := act[k].ID
			pairCount[[2]int64{t.id, id}]++
			if prev, ok := last[t.id]; ok && prev != id {
				s.idsw++
			}
			if _, ok := last[t.id]; ok && !tracked[t.id] {
				s.frag++
			}
			last[t.id], tracked[t.id] = id, true
		}
		for k := range act {
			if !usedAct[k] {
				s.fp++
			}
		}
	}
	tr.Flush()
	s.ids = len(seen)
	s.mota = 1 - float64(s.fn+s.fp+s.idsw)/float64(s.truth)

	// IDF1: the one-to-one truth-to-track pairing that matches the most
	// detections, over the whole sequence.
	var truthIDs, trackIDs []int64
	for k := range pairCount {
		truthIDs, trackIDs = append(truthIDs, k[0]), append(trackIDs, k[1])
	}
	slices.Sort(truthIDs)
	slices.Sort(trackIDs)
	truthIDs, trackIDs = slices.Compact(truthIDs), slices.Compact(trackIDs)
	score := make([][]float64, len(truthIDs))
	for i, g := range truthIDs {
		score[i] = make([]float64, len(trackIDs))
		for j, h := range trackIDs {
			score[i][j] = float64(pairCount[[2]int64{g, h}])
		}
	}
	idtp := 0.0
	for _, p := range AssignMax(score, 1) {
		idtp += score[p[0]][p[1]]
	}
	s.idf1 = 2 * idtp / float64(s.truth+trackDets)
	return s
}

// TestFaultStudy runs both trackers over seeded scenes with simulated
// detector faults (20% misses, 5% false detections, ±5% box jitter, 2-frame
// dropouts of whole frames) and checks that ByteTrack switches identities
// less than the baseline and keeps a higher IDF1. The baseline is shown with
// the detections it would usually get (scores from 0.3) and with the high
// ones only. Rows "+ lost ≤ T" also score ByteTrack's lost tracks at their
// predicted box for up to T after their last detection, as a track file
// written through short gaps would hold them. Run with -v to see the table.
func TestFaultStudy(t *testing.T) {
	type row struct {
		name string
		s    studyScore
	}
	var table []row
	add := func(name string, s studyScore) {
		for i := range table {
			if table[i].name == name {
				a := &table[i].s
				a.truth, a.fn, a.fp, a.idsw, a.frag, a.ids = a.truth+s.truth, a.fn+s.fn, a.fp+s.fp, a.idsw+s.idsw, a.frag+s.frag, a.ids+s.ids
				a.idf1 += s.idf1
				a.mota += s.mota
				return
			}
		}
		table = append(table, row{name, s})
	}
	seeds := []uint64{1, 2, 3, 4, 5}
	objects := 0
	for _, seed := range seeds {
		rng := rand.New(rand.NewPCG(seed, 2022))
		objs := studyScene(rng, 20+int(seed*4)%21) // 20-40 objects
		frames := simulate(rng, objs, defaultFaults)
		objects += len(objs)
		base := runStudy(frames, NewIoU(DefaultIoUConfig()), 0.3, 0)
		baseHigh := runStudy(frames, NewIoU(DefaultIoUConfig()), DefaultHighScore, 0)
		bt := runStudy(frames, NewByteTrack(DefaultByteTrackConfig()), DefaultLowScore, 0)
		add("baseline, scores ≥ 0.3", base)
		add("baseline, scores ≥ 0.5", baseHigh)
		add("bytetrack, scores ≥ 0.1", bt)
		for _, c := range []time.Duration{100, 300, 1000} {
			add(fmt.Sprintf("bytetrack + lost ≤ %v", c*time.Millisecond), runStudy(frames, NewByteTrack(DefaultByteTrackConfig()), DefaultLowScore, c*time.Millisecond))
		}
		if bt.idsw >= base.idsw || bt.idsw >= baseHigh.idsw {
			t.Errorf("seed %d (%d objects): ByteTrack %d ID switches, baseline %d and %d; want fewer",
				seed, len(objs), bt.idsw, base.idsw, baseHigh.idsw)
		}
		if bt.idf1 <= base.idf1 || bt.idf1 <= baseHigh.idf1 {
			t.Errorf("seed %d (%d objects): ByteTrack IDF1 %.3f, baseline %.3f and %.3f; want higher",
				seed, len(objs), bt.idf1, base.idf1, baseHigh.idf1)
		}
	}
	var b strings.Builder
	fmt.Fprintf(&b, "fault study: %d seeds × %d frames at 10 frames/s, %d objects (20-40 a seed); 20%% misses, 5%% false detections, ±5%% jitter, 2-frame dropouts (3%% of frames)\n",
		len(seeds), studyFrames, objects)
	fmt.Fprintf(&b, "(truth: object-frames scored; IDs: distinct track IDs reported; MOTA and IDF1: mean over seeds)\n")
	fmt.Fprintf(&b, "%-26s %7s %7s %7s %6s %6s %6s %6s %6s\n", "tracker", "truth", "FN", "FP", "IDsw", "frag", "IDs", "MOTA", "IDF1")
	for _, r := range table {
		s := r.s
		n := float64(len(seeds))
		fmt.Fprintf(&b, "%-26s %7d %7d %7d %6d %6d %6d %6.3f %6.3f\n", r.name, s.truth, s.fn, s.fp, s.idsw, s.frag, s.ids, s.mota/n, s.idf1/n)
	}
	t.Log("\n" + b.String())
}
