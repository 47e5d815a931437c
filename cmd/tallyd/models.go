package main

import (
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"image/color"
	"io"
	"log/slog"
	"math"
	"os"
	"path/filepath"
	"runtime"
	"slices"
	"strings"
	"syscall"
	"time"

	"gocv.io/x/gocv"
	"gonum.org/v1/plot"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"
	"gopkg.in/yaml.v3"

	"tallyd/capture"
	"tallyd/capture/scene"
	"tallyd/detect"
	"tallyd/detect/apeval"
	"tallyd/detect/onnx"
	"tallyd/events"
	"tallyd/internal/config"
	"tallyd/internal/motfmt"
	"tallyd/internal/pipeline"
)

// Limits of `tallyd models`.
const (
	maxCandidates      = 20
	maxCandidatesBytes = 1 << 20
	// busyShare is the most of the CPU a recommended candidate may need at
	// the target rate: headroom for decoding peaks and the rest of the box
	// (our choice, not a standard).
	busyShare = 0.8
)

// candidate is one model setting to compare: the site's detector.onnx block
// with the candidate's keys over it.
type candidate struct {
	Name string
	Line int
	ONNX config.ONNX
}

// candidateResult is what was measured for one candidate.
type candidateResult struct {
	Name, Engine, Layout string
	Width, Height        int
	Frames               int     // frames in the accuracy pass
	InferMs, InferCPUMs  float64 // per frame, accuracy pass
	PrepPostMs           float64 // letterbox + decode + NMS per frame
	E2EFPS, E2ECPUMs     float64 // replay of the source through the whole pipeline
	AP50, AP5095         float64 // NaN without truth boxes
	CountErr             map[string]string
	CountErrSum          float64 // sum |counted - truth| over every rule's counts; NaN without truth
	Err                  string  // why the candidate could not run
}

func cmdModels(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	fs := newFlags("models", "models -c FILE --candidates FILE [--source ID] [--truth gt.txt] [--frames N] [--classes person] [--cameras N] [--fps F] [--plot OUT.png]", stdout)
	cfgPath := fs.String("c", "", "site file (YAML): sources, rules, tracker, and the detector.onnx settings the candidates start from")
	candPath := fs.String("candidates", "", "YAML file: candidates: [{name: ..., onnx: {detector.onnx keys}}, ...]; paths relative to this file")
	sourceID := fs.String("source", "", "the recorded or generated source to measure on (default: the first)")
	truthPath := fs.String("truth", "", "truth boxes of a recorded source, MOTChallenge text format (generated scenes bring their own)")
	countsPath := fs.String("counts", "", "true totals per rule of a recorded source, JSON as `tallyd synth --truth` writes")
	frames := fs.Int("frames", 0, "frames of the accuracy pass (0: the whole source)")
	classes := fs.String("classes", "person", "comma-separated classes AP is measured for")
	cameras := fs.Int("cameras", 0, "cameras the recommendation is for (0: the sources of the site file)")
	fps := fs.Float64("fps", 0, "target frames per second per camera (0: the source's fps setting, else its own rate)")
	plotPath := fs.String("plot", "", "write a PNG plot of AP against frames per second here")
	if err := parseFlags(fs, args); err != nil {
		return err
	}
	if *candPath == "" {
		return usageErr("--candidates FILE is required")
	}
	if *frames < 0 || *cameras < 0 || *fps < 0 || math.IsInf(*fps, 0) || math.IsNaN(*fps) {
		return usageErr("--frames, --cameras and --fps must not be negative")
	}
	cfg, err := loadConfig(*cfgPath)
	if err != nil {
		return err
	}
	cands, err := readCandidates(*candPath, cfg)
	if err != nil {
		return err
	}
	src, err := pickSource(cfg, *sourceID)
	if err != nil {
		return err
	}
	if src.Scene != nil && *truthPath != "" {
		return usageErr("--truth: source %s is a generated scene, which brings its own truth", src.ID)
	}
	if src.Scene != nil && *countsPath != "" {
		return usageErr("--counts: source %s is a generated scene, which brings its own truth", src.ID)
	}
	var truth map[int][]motfmt.Row
	if *truthPath != "" {
		if truth, err = readTruthBoxes(*truthPath); err != nil {
			return err
		}
	}
	var counts map[string]events.Totals
	if *countsPath != "" {
		if counts, err = readCounts(*countsPath); err != nil {
			return err
		}
	}
	want := strings.Split(*classes, ",")
	log := newLogger(cfg, stderr)
	var results []candidateResult
	for _, c := range cands {
		if err := ctx.Err(); err != nil {
			return fmt.Errorf("%w: interrupted after %d of %d candidates", errIncomplete, len(results), len(cands))
		}
		log.Info("measuring candidate", "name", c.Name)
		r, err := measureCandidate(ctx, cfg, src, c, truth, counts, want, *frames, log)
		if err != nil {
			var se *onnx.SetupError
			if !errors.As(err, &se) {
				return err
			}
			r = candidateResult{Name: c.Name, Err: fmt.Sprintf("%s:%d: candidates[%s].onnx.%s: %s", *candPath, c.Line, c.Name, se.Key, se.Msg)}
			log.Warn("candidate cannot run", "name", c.Name, "err", r.Err)
		}
		results = append(results, r)
	}
	nCams := *cameras
	if nCams == 0 {
		nCams = len(cfg.Sources)
	}
	rate := *fps
	if rate == 0 {
		rate = sourceRate(cfg, src)
	}
	printModels(stdout, results)
	fmt.Fprintln(stdout)
	fmt.Fprintln(stdout, recommend(results, nCams, rate, runtime.NumCPU()))
	if *plotPath != "" {
		if !slices.ContainsFunc(results, func(r candidateResult) bool { return r.Err == "" && !math.IsNaN(r.AP50) }) {
			fmt.Fprintln(stdout, "no plot: no candidate has AP (no truth boxes, or none ran)")
			return nil
		}
		if err := plotModels(*plotPath, results); err != nil {
			return err
		}
		fmt.Fprintf(stdout, "plot written to %s\n", *plotPath)
	}
	return nil
}

