package eval

import (
	"fmt"
	"math"
	"slices"

	"tallyd/internal/motfmt"
)

// sequence is one sequence ready for scoring: for every frame, the dense
// ids of the scored ground-truth and tracker boxes and the similarity
// (IoU) of every overlapping pair. Dense ids number the distinct input ids
// 0, 1, 2, … in order of first appearance.
type sequence struct {
	frames         []frame
	numGT, numTr   int     // distinct ids scored
	gtDets, trDets int     // boxes scored
	pairGT, pairTr []int32 // per pair key: the dense ids it joins
	suppressed     int     // tracker boxes dropped on distractors
}

type frame struct {
	gt, tr []int32 // dense ids of the scored boxes, in input order
	pairs  []pair  // every pair with similarity > 0, by gt then tracker position
}

// pair is one overlapping ground-truth/tracker pair of a frame.
type pair struct {
	g, t int32 // positions in frame.gt and frame.tr
	key  int32 // index of the (gt id, tracker id) combination in the sequence
	sim  float64
}

// builder assembles a sequence frame by frame.
type builder struct {
	seq          sequence
	gtIDs, trIDs map[int64]int32
	keys         map[uint64]int32
	gt, tr       []int32 // arenas behind frame.gt and frame.tr
	pairs        []pair
	offs         [][3]int // per frame: end offsets in gt, tr, pairs
}

func newBuilder(frames, gtRows, trRows int) *builder {
	return &builder{
		seq:   sequence{frames: make([]frame, 0, frames)},
		gtIDs: make(map[int64]int32),
		trIDs: make(map[int64]int32),
		keys:  make(map[uint64]int32),
		gt:    make([]int32, 0, gtRows),
		tr:    make([]int32, 0, trRows),
		pairs: make([]pair, 0, gtRows+trRows), // usually about one per tracker box
		offs:  make([][3]int, 0, frames),
	}
}

// addFrame appends the next frame: the ids of its scored boxes and its
// overlapping pairs (g and t index gt and tr; similarity in (0, 1]),
// sorted by g then t. The key of each pair is filled in here.
func (b *builder) addFrame(gt, tr []int64, pairs []pair) {
	g0, t0 := len(b.gt), len(b.tr)
	for _, id := range gt {
		b.gt = append(b.gt, dense(b.gtIDs, id))
	}
	for _, id := range tr {
		b.tr = append(b.tr, dense(b.trIDs, id))
	}
	for _, p := range pairs {
		g, t := b.gt[g0+int(p.g)], b.tr[t0+int(p.t)]
		k := uint64(uint32(g))<<32 | uint64(uint32(t))
		key, ok := b.keys[k]
		if !ok {
			key = int32(len(b.seq.pairGT))
			b.keys[k] = key
			b.seq.pairGT = append(b.seq.pairGT, g)
			b.seq.pairTr = append(b.seq.pairTr, t)
		}
		p.key = key
		b.pairs = append(b.pairs, p)
	}
	b.offs = append(b.offs, [3]int{len(b.gt), len(b.tr), len(b.pairs)})
}

func dense(ids map[int64]int32, id int64) int32 {
	d, ok := ids[id]
	if !ok {
		d = int32(len(ids))
		ids[id] = d
	}
	return d
}

// finish returns the assembled sequence; the builder is spent.
func (b *builder) finish() *sequence {
	var prev [3]int
	for _, o := range b.offs {
		b.seq.frames = append(b.seq.frames, frame{
			gt:    b.gt[prev[0]:o[0]:o[0]],
			tr:    b.tr[prev[1]:o[1]:o[1]],
			pairs: b.pairs[prev[2]:o[2]:o[2]],
		})
		prev = o
	}
	b.seq.numGT, b.seq.numTr = len(b.gtIDs), len(b.trIDs)
	b.seq.gtDets, b.seq.trDets = len(b.gt), len(b.tr)
	return &b.seq
}

// prepare checks the rows, applies the rules and computes the similarities.
func prepare(gt, tracks []motfmt.Row, s settings) (*sequence, error) {
	if err := checkRows("truth", gt, s); err != nil {
		return nil, err
	}
	if err := checkRows("tracks", tracks, s); err != nil {
		return nil, err
	}
	gtBy, trBy := byFrame(gt, s.frames), byFrame(tracks, s.frames)
	b := newBuilder(s.frames, len(gt), len(tracks))
	var (
		p            prepScratch
		gtIDs, trIDs []int64
	)
	for f := 1; f <= s.frames; f++ {
		gi, ti := gtBy.rows(f), trBy.rows(f)
		if err := p.checkUnique("truth", f, gt, gi); err != nil {
			return nil, err
		}
		if err := p.checkUnique("tracks", f, tracks, ti); err != nil {
			return nil, err
		}
		ng, nt := len(gi), len(ti)
		p.gtBox, p.trBox = grow(p.gtBox, ng), grow(p.trBox, nt)
		for i, r := range gi {
			p.gtBox[i] = boxOf(&gt[r])
		}
		for j, r := range ti {
			p.trBox[j] = boxOf(&tracks[r])
		}
		p.overlaps = p.overlaps[:0]
		for i := range p.gtBox {
			for j := range p.trBox {
				if v := iou(&p.gtBox[i], &p.trBox[j]); v > 0 {
					p.overlaps = append(p.overlaps, pair{g: int32(i), t: int32(j), sim: v})
				}
			}
		}
		p.dropTr = fill(grow(p.dropTr, nt), false)
		if s.byClass && ng > 0 && nt > 0 {
			b.seq.suppressed += p.suppress(gt, gi, nt, s)
		}

		// Renumber the kept boxes and keep the pairs between them (the
		// order by gt then tracker position is preserved).
		gtIDs, trIDs = gtIDs[:0], trIDs[:0]
		p.gPos, p.tPos = grow(p.gPos, ng), grow(p.tPos, nt)
		for i, r := range gi {
			row := &gt[r]
			p.gPos[i] = -1
			if math.Trunc(row.Conf) == 0 { // the flag is read as a whole number
				continue
			}
			if s.byClass && !slices.Contains(s.classes, row.Class) {
				continue
			}
			p.gPos[i] = int32(len(gtIDs))
			gtIDs = append(gtIDs, row.ID)
		}
		for j, r := range ti {
			p.tPos[j] = -1
			if !p.dropTr[j] {
				p.tPos[j] = int32(len(trIDs))
				trIDs = append(trIDs, tracks[r].ID)
			}
		}
		p.kept = p.kept[:0]
		for _, o := range p.overlaps {
			if g, t := p.gPos[o.g], p.tPos[o.t]; g >= 0 && t >= 0 {
				p.kept = append(p.kept, pair{g: g, t: t, sim: o.sim})
			}
		}
		b.addFrame(gtIDs, trIDs, p.kept)
	}
	return b.finish(), nil
}

