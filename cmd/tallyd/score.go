package main

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"

	"tallyd/internal/motfmt"
	"tallyd/track/eval"
)

func cmdScore(ctx context.Context, args []string, stdout, _ io.Writer) error {
	fs := newFlags("score", "score --truth gt.txt --tracks tracks.txt [--iou 0.5] [--rules auto|mot15|mot17|mot20] [--json]", stdout)
	truthPath := fs.String("truth", "", "ground truth, MOTChallenge text format (.gz read directly)")
	tracksPath := fs.String("tracks", "", "tracker output, MOTChallenge text format (.gz read directly)")
	iou := fs.Float64("iou", eval.DefaultIoU, "least IoU for a tracker box to match a truth box")
	rules := fs.String("rules", string(eval.RulesAuto), "evaluation rules: mot15 (all rows), mot17/mot20 (pedestrians only, distractors removed), auto (from the truth's columns)")
	frames := fs.Int("frames", 0, "sequence length in frames (0: the last frame in the files)")
	asJSON := fs.Bool("json", false, "print the metrics as one JSON object")
	if err := parseFlags(fs, args); err != nil {
		return err
	}
	if *truthPath == "" || *tracksPath == "" {
		return usageErr("--truth and --tracks are required")
	}
	gt, err := motfmt.ReadFileContext(ctx, *truthPath)
	if err != nil {
		return inputOrStop(err)
	}
	tr, err := motfmt.ReadFileContext(ctx, *tracksPath)
	if err != nil {
		return inputOrStop(err)
	}
	m, err := eval.EvaluateContext(ctx, gt, tr, eval.Options{IoU: *iou, Rules: eval.Rules(*rules), Frames: *frames})
	if err != nil {
		return inputOrStop(err)
	}
	if *asJSON {
		b, err := json.Marshal(m)
		if err != nil {
			return err
		}
		fmt.Fprintln(stdout, string(b))
		return nil
	}
	fmt.Fprint(stdout, m.Table())
	return nil
}

// inputOrStop classifies a read or evaluation error: stopped by a signal
// (exit 3) or a bad input file (exit 2).
func inputOrStop(err error) error {
	if errors.Is(err, context.Canceled) || errors.Is(err, context.DeadlineExceeded) {
		return fmt.Errorf("%w: %v", errIncomplete, err)
	}
	return badFile(err)
}