// readCandidates reads the candidates file: each candidate's onnx keys are
// decoded strictly over the site's detector.onnx block.
func readCandidates(path string, cfg *config.Config) ([]candidate, error) {
	st, err := os.Stat(path)
	if err != nil {
		return nil, badFile(fmt.Errorf("--candidates: cannot open %q: %v", path, unwrapPath(err)))
	}
	if st.Size() > maxCandidatesBytes {
		return nil, badFile(fmt.Errorf("--candidates: %q is %d bytes, more than the limit of %d", path, st.Size(), maxCandidatesBytes))
	}
	data, err := os.ReadFile(path)
	if err != nil {
		return nil, badFile(fmt.Errorf("--candidates: %v", err))
	}
	var doc struct {
		Candidates []yaml.Node `yaml:"candidates"`
	}
	dec := yaml.NewDecoder(bytes.NewReader(data))
	dec.KnownFields(true)
	if err := dec.Decode(&doc); err != nil {
		return nil, badFile(fmt.Errorf("%s: %v", path, err))
	}
	if len(doc.Candidates) == 0 || len(doc.Candidates) > maxCandidates {
		return nil, badFile(fmt.Errorf("%s: candidates: want 1 to %d candidates (found %d)", path, maxCandidates, len(doc.Candidates)))
	}
	base := cfg.Detector.ONNX
	for _, p := range []*string{&base.Model, &base.Names, &base.Library, &base.Cfg} {
		if *p != "" {
			*p = absPath(cfg.Resolve(*p))
		}
	}
	dir := filepath.Dir(path)
	var out []candidate
	seen := map[string]bool{}
	for i, n := range doc.Candidates {
		at := func(line int, key, format string, args ...any) error {
			return badFile(fmt.Errorf("%s:%d: candidates[%d]%s: %s", path, line, i, key, fmt.Sprintf(format, args...)))
		}
		if n.Kind != yaml.MappingNode {
			return nil, at(n.Line, "", "want a mapping with name and onnx")
		}
		c := candidate{Line: n.Line, ONNX: base}
		c.ONNX.Classes = slices.Clone(base.Classes)
		var block *yaml.Node
		for k := 0; k+1 < len(n.Content); k += 2 {
			key, val := n.Content[k], n.Content[k+1]
			switch key.Value {
			case "name":
				c.Name = val.Value
			case "onnx":
				block = val
			default:
				return nil, at(key.Line, "."+key.Value, "unknown key (known keys: name, onnx)")
			}
		}
		if c.Name == "" || len(c.Name) > 64 {
			return nil, at(n.Line, ".name", "want a name of 1 to 64 characters")
		}
		if seen[c.Name] {
			return nil, at(n.Line, ".name", "duplicate name %q", c.Name)
		}
		seen[c.Name] = true
		if block == nil || block.Kind != yaml.MappingNode {
			return nil, at(n.Line, ".onnx", "want a mapping of detector.onnx keys")
		}
		raw, err := yaml.Marshal(block)
		if err != nil {
			return nil, at(block.Line, ".onnx", "%v", err)
		}
		d := yaml.NewDecoder(bytes.NewReader(raw))
		d.KnownFields(true)
		if err := d.Decode(&c.ONNX); err != nil {
			return nil, at(block.Line, ".onnx", "%v", err)
		}
		for k := 0; k+1 < len(block.Content); k += 2 {
			var p *string
			switch block.Content[k].Value {
			case "model":
				p = &c.ONNX.Model
			case "names":
				p = &c.ONNX.Names
			case "library":
				p = &c.ONNX.Library
			case "cfg":
				p = &c.ONNX.Cfg
			}
			if p != nil && *p != "" && !filepath.IsAbs(*p) {
				*p = absPath(filepath.Join(dir, *p))
			}
		}
		if c.ONNX.Model == "" {
			return nil, at(block.Line, ".onnx.model", "is required (the site file has no detector.onnx.model either)")
		}
		out = append(out, c)
	}
	return out, nil
}

