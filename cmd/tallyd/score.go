package main

import (
	"bufio"
	"bytes"
	"compress/gzip"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"strconv"
	"strings"

	"tallyd/internal/motfmt"
	"tallyd/track/eval"
)

// MaxScoreSequences bounds how many sequences one `score` run takes.
const MaxScoreSequences = 1000

// pathList is a flag that may be given several times.
type pathList []string

func (p *pathList) String() string     { return strings.Join(*p, ",") }
func (p *pathList) Set(v string) error { *p = append(*p, v); return nil }

// scoreSeq is one sequence to score: its name, files and length (0: from
// the files).
type scoreSeq struct {
	name, truth, tracks string
	frames              int
}

func cmdScore(ctx context.Context, args []string, stdout, _ io.Writer) error {
	fs := newFlags("score", "score (--truth gt.txt --tracks tracks.txt)... | --dir FOLDER [--tracks-dir DIR] [--iou 0.5] [--rules auto|mot15|mot17|mot20] [--json]", stdout)
	var truths, tracks pathList
	fs.Var(&truths, "truth", "ground truth, MOTChallenge text format (.gz read directly); repeat with --tracks, in pairs, for several sequences")
	fs.Var(&tracks, "tracks", "tracker output for the --truth at the same position, MOTChallenge text format (.gz read directly)")
	dir := fs.String("dir", "", "score every sequence of a folder: <seq>/gt/gt.txt (length from <seq>/seqinfo.ini when present) against <seq>.txt")
	tracksDir := fs.String("tracks-dir", "", "with --dir: the folder holding the <seq>.txt files (default: --dir)")
	iou := fs.Float64("iou", eval.DefaultIoU, "least IoU for a tracker box to match a truth box")
	rules := fs.String("rules", string(eval.RulesAuto), "evaluation rules: mot15 (all rows), mot17/mot20 (pedestrians only, distractors removed), auto (from the truth's columns)")
	frames := fs.Int("frames", 0, "sequence length in frames (0: the last frame in the files); one sequence only")
	asJSON := fs.Bool("json", false, "print one JSON object per line: each sequence, then the combined one")
	if err := parseFlags(fs, args); err != nil {
		return err
	}
	seqs, err := scoreSequences(truths, tracks, *dir, *tracksDir)
	if err != nil {
		return err
	}
	if *frames != 0 && len(seqs) > 1 {
		return usageErr("--frames: only with one sequence (found %d sequences)", len(seqs))
	}
	if len(seqs) == 1 && *frames != 0 {
		seqs[0].frames = *frames
	}

	var (
		all  []eval.Metrics
		gts  = map[string][]motfmt.Row{} // ground truth shared by sequences is read once
		opts = eval.Options{IoU: *iou, Rules: eval.Rules(*rules)}
	)
	for _, s := range seqs {
		gt, ok := gts[s.truth]
		if !ok {
			if gt, err = motfmt.ReadFileContext(ctx, s.truth); err != nil {
				return inputOrStop(err)
			}
			gts[s.truth] = gt
		}
		tr, err := motfmt.ReadFileContext(ctx, s.tracks)
		if err != nil {
			return inputOrStop(err)
		}
		o := opts
		o.Frames = s.frames
		m, err := eval.EvaluateContext(ctx, gt, tr, o)
		if err != nil {
			return inputOrStop(locateEvalError(err, s))
		}
		all = append(all, m)
	}
	// Counts are summed and ratios recomputed from the sums, as the official
	// evaluator's combined row.
	combined := eval.Combine(all...)

	if *asJSON {
		enc := json.NewEncoder(stdout)
		for i, m := range all {
			if err := enc.Encode(m.Summary(seqs[i].name)); err != nil {
				return err
			}
		}
		return enc.Encode(combined.Summary(eval.CombinedName))
	}
	if len(all) == 1 {
		fmt.Fprint(stdout, all[0].Table())
		return nil
	}
	fmt.Fprint(stdout, scoreTable(seqs, all, combined))
	return nil
}

