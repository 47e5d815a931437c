package eval

import (
	"context"
	"fmt"
	"math"
	"slices"

	"tallyd/internal/motfmt"
	"tallyd/track"
)

// sequence is one sequence ready for scoring: for every frame that holds a
// row, the dense ids of the scored ground-truth and tracker boxes and the
// similarity (IoU) of every overlapping pair. Frames without rows are left
// out: they change no metric. Dense ids number the distinct input ids 0, 1,
// 2, … in order of first appearance.
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

// prepare checks the rows, applies the rules and computes the
// similarities. It stops with ctx's error.
func prepare(ctx context.Context, gt, tracks []motfmt.Row, s settings) (*sequence, error) {
	if err := checkRows("truth", gt, s); err != nil {
		return nil, err
	}
	if err := checkRows("tracks", tracks, s); err != nil {
		return nil, err
	}
	gtBy, err := byFrame(ctx, gt)
	if err != nil {
		return nil, err
	}
	trBy, err := byFrame(ctx, tracks)
	if err != nil {
		return nil, err
	}
	b := newBuilder(len(gtBy.frames)+len(trBy.frames), len(gt), len(tracks))
	var (
		p            prepScratch
		gtIDs, trIDs []int64
		poll         poller
		next         = frameMerge{a: gtBy, b: trBy}
	)
	for {
		f, gi, ti, ok := next.next()
		if !ok {
			break
		}
		if err := poll.check(ctx, 1+len(gi)+len(ti)); err != nil {
			return nil, err
		}
		if err := p.checkUnique("truth", f, gt, gi); err != nil {
			return nil, err
		}
		if err := p.checkUnique("tracks", f, tracks, ti); err != nil {
			return nil, err
		}
		ng, nt := len(gi), len(ti)
		p.gtBox, p.trBox = slices.Grow(p.gtBox[:0], ng)[:ng], slices.Grow(p.trBox[:0], nt)[:nt]
		for i, r := range gi {
			p.gtBox[i] = boxOf(&gt[r])
		}
		for j, r := range ti {
			p.trBox[j] = boxOf(&tracks[r])
		}
		p.overlaps = p.overlaps[:0]
		for i := range p.gtBox {
			if err := poll.check(ctx, len(p.trBox)); err != nil { // one frame may be huge
				return nil, err
			}
			for j := range p.trBox {
				if v := iou(&p.gtBox[i], &p.trBox[j]); v > 0 {
					if len(b.pairs)+len(p.overlaps) >= s.maxOverlaps {
						return nil, &InputError{Input: "tracks", Frame: f, ID: tracks[ti[j]].ID,
							Msg: fmt.Sprintf("want at most %d pairs of overlapping truth and tracker boxes in a sequence (found %d with this box)",
								s.maxOverlaps, s.maxOverlaps+1)}
					}
					p.overlaps = append(p.overlaps, pair{g: int32(i), t: int32(j), sim: v})
				}
			}
		}
		p.dropTr = slices.Grow(p.dropTr[:0], nt)[:nt]
		clear(p.dropTr)
		if s.byClass && ng > 0 && nt > 0 {
			n, err := p.suppress(ctx, gt, gi, nt, s)
			if err != nil {
				return nil, fmt.Errorf("distractor matching: %w", err)
			}
			b.seq.suppressed += n
		}

		// Renumber the kept boxes and keep the pairs between them (the
		// order by gt then tracker position is preserved).
		gtIDs, trIDs = gtIDs[:0], trIDs[:0]
		p.gPos, p.tPos = slices.Grow(p.gPos[:0], ng)[:ng], slices.Grow(p.tPos[:0], nt)[:nt]
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
	edges          []track.Pair
	rowTo          []int32
	m              track.Assigner
}

// suppress marks in p.dropTr the tracker boxes that the frame's best IoU
// matching against every ground-truth box (any class, any flag) pairs with
// a distractor, and returns how many it marked.
func (p *prepScratch) suppress(ctx context.Context, gt []motfmt.Row, gi []int32, nt int, s settings) (int, error) {
	p.edges = p.edges[:0]
	for _, o := range p.overlaps {
		if o.sim >= s.suppressIoU-eps && o.sim > eps {
			p.edges = append(p.edges, track.Pair{Row: o.g, Col: o.t, Weight: o.sim})
		}
	}
	p.rowTo = slices.Grow(p.rowTo[:0], len(gi))[:len(gi)]
	if err := p.m.AssignContext(ctx, len(gi), nt, p.edges, p.rowTo); err != nil {
		return 0, err
	}
	n := 0
	for i, j := range p.rowTo {
		if j >= 0 && slices.Contains(s.distractors, gt[gi[i]].Class) {
			p.dropTr[j] = true
			n++
		}
	}
	return n, nil
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

// frameIndex lists the rows of each frame that holds any, in input order
// within a frame.
type frameIndex struct {
	frames []int   // frame numbers holding rows, ascending
	start  []int32 // rows of frames[k] are order[start[k]:start[k+1]]
	order  []int32
}

// byFrame groups row indices by frame (rows were checked to be at frame 1
// or later): a counting sort when the frame numbers are not much larger
// than the number of rows, a radix sort 16 bits at a time otherwise, so
// that memory grows with the rows only. It stops with ctx's error.
func byFrame(ctx context.Context, rows []motfmt.Row) (frameIndex, error) {
	fi := frameIndex{order: make([]int32, len(rows))}
	var poll poller
	last := 0
	for i := range rows {
		last = max(last, rows[i].Frame)
	}
	if last <= 4*len(rows)+1024 {
		count := make([]int32, last+1) // per frame: its rows, then where they go
		for i := range rows {
			count[rows[i].Frame]++
		}
		var at int32
		for f, n := range count {
			if n > 0 {
				fi.frames = append(fi.frames, f)
				fi.start = append(fi.start, at)
			}
			count[f] = at
			at += n
		}
		if err := poll.check(ctx, 2*len(rows)+len(count)); err != nil {
			return fi, err
		}
		for i := range rows {
			f := rows[i].Frame
			fi.order[count[f]] = int32(i)
			count[f]++
		}
	} else {
		type key struct {
			frame uint64
			row   int32
		}
		a, b := make([]key, len(rows)), make([]key, len(rows))
		for i := range rows {
			a[i] = key{uint64(rows[i].Frame), int32(i)}
		}
		count := make([]int32, 1<<16)
		for shift := 0; shift < 64 && uint64(last)>>shift > 0; shift += 16 {
			if err := poll.check(ctx, 2*len(rows)); err != nil {
				return fi, err
			}
			clear(count)
			for _, k := range a {
				count[k.frame>>shift&0xffff]++
			}
			var at int32
			for d, n := range count {
				count[d] = at
				at += n
			}
			for _, k := range a { // keeps the order of equal digits: a stable sort
				d := k.frame >> shift & 0xffff
				b[count[d]] = k
				count[d]++
			}
			a, b = b, a
		}
		for k, x := range a {
			fi.order[k] = x.row
			if f := int(x.frame); k == 0 || f != fi.frames[len(fi.frames)-1] {
				fi.frames = append(fi.frames, f)
				fi.start = append(fi.start, int32(k))
			}
		}
	}
	fi.start = append(fi.start, int32(len(fi.order)))
	return fi, nil
}

// rows returns the rows of the k-th frame holding any.
func (fi frameIndex) rows(k int) []int32 { return fi.order[fi.start[k]:fi.start[k+1]] }

// frameMerge walks the frames holding rows of either of two inputs.
type frameMerge struct {
	a, b   frameIndex
	ak, bk int // next frame of a and of b
}

// next returns the next frame holding a row of either input and the rows
// of each in it; ok is false after the last.
func (m *frameMerge) next() (f int, a, b []int32, ok bool) {
	f = math.MaxInt
	if m.ak < len(m.a.frames) {
		f = m.a.frames[m.ak]
	}
	if m.bk < len(m.b.frames) {
		f = min(f, m.b.frames[m.bk])
	}
	if m.ak < len(m.a.frames) && m.a.frames[m.ak] == f {
		a, ok = m.a.rows(m.ak), true
		m.ak++
	}
	if m.bk < len(m.b.frames) && m.b.frames[m.bk] == f {
		b, ok = m.b.rows(m.bk), true
		m.bk++
	}
	return f, a, b, ok
}