// prepScratch holds per-frame buffers reused across frames.
type prepScratch struct {
	gtBox, trBox   []box
	overlaps, kept []pair // overlapping pairs of all boxes / of the kept boxes
	dropTr         []bool
	gPos, tPos     []int32 // per box of the frame: position among the kept ones, or -1
	ids            []int64
	edges          []edge
	rowTo          []int32
	m              matcher
}

// suppress marks in p.dropTr the tracker boxes that the frame's best IoU
// matching against every ground-truth box (any class, any flag) pairs with
// a distractor, and returns how many it marked.
func (p *prepScratch) suppress(gt []motfmt.Row, gi []int32, nt int, s settings) int {
	p.edges = p.edges[:0]
	for _, o := range p.overlaps {
		if o.sim >= s.suppressIoU-eps && o.sim > eps {
			p.edges = append(p.edges, edge{r: o.g, c: o.t, w: o.sim})
		}
	}
	p.rowTo = grow(p.rowTo, len(gi))
	p.m.match(len(gi), nt, p.edges, p.rowTo)
	n := 0
	for i, j := range p.rowTo {
		if j >= 0 && slices.Contains(s.distractors, gt[gi[i]].Class) {
			p.dropTr[j] = true
			n++
		}
	}
	return n
}

// checkUnique reports an id found on more than one box of a frame.
func (p *prepScratch) checkUnique(input string, f int, rows []motfmt.Row, idx []int32) error {
	p.ids = p.ids[:0]
	for _, r := range idx {
		p.ids = append(p.ids, rows[r].ID)
	}
	slices.Sort(p.ids)
	for k := 1; k < len(p.ids); k++ {
		if p.ids[k] != p.ids[k-1] {
			continue
		}
		n := 2
		for k+n-1 < len(p.ids) && p.ids[k+n-1] == p.ids[k] {
			n++
		}
		return &InputError{Input: input, Frame: f, ID: p.ids[k],
			Msg: fmt.Sprintf("want each id at most once per frame (found %d boxes)", n)}
	}
	return nil
}

// checkRows reports the first row that cannot be evaluated.
func checkRows(input string, rows []motfmt.Row, s settings) error {
	for i := range rows {
		r := &rows[i]
		fail := func(format string, args ...any) error {
			return &InputError{Input: input, Frame: r.Frame, ID: r.ID, Msg: fmt.Sprintf(format, args...)}
		}
		switch {
		case r.Frame < 1 || r.Frame > s.frames:
			return fail("want a frame from 1 to %d, the sequence length (found %d)", s.frames, r.Frame)
		case !finite(r.X) || !finite(r.Y) || !finite(r.W) || !finite(r.H):
			return fail("want a finite box (found left %v, top %v, width %v, height %v)", r.X, r.Y, r.W, r.H)
		case r.W < 0 || r.H < 0:
			return fail("want a non-negative width and height (found %v x %v)", r.W, r.H)
		case input == "truth" && !finite(r.Conf):
			return fail("want a finite flag in column 7 (found %v)", r.Conf)
		case input == "truth" && s.checkClasses && (r.Class < minMOTClass || r.Class > maxMOTClass):
			return fail("want a MOTChallenge class from %d to %d under the %s rules (found %d); score with rules mot15 to ignore classes",
				minMOTClass, maxMOTClass, s.rules, r.Class)
		}
	}
	return nil
}

func finite(v float64) bool { return !math.IsNaN(v) && !math.IsInf(v, 0) }

// frameIndex lists the rows of each frame in input order.
type frameIndex struct {
	start []int32 // rows of frame f are order[start[f-1]:start[f]]
	order []int32
}

// byFrame groups row indices by frame (counting sort; rows were checked to
// lie within 1..frames).
func byFrame(rows []motfmt.Row, frames int) frameIndex {
	fi := frameIndex{start: make([]int32, frames+1), order: make([]int32, len(rows))}
	for i := range rows {
		fi.start[rows[i].Frame]++
	}
	for f := 1; f <= frames; f++ {
		fi.start[f] += fi.start[f-1]
	}
	next := slices.Clone(fi.start)
	for i := range rows {
		f := rows[i].Frame - 1
		fi.order[next[f]] = int32(i)
		next[f]++
	}
	return fi
}

func (fi frameIndex) rows(f int) []int32 { return fi.order[fi.start[f-1]:fi.start[f]] }