// scoreSequences lists the sequences the flags name: --truth/--tracks pairs
// or the sequences of --dir.
func scoreSequences(truths, tracks pathList, dir, tracksDir string) ([]scoreSeq, error) {
	switch {
	case dir != "" && (len(truths) > 0 || len(tracks) > 0):
		return nil, usageErr("--dir: give either --dir or --truth/--tracks pairs, not both")
	case dir == "" && tracksDir != "":
		return nil, usageErr("--tracks-dir: only with --dir")
	case dir != "":
		return dirSequences(dir, tracksDir)
	case len(truths) == 0 || len(tracks) == 0:
		return nil, usageErr("--truth and --tracks are required (or --dir)")
	case len(truths) != len(tracks):
		return nil, usageErr("--truth and --tracks come in pairs (found %d --truth and %d --tracks)", len(truths), len(tracks))
	case len(truths) > MaxScoreSequences:
		return nil, usageErr("--truth: at most %d sequences (found %d)", MaxScoreSequences, len(truths))
	}
	seqs := make([]scoreSeq, len(truths))
	for i := range truths {
		name := filepath.Base(tracks[i])
		name = strings.TrimSuffix(strings.TrimSuffix(name, ".gz"), ".txt")
		seqs[i] = scoreSeq{name: name, truth: truths[i], tracks: tracks[i]}
	}
	return seqs, nil
}

// dirSequences finds every <seq>/gt/gt.txt (or gt.txt.gz) in dir, ordered
// by name, with its tracks <seq>.txt (or .txt.gz) in tracksDir and its
// length from <seq>/seqinfo.ini when there is one.
func dirSequences(dir, tracksDir string) ([]scoreSeq, error) {
	if tracksDir == "" {
		tracksDir = dir
	}
	entries, err := os.ReadDir(dir)
	if err != nil {
		return nil, badFile(fmt.Errorf("--dir: %w", err))
	}
	var seqs []scoreSeq
	for _, e := range entries {
		if !e.IsDir() {
			continue
		}
		truth := firstFile(filepath.Join(dir, e.Name(), "gt", "gt.txt"), filepath.Join(dir, e.Name(), "gt", "gt.txt.gz"))
		if truth == "" {
			continue
		}
		want := filepath.Join(tracksDir, e.Name()+".txt")
		tr := firstFile(want, want+".gz")
		if tr == "" {
			return nil, badFile(fmt.Errorf("%s: no tracks for sequence %s (looked for %s and %s.gz)", tracksDir, e.Name(), want, want))
		}
		s := scoreSeq{name: e.Name(), truth: truth, tracks: tr}
		ini := filepath.Join(dir, e.Name(), "seqinfo.ini")
		if _, err := os.Stat(ini); err == nil {
			if s.frames, err = seqLength(ini); err != nil {
				return nil, badFile(err)
			}
		}
		seqs = append(seqs, s)
	}
	if len(seqs) == 0 {
		return nil, badFile(fmt.Errorf("%s: no sequence found (want <seq>/gt/gt.txt beside <seq>.txt)", dir))
	}
	if len(seqs) > MaxScoreSequences {
		return nil, badFile(fmt.Errorf("%s: at most %d sequences (found %d)", dir, MaxScoreSequences, len(seqs)))
	}
	return seqs, nil
}

// firstFile returns the first of paths that is a regular file, or "".
func firstFile(paths ...string) string {
	for _, p := range paths {
		if st, err := os.Stat(p); err == nil && st.Mode().IsRegular() {
			return p
		}
	}
	return ""
}

// seqLength reads seqLength from a MOTChallenge seqinfo.ini.
func seqLength(path string) (int, error) {
	f, err := os.Open(path)
	if err != nil {
		return 0, err
	}
	defer f.Close()
	sc := bufio.NewScanner(f)
	for line := 1; sc.Scan(); line++ {
		k, v, ok := strings.Cut(sc.Text(), "=")
		if !ok || !strings.EqualFold(strings.TrimSpace(k), "seqLength") {
			continue
		}
		n, err := strconv.Atoi(strings.TrimSpace(v))
		if err != nil || n < 1 || n > eval.MaxFrames {
			return 0, fmt.Errorf("%s:%d: seqLength: want a whole number from 1 to %d (found %q)", path, line, eval.MaxFrames, strings.TrimSpace(v))
		}
		return n, nil
	}
	if err := sc.Err(); err != nil {
		return 0, fmt.Errorf("read %s: %w", path, err)
	}
	return 0, fmt.Errorf("%s: no seqLength line", path)
}

