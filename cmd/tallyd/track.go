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
	"tallyd/internal/config"
	"tallyd/internal/motfmt"
	"tallyd/track"
)

// trackerFlags are the tracker settings a command line can change; the rest
// keep their defaults.
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
	d := track.DefaultByteTrackConfig()
	fs.StringVar(&tf.kind, "tracker", "bytetrack", "bytetrack or baseline (the first-version IoU tracker)")
	fs.Float64Var(&tf.high, "high-score", d.HighScore, "bytetrack: detections at or above this are associated first")
	fs.Float64Var(&tf.low, "low-score", d.LowScore, "bytetrack: detections below this are ignored")
	fs.Float64Var(&tf.newTrack, "new-track-score", d.NewTrackScore, "bytetrack: least score to start a track")
	fs.Float64Var(&tf.matchIoU, "match-iou", d.MatchIoU, "bytetrack: least IoU with the predicted box (first stage)")
	fs.Float64Var(&tf.lowIoU, "low-match-iou", d.LowMatchIoU, "bytetrack: least IoU for low-score detections (second stage)")
	fs.IntVar(&tf.birth, "birth-hits", d.BirthHits, "matched frames in a row before a track is confirmed")
	fs.DurationVar(&tf.lostTTL, "lost-ttl", d.LostTTL, "bytetrack: how long a lost track is kept for re-finding")
	fs.DurationVar(&tf.lostOut, "lost-output", track.DefaultLostOutput, "write lost tracks at their predicted box this long after their last detection")
	fs.Float64Var(&tf.minIoU, "min-iou", track.DefaultMinIoU, "baseline: least IoU to link a detection")
	fs.IntVar(&tf.maxMisses, "max-misses", track.DefaultMaxMisses, "baseline: frames a track may miss before it ends")
	fs.BoolVar(&tf.perClass, "per-class", false, "only link detections of the same class")
}

type frameTracker interface {
	Update(ts time.Duration, dets []detect.Detection) track.Result
}

func (tf *trackerFlags) build(birthSet bool) (frameTracker, error) {
	switch tf.kind {
	case "bytetrack":
		c := track.DefaultByteTrackConfig()
		c.HighScore, c.LowScore, c.NewTrackScore = tf.high, tf.low, tf.newTrack
		c.MatchIoU, c.LowMatchIoU, c.BirthHits, c.LostTTL, c.PerClass = tf.matchIoU, tf.lowIoU, tf.birth, tf.lostTTL, tf.perClass
		if err := c.Validate(); err != nil {
			return nil, usageErr("tracker settings: %v", err)
		}
		return track.NewByteTrack(c), nil
	case "baseline":
		c := track.IoUConfig{MinIoU: tf.minIoU, BirthHits: track.DefaultBirthHits, MaxMisses: tf.maxMisses, PerClass: tf.perClass}
		if birthSet {
			c.BirthHits = tf.birth
		}
		if err := c.Validate(); err != nil {
			return nil, usageErr("tracker settings: %v", err)
		}
		return track.NewIoU(c), nil
	}
	return nil, usageErr("--tracker: want bytetrack or baseline (found %q)", tf.kind)
}

func cmdTrack(_ context.Context, args []string, stdout, _ io.Writer) error {
	fs := newFlags("track", "track --detections det.txt --out tracks.txt [--fps 30] [tracker flags]", stdout)
	detPath := fs.String("detections", "", "detections in the MOTChallenge text format (.gz read directly)")
	out := fs.String("out", "", "tracks file to write, MOTChallenge text format")
	fps := fs.Float64("fps", 30, "frame rate of the sequence (timestamps for the motion model)")
	class := fs.String("class", config.DefaultClass, "class name given to the detections")
	var tf trackerFlags
	tf.register(fs)
	if err := parseFlags(fs, args); err != nil {
		return err
	}
	birthSet := false
	fs.Visit(func(f *flag.Flag) { birthSet = birthSet || f.Name == "birth-hits" })
	if *detPath == "" || *out == "" {
		return usageErr("--detections and --out are required")
	}
	if !(*fps > 0) {
		return usageErr("--fps: must be positive (found %v)", *fps)
	}
	tr, err := tf.build(birthSet)
	if err != nil {
		return err
	}
	rows, err := motfmt.ReadFile(*detPath)
	if err != nil {
		return fmt.Errorf("%w: %v", config.ErrInvalid, err)
	}
	fd := detect.NewFileDetector(rows, *class, 0)
	var outRows []motfmt.Row
	for f := 1; f <= fd.Frames(); f++ {
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
		fd.Frames(), len(rows), len(outRows), len(ids), tf.kind, *out)
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
