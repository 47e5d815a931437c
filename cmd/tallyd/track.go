package main

import (
	"context"
	"flag"
	"fmt"
	"io"
	"os"
	"sort"
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
	birth                                 int
	lostTTL, lostOut                      time.Duration
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
	fs.DurationVar(&tf.lostOut, "lost-output", track.DefaultLostOutput, "write lost tracks at their predicted box this long after their last detection")
	fs.Float64Var(&tf.minIoU, "min-iou", i.MinIoU, "baseline: least IoU to link a detection")
	fs.IntVar(&tf.maxMisses, "max-misses", i.MaxMisses, "baseline: frames a track may miss before it ends")
	fs.BoolVar(&tf.perClass, "per-class", false, "only link detections of the same class")
}

// settings are the tracker defaults with the flags applied; birthSet says
// whether --birth-hits was given (its default is bytetrack's).
func (tf *trackerFlags) settings(birthSet bool) (track.Settings, error) {
	s := track.DefaultSettings()
	s.Kind = track.Kind(tf.kind)
	b := &s.ByteTrack
	b.HighScore, b.LowScore, b.NewTrackScore = tf.high, tf.low, tf.newTrack
	b.MatchIoU, b.LowMatchIoU, b.BirthHits, b.LostTTL, b.PerClass = tf.matchIoU, tf.lowIoU, tf.birth, tf.lostTTL, tf.perClass
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
	fs := newFlags("track", "track --detections det.txt --out tracks.txt [--fps 30] [tracker flags]", stdout)
	detPath := fs.String("detections", "", "detections in the MOTChallenge text format (.gz read directly)")
	out := fs.String("out", "", "tracks file to write, MOTChallenge text format")
	fps := fs.Float64("fps", 30, "frame rate of the sequence (timestamps for the motion model)")
	class := fs.String("class", detect.DefaultClass, "class name given to the detections")
	var tf trackerFlags
	tf.register(fs.FlagSet)
	if err := parseFlags(fs, args); err != nil {
		return err
	}
	birthSet := false
	fs.Visit(func(f *flag.Flag) { birthSet = birthSet || f.Name == "birth-hits" })
	if *detPath == "" || *out == "" {
		return usageErr("--detections and --out are required")
	}
	if !(*fps > 0 && *fps <= 1000) {
		return usageErr("--fps: must be within (0, 1000] (found %v)", *fps)
	}
	set, err := tf.settings(birthSet)
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
	fd := detect.NewFileDetector(rows, *class, 0)
	var outRows []motfmt.Row
	for f := 1; f <= fd.Frames(); f++ {
		if f%1024 == 0 && ctx.Err() != nil {
			return fmt.Errorf("%w: stopped at frame %d of %d; %s not written", errIncomplete, f, fd.Frames(), *out)
		}
		ts := time.Duration(float64(f-1) / *fps * float64(time.Second))
		res := tr.Update(ts, fd.Frame(f))
		outRows = append(outRows, track.OutputRows(f, ts, res, tf.lostOut)...)
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