func absPath(p string) string {
	if a, err := filepath.Abs(p); err == nil {
		return a
	}
	return p
}

func unwrapPath(err error) error {
	var pe *os.PathError
	if errors.As(err, &pe) {
		return pe.Err
	}
	return err
}

// pickSource finds the source to measure on: recorded files and generated
// scenes only (a live camera cannot be replayed for each candidate).
func pickSource(cfg *config.Config, id string) (config.Source, error) {
	for _, s := range cfg.Sources {
		if id != "" && s.ID != id {
			continue
		}
		if s.File == "" && s.Scene == nil {
			return s, usageErr("--source: %s is a live or folder source; models measures on a recorded file or a generated scene", s.ID)
		}
		return s, nil
	}
	return config.Source{}, usageErr("--source: no source %q in %s", id, cfg.File)
}

// readTruthBoxes reads MOTChallenge truth: rows to consider (flag 1) of class
// pedestrian (MOT16/17) or of any class (MOT15 files without classes).
func readTruthBoxes(path string) (map[int][]motfmt.Row, error) {
	rows, err := motfmt.ReadFile(path)
	if err != nil {
		return nil, badFile(fmt.Errorf("--truth: %w", err))
	}
	m := map[int][]motfmt.Row{}
	for _, r := range rows {
		if r.Conf == 0 || (r.Class > 1) {
			continue
		}
		m[r.Frame-1] = append(m[r.Frame-1], r)
	}
	return m, nil
}

// sourceRate is the target rate of a source: its fps setting, else its own.
func sourceRate(cfg *config.Config, s config.Source) float64 {
	if s.FPS > 0 {
		return s.FPS
	}
	rd, info, _, err := openMeasured(cfg, s)
	if err != nil {
		return 0
	}
	_ = rd.Close()
	return info.FPS
}

// readCounts reads true totals per rule (the JSON of tallyd synth --truth).
func readCounts(path string) (map[string]events.Totals, error) {
	data, err := os.ReadFile(path)
	if err != nil {
		return nil, badFile(fmt.Errorf("--counts: cannot open %q: %v", path, unwrapPath(err)))
	}
	var m map[string]events.Totals
	if err := json.Unmarshal(data, &m); err != nil {
		return nil, badFile(fmt.Errorf("--counts: %s: %v (want an object of rule name to totals, as tallyd synth --truth writes)", path, err))
	}
	return m, nil
}

// openMeasured opens the source for the accuracy pass, with the truth of
// each frame for generated scenes.
func openMeasured(cfg *config.Config, src config.Source) (capture.Reader, capture.Info, *scene.Scene, error) {
	if src.Scene != nil {
		sc, err := scene.New(pipeline.SceneConfig(*src.Scene))
		if err != nil {
			return nil, capture.Info{}, nil, err
		}
		g := capture.NewGenerated(sc)
		return g, g.Info(), sc, nil
	}
	rd, info, err := capture.Open(capture.SourceSpec{ID: src.ID, File: cfg.Resolve(src.File)}, nil)
	return rd, info, nil, err
}