// locateEvalError puts the file and line of the row an evaluation refused
// in front of the problem, for a person to find it: "tracks.txt:12: frame
// 3, id 7: rule (found value)".
func locateEvalError(err error, s scoreSeq) error {
	var ie *eval.InputError
	if !errors.As(err, &ie) {
		return err
	}
	path := s.tracks
	if ie.Input == "truth" {
		path = s.truth
	}
	// An id twice in one frame is reported at its second row.
	nth := 1
	if strings.Contains(ie.Msg, "at most once per frame") {
		nth = 2
	}
	if line := findRow(path, ie.Frame, ie.ID, nth); line > 0 {
		return fmt.Errorf("%s:%d: frame %d, id %d: %s", path, line, ie.Frame, ie.ID, ie.Msg)
	}
	return fmt.Errorf("%s: frame %d, id %d: %s", path, ie.Frame, ie.ID, ie.Msg)
}

// findRow returns the line number of the nth row of frame and id in a
// MOTChallenge file (gzip read directly), or 0.
func findRow(path string, frame int, id int64, nth int) int {
	f, err := os.Open(path)
	if err != nil {
		return 0
	}
	defer f.Close()
	br := bufio.NewReader(f)
	var r io.Reader = br
	if magic, _ := br.Peek(2); bytes.Equal(magic, []byte{0x1f, 0x8b}) {
		zr, err := gzip.NewReader(br)
		if err != nil {
			return 0
		}
		defer zr.Close()
		r = zr
	}
	sc := bufio.NewScanner(r)
	sc.Buffer(make([]byte, 0, 64*1024), motfmt.MaxLineBytes+1)
	for line := 1; sc.Scan(); line++ {
		text := sc.Text()
		fields := strings.Fields(text)
		if strings.Contains(text, ",") {
			fields = strings.Split(text, ",")
		}
		if len(fields) < 2 {
			continue
		}
		fr, err1 := strconv.ParseFloat(strings.TrimSpace(fields[0]), 64)
		i, err2 := strconv.ParseFloat(strings.TrimSpace(fields[1]), 64)
		if err1 == nil && err2 == nil && fr == float64(frame) && i == float64(id) {
			if nth--; nth == 0 {
				return line
			}
		}
	}
	return 0
}

// scoreTable prints one row per sequence and the combined row.
func scoreTable(seqs []scoreSeq, all []eval.Metrics, combined eval.Metrics) string {
	var b strings.Builder
	w := len(eval.CombinedName)
	for _, s := range seqs {
		w = max(w, len(s.name))
	}
	fmt.Fprintf(&b, "%-*s  %7s %7s %7s %7s %7s %7s %7s %6s %6s\n", w, "sequence", "MOTA %", "MOTP %", "IDF1 %", "HOTA %", "DetA %", "AssA %", "FP", "FN", "IDsw")
	row := func(name string, m eval.Metrics) {
		fmt.Fprintf(&b, "%-*s  %7.2f %7.2f %7.2f %7.2f %7.2f %7.2f %7d %6d %6d\n", w, name,
			100*m.MOTA, 100*m.MOTP, 100*m.IDF1, 100*m.HOTA, 100*m.DetA, 100*m.AssA, m.FP, m.FN, m.IDSW)
	}
	for i, m := range all {
		row(seqs[i].name, m)
	}
	row(eval.CombinedName, combined)
	return b.String()
}

// inputOrStop classifies a read or evaluation error: stopped by a signal
// (exit 3) or a bad input file (exit 2).
func inputOrStop(err error) error {
	if errors.Is(err, context.Canceled) || errors.Is(err, context.DeadlineExceeded) {
		return fmt.Errorf("%w: %v", errIncomplete, err)
	}
	return badFile(err)
}
