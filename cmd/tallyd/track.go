package main

import (
	"context"
	"flag"
	"fmt"
	"io"
	"os"
	"sort"
	"strconv"
	"strings"
	"time"

	"tallyd/detect"
	"tallyd/internal/motfmt"
	"tallyd/track"
)

// trackerFlags are the tracker settings a command line can change; the rest
// keep the tracker's defaults.
type trackerFlags struct {
	kind                                  string
	high, low, newTrack, matchIoU, lowIoU float64
	birth, lostFrames                     int
	lostTTL                               time.Duration
	scores                                string
	warmup                                int
	highQ, newQ                           float64
	minIoU                                float64
	maxMisses                             int
	perClass                              bool
}

func (tf *trackerFlags) register(fs *flag.FlagSet) {
	d := track.DefaultSettings()
	b, i := d.ByteTrack, d.Baseline
	fs.StringVar(&tf.kind, "tracker", string(d.Kind), "bytetrack or baseline (the first-version IoU tracker)")
	fs.Float64Var(&tf.high, "high-score", b.HighScore, "bytetrack: detections at or above this are associated first")
	fs.Float64Var(&tf.low, "low-score", b.LowScore, "bytetrack: detections below this are ignored")
	fs.Float64Var(&tf.newTrack, "new-track-score", b.NewTrackScore, "bytetrack: least score to start a track")
	fs.Float64Var(&tf.matchIoU, "match-iou", b.MatchIoU, "bytetrack: least IoU with the predicted box (first stage)")
	fs.Float64Var(&tf.lowIoU, "low-match-iou", b.LowMatchIoU, "bytetrack: least IoU for low-score detections (second stage)")
	fs.IntVar(&tf.birth, "birth-hits", b.BirthHits, fmt.Sprintf("matched frames in a row before a track is confirmed (baseline default %d)", i.BirthHits))
	fs.DurationVar(&tf.lostTTL, "lost-ttl", b.LostTTL, "bytetrack: how long a lost track is kept for re-finding")
	fs.IntVar(&tf.lostFrames, "lost-frames", b.LostFrames, "bytetrack: at most this many frames, too (whichever is stricter at the frame rate)")
	fs.StringVar(&tf.scores, "scores", string(b.Scores.Mode), "bytetrack: score thresholds: fixed (--high-score, --new-track-score), warmup (quantiles of the first detections' scores), auto (warmup, or fixed when either threshold is given)")
	fs.IntVar(&tf.warmup, "warmup-detections", b.Scores.WarmupDetections, "bytetrack, --scores warmup: detections the thresholds are taken from")
	fs.Float64Var(&tf.highQ, "high-quantile", b.Scores.HighQuantile, "bytetrack, --scores warmup: quantile of the scores that becomes the high threshold")
	fs.Float64Var(&tf.newQ, "new-quantile", b.Scores.NewQuantile, "bytetrack, --scores warmup: quantile that becomes the new-track threshold")
	fs.Float64Var(&tf.minIoU, "min-iou", i.MinIoU, "baseline: least IoU to link a detection")
	fs.IntVar(&tf.maxMisses, "max-misses", i.MaxMisses, "baseline: frames a track may miss before it ends")
	fs.BoolVar(&tf.perClass, "per-class", false, "only link detections of the same class")
}

// settings are the tracker defaults with the flags applied; set says which
// flags were given. A detections file comes from a detector whose score
// scale is unknown, so --scores auto calibrates over a warm-up unless a
// threshold is given.
func (tf *trackerFlags) settings(set map[string]bool) (track.Settings, error) {
	s := track.DefaultSettings()
	s.Kind = track.Kind(tf.kind)
	b := &s.ByteTrack
	b.HighScore, b.LowScore, b.NewTrackScore = tf.high, tf.low, tf.newTrack
	b.MatchIoU, b.LowMatchIoU, b.BirthHits, b.LostTTL, b.PerClass = tf.matchIoU, tf.lowIoU, tf.birth, tf.lostTTL, tf.perClass
	b.LostFrames = tf.lostFrames
	b.Scores = track.ScoreCalibration{Mode: track.ScoreMode(tf.scores), WarmupDetections: tf.warmup, HighQuantile: tf.highQ, NewQuantile: tf.newQ}
	b.Scores = b.Scores.ForDetector(set["high-score"] || set["new-track-score"])
	birthSet := set["birth-hits"]
	i := &s.Baseline
	i.MinIoU, i.MaxMisses, i.PerClass = tf.minIoU, tf.maxMisses, tf.perClass
	if birthSet {
		i.BirthHits = tf.birth
	}
	if err := s.Validate(); err != nil {
		return s, usageErr("tracker settings: %v", err)
	}
	return s, nil
}