// measureCandidate runs one candidate: the accuracy pass (every frame
// detected, AP against the truth, the detector's own timings), then a
// replay through the whole pipeline (e2e frames/s, CPU per frame, counts).
func measureCandidate(ctx context.Context, cfg *config.Config, src config.Source, c candidate,
	truth map[int][]motfmt.Row, counts map[string]events.Totals, classes []string, frames int, log *slog.Logger) (candidateResult, error) {
	cc := *cfg
	cc.Detector.Kind = config.DetectorONNX
	cc.Detector.ONNX = c.ONNX
	cc.Sources = []config.Source{src}
	cc.Rules = nil
	for _, r := range cfg.Rules {
		if r.Source == src.ID {
			cc.Rules = append(cc.Rules, r)
		}
	}
	det, err := onnx.New(pipeline.ONNXConfig(&cc))
	if err != nil {
		return candidateResult{}, err
	}
	defer det.Close()
	in := det.Info()
	res := candidateResult{Name: c.Name, Engine: in.Engine, Layout: string(in.Layout), Width: in.Width, Height: in.Height,
		AP50: math.NaN(), AP5095: math.NaN(), CountErrSum: math.NaN()}

	rd, _, sc, err := openMeasured(cfg, src)
	if err != nil {
		return res, err
	}
	var dets []apeval.Detection
	var truthBoxes []apeval.Truth
	mat := gocv.NewMat()
	defer mat.Close()
	n := 0
	for frames == 0 || n < frames {
		if err := ctx.Err(); err != nil {
			_ = rd.Close()
			return res, err
		}
		pts, err := rd.Read(&mat)
		if errors.Is(err, capture.ErrEndOfStream) {
			break
		}
		if err != nil {
			_ = rd.Close()
			return res, err
		}
		f := &capture.Frame{Source: src.ID, Seq: int64(n), PTS: pts, Captured: time.Now(), Mat: mat}
		out, err := det.Detect(ctx, []*capture.Frame{f})
		if err != nil {
			_ = rd.Close()
			return res, err
		}
		for _, d := range out[0] {
			if slices.Contains(classes, d.Class) {
				dets = append(dets, apeval.Detection{Image: n, Class: d.Class, Box: d.Box, Score: d.Score})
			}
		}
		switch {
		case sc != nil:
			for _, o := range sc.Truth(n) {
				if slices.Contains(classes, o.Class) {
					truthBoxes = append(truthBoxes, apeval.Truth{Image: n, Class: o.Class, Box: o.Box})
				}
			}
		case truth != nil:
			for _, r := range truth[n] {
				truthBoxes = append(truthBoxes, apeval.Truth{Image: n, Class: classes[0], Box: detect.BoxXYWH(r.X, r.Y, r.W, r.H)})
			}
		}
		n++
	}
	_ = rd.Close()
	res.Frames = n
	st := det.Stats()
	if st.Frames > 0 {
		per := func(d time.Duration) float64 { return float64(d) / float64(time.Millisecond) / float64(st.Frames) }
		res.InferMs, res.InferCPUMs = per(st.Infer.Wall), per(st.Infer.CPU)
		res.PrepPostMs = per(st.Prepare.Wall + st.Post.Wall)
	}
	if sc != nil || truth != nil {
		ap := apeval.Evaluate(dets, truthBoxes, 0)
		res.AP50, res.AP5095 = ap.AP50, ap.AP5095
	}

	// The replay owns the detector from here and closes it.
	p, err := pipeline.Build(&cc, pipeline.Options{Pace: capture.PaceMax, Log: log, Offline: true, Detector: det})
	if err != nil {
		return res, err
	}
	defer p.Close()
	cpu0, t0 := processCPUTime(), time.Now()
	if err := p.Run(ctx); err != nil {
		return res, err
	}
	elapsed, cpu := time.Since(t0), processCPUTime()-cpu0
	s := p.Summary()
	if s.FramesProcessed > 0 {
		res.E2EFPS = float64(s.FramesProcessed) / elapsed.Seconds()
		res.E2ECPUMs = float64(cpu) / float64(time.Millisecond) / float64(s.FramesProcessed)
	}
	if counts == nil {
		counts = s.Truth
	}
	res.CountErr = map[string]string{}
	if counts != nil {
		res.CountErrSum = 0
	}
	for _, name := range pipeline.RuleNames(s.Rules) {
		var parts []string
		want, ok := counts[name]
		wantM := metrics(want)
		for i, m := range metrics(s.Rules[name]) {
			if m.name == "dwell" || m.name == "max_occupancy" {
				continue
			}
			if !ok || len(wantM) != len(metrics(s.Rules[name])) {
				parts = append(parts, fmt.Sprintf("%s %d", m.name, m.value))
				continue
			}
			parts = append(parts, fmt.Sprintf("%s %d/%d", m.name, m.value, wantM[i].value))
			res.CountErrSum += math.Abs(float64(m.value - wantM[i].value))
		}
		res.CountErr[name] = strings.Join(parts, " ")
	}
	return res, nil
}

// processCPUTime is the CPU time of the whole process so far.
func processCPUTime() time.Duration {
	var ru syscall.Rusage
	if err := syscall.Getrusage(syscall.RUSAGE_SELF, &ru); err != nil {
		return 0
	}
	return time.Duration(ru.Utime.Nano() + ru.Stime.Nano())
}

func fmtAP(v float64) string {
	if math.IsNaN(v) {
		return "n/a"
	}
	return fmt.Sprintf("%.3f", v)
}

// printModels writes the comparison table.
func printModels(w io.Writer, rs []candidateResult) {
	fmt.Fprintf(w, "%-22s %-22s %-9s %7s %8s %8s %8s %8s %6s %7s  %s\n",
		"candidate", "engine", "input", "infer", "inferCPU", "prep+nms", "e2e", "e2eCPU", "AP50", "AP50:95", "counts (counted/true)")
	fmt.Fprintf(w, "%-22s %-22s %-9s %7s %8s %8s %8s %8s %6s %7s\n", "", "", "", "ms", "ms/frame", "ms/frame", "frames/s", "ms/frame", "", "")
	for _, r := range rs {
		if r.Err != "" {
			fmt.Fprintf(w, "%-22s not run: %s\n", r.Name, r.Err)
			continue
		}
		var counts []string
		for _, k := range sortedKeys(r.CountErr) {
			counts = append(counts, k+": "+r.CountErr[k])
		}
		cs := strings.Join(counts, "; ")
		if math.IsNaN(r.CountErrSum) {
			cs += " (no truth)"
		}
		fmt.Fprintf(w, "%-22s %-22s %-9s %7.1f %8.1f %8.1f %8.1f %8.1f %6s %7s  %s\n", r.Name, r.Engine,
			fmt.Sprintf("%dx%d", r.Width, r.Height), r.InferMs, r.InferCPUMs, r.PrepPostMs, r.E2EFPS, r.E2ECPUMs,
			fmtAP(r.AP50), fmtAP(r.AP5095), cs)
	}
}

func sortedKeys(m map[string]string) []string {
	ks := make([]string, 0, len(m))
	for k := range m {
		ks = append(ks, k)
	}
	slices.Sort(ks)
	return ks
}