func cmdTrack(ctx context.Context, args []string, stdout, _ io.Writer) error {
	fs := newFlags("track", "track --detections det.txt --out tracks.txt [--fps 30] [--frame-size WxH] [tracker flags]", stdout)
	detPath := fs.String("detections", "", "detections in the MOTChallenge text format (.gz read directly)")
	out := fs.String("out", "", "tracks file to write, MOTChallenge text format")
	fps := fs.Float64("fps", 30, "frame rate of the sequence (timestamps for the motion model)")
	class := fs.String("class", detect.DefaultClass, "class name given to the detections")
	frameSize := fs.String("frame-size", "", "frame width x height in pixels, e.g. 1920x1080: boxes are clipped inside it (default: the extent of the detections)")
	box := fs.String("box", string(track.DefaultOutputConfig().Box), "box written for a matched track: filtered (the motion model's) or detection")
	interp := fs.Bool("interpolate", false, "fill the frames a track was lost in, linearly, once it is found again (never for a track that does not come back)")
	births := fs.Bool("births", track.DefaultOutputConfig().Births, "once a track is confirmed, also write the frames it was matched in before (--births=false: from confirmation on)")
	var tf trackerFlags
	tf.register(fs.FlagSet)
	if err := parseFlags(fs, args); err != nil {
		return err
	}
	given := map[string]bool{}
	fs.Visit(func(f *flag.Flag) { given[f.Name] = true })
	if *detPath == "" || *out == "" {
		return usageErr("--detections and --out are required")
	}
	if !(*fps > 0 && *fps <= 1000) {
		return usageErr("--fps: must be within (0, 1000] (found %v)", *fps)
	}
	oc := track.OutputConfig{Box: track.BoxChoice(*box), Interpolate: *interp, Births: *births}
	if *frameSize != "" {
		w, h, ok := parseSize(*frameSize)
		if !ok {
			return usageErr("--frame-size: want WIDTHxHEIGHT in pixels, each 1 to 100000 (found %q)", *frameSize)
		}
		oc.Width, oc.Height = w, h
	}
	if err := oc.Validate(); err != nil {
		return usageErr("--%v", err)
	}
	set, err := tf.settings(given)
	if err != nil {
		return err
	}
	tr, err := set.New()
	if err != nil {
		return usageErr("tracker settings: %v", err)
	}
	rows, err := motfmt.ReadFileContext(ctx, *detPath)
	if err != nil {
		return inputOrStop(err)
	}
	if *frameSize == "" {
		for _, r := range rows {
			oc.Width, oc.Height = max(oc.Width, r.X+r.W), max(oc.Height, r.Y+r.H)
		}
	}
	fd := detect.NewFileDetector(rows, *class, 0)
	output := track.NewOutput(oc)
	var outRows []motfmt.Row
	for f := 1; f <= fd.Frames(); f++ {
		if f%1024 == 0 && ctx.Err() != nil {
			return fmt.Errorf("%w: stopped at frame %d of %d; %s not written", errIncomplete, f, fd.Frames(), *out)
		}
		ts := time.Duration(float64(f-1) / *fps * float64(time.Second))
		res := tr.Update(ts, fd.Frame(f))
		outRows = append(outRows, output.Rows(f, res)...)
	}
	if err := writeRows(*out, outRows); err != nil {
		return err
	}
	ids := map[int64]bool{}
	for _, r := range outRows {
		ids[r.ID] = true
	}
	fmt.Fprintf(stdout, "%d frames, %d detections in, %d track boxes out, %d tracks (%s) -> %s\n",
		fd.Frames(), len(rows), len(outRows), len(ids), set.Kind, *out)
	return nil
}

// parseSize reads "WxH" with whole or fractional pixels.
func parseSize(s string) (w, h float64, ok bool) {
	a, b, found := strings.Cut(strings.ToLower(s), "x")
	if !found {
		return 0, 0, false
	}
	w, err1 := strconv.ParseFloat(strings.TrimSpace(a), 64)
	h, err2 := strconv.ParseFloat(strings.TrimSpace(b), 64)
	ok = err1 == nil && err2 == nil && w >= 1 && w <= 100000 && h >= 1 && h <= 100000
	return w, h, ok
}

func writeRows(path string, rows []motfmt.Row) error {
	sort.SliceStable(rows, func(i, j int) bool { return rows[i].Frame < rows[j].Frame })
	f, err := os.Create(path)
	if err != nil {
		return fmt.Errorf("write %s: %w", path, err)
	}
	if err := motfmt.Write(f, rows); err != nil {
		f.Close()
		return fmt.Errorf("write %s: %w", path, err)
	}
	return f.Close()
}