// recommend picks the candidate for cams cameras at rate frames/s each on
// cores cores: among those whose measured CPU per frame fits in busyShare
// of the machine, the most accurate (AP50:95, then count error); without
// truth, the one with the most headroom.
func recommend(rs []candidateResult, cams int, rate float64, cores int) string {
	need := float64(cams) * rate
	var fit []candidateResult
	for _, r := range rs {
		if r.Err == "" && r.E2EFPS > 0 && (need == 0 || r.E2ECPUMs*need <= busyShare*1000*float64(cores)) {
			fit = append(fit, r)
		}
	}
	head := fmt.Sprintf("target: %d camera(s) x %.4g frames/s = %.4g frames/s on %d cores (at most %.0f%% busy)", cams, rate, need, cores, 100*busyShare)
	if need == 0 {
		head = fmt.Sprintf("target: %d camera(s), source rate unknown (set --fps)", cams)
	}
	if len(fit) == 0 {
		var best *candidateResult
		for i := range rs {
			if rs[i].Err == "" && rs[i].E2ECPUMs > 0 && (best == nil || rs[i].E2ECPUMs < best.E2ECPUMs) {
				best = &rs[i]
			}
		}
		if best == nil {
			return head + "\nrecommended: none (no candidate ran)"
		}
		max := busyShare * 1000 * float64(cores) / best.E2ECPUMs
		return fmt.Sprintf("%s\nrecommended: none fits; the cheapest, %s (%.1f CPU ms/frame), holds about %.0f frames/s: %d camera(s) at %.4g frames/s",
			head, best.Name, best.E2ECPUMs, max, int(max/math.Max(rate, 1e-9)), rate)
	}
	hasAP := !math.IsNaN(fit[0].AP5095)
	hasCounts := !math.IsNaN(fit[0].CountErrSum)
	slices.SortStableFunc(fit, func(a, b candidateResult) int {
		switch {
		case hasAP && a.AP5095 != b.AP5095:
			return cmpDesc(a.AP5095, b.AP5095)
		case hasCounts && a.CountErrSum != b.CountErrSum:
			return cmpDesc(b.CountErrSum, a.CountErrSum)
		}
		return cmpDesc(1/a.E2ECPUMs, 1/b.E2ECPUMs)
	})
	r := fit[0]
	why := "highest AP50:95 among those that fit"
	switch {
	case !hasAP && hasCounts:
		why = "smallest count error among those that fit (no truth boxes for AP)"
	case !hasAP:
		why = "no truth: accuracy unknown, chosen for the most CPU headroom"
	}
	return fmt.Sprintf("%s\nrecommended: %s (%s; %.1f CPU ms/frame = %.0f%% of the machine at the target)",
		head, r.Name, why, r.E2ECPUMs, 100*r.E2ECPUMs*need/(1000*float64(cores)))
}

func cmpDesc(a, b float64) int {
	switch {
	case a > b:
		return -1
	case a < b:
		return 1
	}
	return 0
}

// plotModels draws AP50 and AP50:95 against e2e frames per second, one
// labelled point per candidate.
func plotModels(path string, rs []candidateResult) error {
	p := plot.New()
	p.Title.Text = "Detection accuracy against speed"
	p.X.Label.Text = "frames/s through the whole pipeline"
	p.Y.Label.Text = "AP (COCO, 101-point)"
	var ap50, ap95 plotter.XYs
	var labels []string
	for _, r := range rs {
		if r.Err != "" || math.IsNaN(r.AP50) {
			continue
		}
		ap50 = append(ap50, plotter.XY{X: r.E2EFPS, Y: r.AP50})
		ap95 = append(ap95, plotter.XY{X: r.E2EFPS, Y: r.AP5095})
		labels = append(labels, r.Name)
	}
	if len(ap50) == 0 {
		return errors.New("--plot: no candidate has AP (no truth boxes, or none ran)")
	}
	for i, s := range []struct {
		name string
		xys  plotter.XYs
	}{{"AP50", ap50}, {"AP50:95", ap95}} {
		sc, err := plotter.NewScatter(s.xys)
		if err != nil {
			return fmt.Errorf("--plot: %w", err)
		}
		sc.GlyphStyle.Radius = vg.Points(4)
		if i == 0 {
			sc.GlyphStyle.Shape = draw.CircleGlyph{}
			sc.GlyphStyle.Color = color.RGBA{R: 0x1f, G: 0x77, B: 0xb4, A: 0xff}
		} else {
			sc.GlyphStyle.Shape = draw.TriangleGlyph{}
			sc.GlyphStyle.Color = color.RGBA{R: 0xd6, G: 0x27, B: 0x28, A: 0xff}
		}
		p.Add(sc)
		p.Legend.Add(s.name, sc)
		if i == 0 {
			lb, err := plotter.NewLabels(plotter.XYLabels{XYs: s.xys, Labels: labels})
			if err != nil {
				return fmt.Errorf("--plot: %w", err)
			}
			p.Add(lb)
		}
	}
	p.Legend.Top = true
	p.Y.Min, p.Y.Max = 0, 1
	if err := p.Save(7*vg.Inch, 4.5*vg.Inch, path); err != nil {
		return fmt.Errorf("--plot: %w", err)
	}
	return nil
}
