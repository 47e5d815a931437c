package onnx

import (
	"context"
	"fmt"
	"math"
	"runtime"
	"sync"
	"time"

	"tallyd/capture"
	"tallyd/detect"
)

// Detector finds objects with a YOLO-family ONNX model on the CPU. It is safe
// for concurrent use: preparation runs on the callers' goroutines; inference
// runs on a pool of sessions (Config.Sessions), one batch per session at a
// time, so as many Detect calls as there are sessions infer at once.
type Detector struct {
	info  Info
	emits []string // class names the detector can report (the allow-list, else all)
	pre   *preproc
	dec   *decoder
	post  *post
	bufs  sync.Pool // *[]float32 of pre.size() values
	rec   recorder
	pool  *pool
	// inferOnCaller: the engine infers on the calling thread (ONNX Runtime
	// with one intra-op thread), so the thread's CPU time is the call's.
	inferOnCaller bool

	// eng is the first session's engine, for tests and benchmarks that run
	// the engine alone; nothing else may use it while the detector runs.
	eng engine
}

// Info describes a loaded model: what `tallyd check` prints.
type Info struct {
	Model   string
	Engine  string // engine and version, e.g. "ONNX Runtime 1.24.1"
	Inputs  []TensorInfo
	Outputs []TensorInfo
	// Width, Height are the input size used; Batch is the model's fixed batch
	// size, 0 when dynamic (frames of one Detect call then share one inference).
	Width, Height, Batch int
	Layout               Layout
	Classes              []string // class names in model order
	NamesFrom            string   // names file, "model metadata" or "class index"
	Opset, IRVersion     int64
}

// New loads the model, checks it against the configuration and starts the
// engine. Problems are *SetupError values naming the file and what was
// expected; they wrap ErrModel, ErrLibrary or ErrSetting.
func New(cfg Config) (*Detector, error) {
	d := &Detector{}
	if !(cfg.Scale > 0) || !(cfg.Std[0] > 0 && cfg.Std[1] > 0 && cfg.Std[2] > 0) {
		return nil, settingErr("scale", fmt.Sprintf("scale and std must be positive (found scale %v, std %v); start from Defaults()", cfg.Scale, cfg.Std))
	}
	mi, err := readModel(cfg)
	if err != nil {
		return nil, err
	}
	in, w, h, batch, err := checkInput(cfg, mi)
	if err != nil {
		return nil, err
	}
	if len(mi.Outputs) == 0 {
		return nil, modelErr("model", fmt.Sprintf("%q has no outputs", cfg.Model))
	}
	names, namesFrom, err := loadClassNames(cfg, mi)
	if err != nil {
		return nil, err
	}
	// Raw anchor heads (and Darknet models) are planned with their anchors;
	// every other layout from the output shapes alone.
	raw, err := rawHeadPlan(cfg, mi, w, h, len(names))
	if err != nil {
		return nil, err
	}
	var plan layoutPlan
	if raw != nil {
		plan = *raw
	} else if plan, err = ChooseLayout(mi.Outputs, w, h, cfg.Layout, len(names)); err != nil {
		return nil, modelErr("layout", fmt.Sprintf("%q: %v", cfg.Model, err))
	}
	classes := plan.Classes
	if plan.Layout == LayoutE2E {
		classes = len(names)
		if classes == 0 {
			classes = maxE2EClasses
		}
	}
	if len(names) == 0 {
		names, namesFrom = indexNames(classes), "class index"
	}
	thr, err := thresholds(cfg, names, namesFrom)
	if err != nil {
		return nil, err
	}
	d.info = Info{Model: cfg.Model, Inputs: mi.Inputs, Outputs: mi.Outputs, Width: w, Height: h, Batch: batch,
		Layout: plan.Layout, Classes: names, NamesFrom: namesFrom, Opset: mi.Opset, IRVersion: mi.IRVersion}
	d.emits = names
	if len(cfg.Classes) > 0 {
		d.emits = append([]string(nil), cfg.Classes...)
	}
	d.pre = newPreproc(cfg, w, h)
	d.dec = newDecoder(plan, w, h, classes, thr)
	d.post = &post{names: names, nms: cfg.NMS, iou: cfg.IoU, classAware: cfg.ClassAware,
		maxDets: cfg.MaxDetections, minBox: cfg.MinBox}
	var start func() (engine, error)
	switch cfg.Engine {
	case EngineOpenCV:
		start = func() (engine, error) {
			e, err := newCVEngine(cfg.Model, in, mi.Outputs, h, w)
			if err != nil {
				return nil, modelErr("model", fmt.Sprintf("OpenCV DNN cannot load %q: %v", cfg.Model, err))
			}
			return e, nil
		}
	case EngineORT, "":
		start = func() (engine, error) { return newORTEngine(cfg, in, mi.Outputs, h, w) }
	default:
		return nil, settingErr("engine", fmt.Sprintf("want ort or opencv (found %q)", cfg.Engine))
	}
	sessions, err := newSessions(cfg.SessionCount(), start)
	if err != nil {
		return nil, err
	}
	d.pool = newPool(sessions)
	d.inferOnCaller = cfg.Engine != EngineOpenCV && cfg.IntraThreads == 1
	d.eng = sessions[0].eng
	d.info.Engine = d.eng.version()
	return d, nil
}

// checkInput finds the image input and its size: [batch, 3, height, width].
func checkInput(cfg Config, mi ModelInfo) (in TensorInfo, w, h, batch int, err error) {
	if len(mi.Inputs) != 1 {
		return in, 0, 0, 0, modelErr("model", fmt.Sprintf("%q has %d inputs (%s), want one image input [batch,3,height,width]",
			cfg.Model, len(mi.Inputs), shapes(mi.Inputs)))
	}
	in = mi.Inputs[0]
	if len(in.Dims) != 4 {
		return in, 0, 0, 0, modelErr("model", fmt.Sprintf("%q: input %s has rank %d, want rank 4 [batch,3,height,width]",
			cfg.Model, in, len(in.Dims)))
	}
	if in.ElemType != elemFloat {
		return in, 0, 0, 0, modelErr("model", fmt.Sprintf("%q: input %s has element type %d, want float32 (1)", cfg.Model, in, in.ElemType))
	}
	if c := in.Dims[1]; c != 3 && c != -1 {
		return in, 0, 0, 0, modelErr("model", fmt.Sprintf("%q: input %s has %d channels, want 3 [batch,3,height,width]", cfg.Model, in, c))
	}
	mh, mw := in.Dims[2], in.Dims[3]
	switch {
	case mh < 0 || mw < 0:
		if cfg.Width <= 0 || cfg.Height <= 0 {
			return in, 0, 0, 0, settingErr("input", fmt.Sprintf("%q: input %s has a dynamic size; set input.width and input.height", cfg.Model, in))
		}
		if (mw >= 0 && int(mw) != cfg.Width) || (mh >= 0 && int(mh) != cfg.Height) {
			return in, 0, 0, 0, settingErr("input", fmt.Sprintf("%q: input %s does not allow %dx%d", cfg.Model, in, cfg.Width, cfg.Height))
		}
		w, h = cfg.Width, cfg.Height
	default:
		if (cfg.Width > 0 && cfg.Width != int(mw)) || (cfg.Height > 0 && cfg.Height != int(mh)) {
			return in, 0, 0, 0, settingErr("input", fmt.Sprintf("%q: input %s is fixed at %dx%d (found input %dx%d)",
				cfg.Model, in, mw, mh, cfg.Width, cfg.Height))
		}
		w, h = int(mw), int(mh)
	}
	if w > 8192 || h > 8192 || w < 1 || h < 1 {
		return in, 0, 0, 0, modelErr("model", fmt.Sprintf("%q: input %s size %dx%d is out of range 1..8192", cfg.Model, in, w, h))
	}
	if in.Dims[0] > 0 {
		batch = int(in.Dims[0])
	}
	return in, w, h, batch, nil
}

// loadClassNames reads the names file, or the model's metadata; none of
// both yields no names (index names are made once the class count is known).
func loadClassNames(cfg Config, mi ModelInfo) ([]string, string, error) {
	if cfg.Names != "" {
		names, err := readNames(cfg.Names)
		if err != nil {
			return nil, "", settingErr("names", fmt.Sprintf("cannot read class names %q: %v", cfg.Names, unwrapPathErr(err)))
		}
		return names, cfg.Names, nil
	}
	if names, ok := metadataNames(mi.Metadata); ok {
		return names, "model metadata", nil
	}
	return nil, "", nil
}

// thresholds builds the per-class score threshold, +Inf for classes outside
// the allow-list.
func thresholds(cfg Config, names []string, from string) ([]float64, error) {
	index := make(map[string]int, len(names))
	for i, n := range names {
		if _, dup := index[n]; !dup {
			index[n] = i
		}
	}
	thr := make([]float64, len(names))
	for i := range thr {
		thr[i] = cfg.ScoreThreshold
		if len(cfg.Classes) > 0 {
			thr[i] = math.Inf(1)
		}
	}
	for i, n := range cfg.Classes {
		c, ok := index[n]
		if !ok {
			return nil, settingErr(fmt.Sprintf("classes[%d]", i), fmt.Sprintf("no class %q in %s", n, namesSource(from)))
		}
		thr[c] = cfg.ScoreThreshold
	}
	for n, t := range cfg.ClassThresholds {
		c, ok := index[n]
		if !ok {
			return nil, settingErr("class_thresholds."+n, fmt.Sprintf("no class %q in %s", n, namesSource(from)))
		}
		if !math.IsInf(thr[c], 1) {
			thr[c] = t
		}
	}
	return thr, nil
}

func namesSource(from string) string {
	switch from {
	case "model metadata", "class index":
		return "the " + from + " names"
	}
	return fmt.Sprintf("%q", from)
}

// Info describes the loaded model and engine.
func (d *Detector) Info() Info { return d.info }

// Classes names every class the detector can report: the allow-list when one
// is set, else every class of the model.
func (d *Detector) Classes() []string { return d.emits }

// Stats reports what the detector measured so far.
func (d *Detector) Stats() Stats { return d.rec.snapshot() }

// prepared is a frame's letterboxed input, made ahead of Detect.
type prepared struct {
	d   *Detector
	buf *[]float32
	geo Geometry
}

// Close returns the input buffer to its detector's pool; safe to call twice.
func (p *prepared) Close() error {
	if p.buf != nil {
		p.d.bufs.Put(p.buf)
		p.buf = nil
	}
	return nil
}

func (d *Detector) getBuf() *[]float32 {
	if b, ok := d.bufs.Get().(*[]float32); ok {
		return b
	}
	b := make([]float32, d.pre.size())
	return &b
}

// prepare letterboxes one frame into a pooled buffer.
func (d *Detector) prepare(f *capture.Frame) (*prepared, time.Duration, time.Duration, error) {
	runtime.LockOSThread()
	defer runtime.UnlockOSThread()
	t0, c0 := time.Now(), threadCPU()
	buf := d.getBuf()
	g, err := d.pre.fill(f.Mat, *buf)
	if err != nil {
		d.bufs.Put(buf)
		return nil, 0, 0, fmt.Errorf("prepare frame %d of %s: %w", f.Seq, f.Source, err)
	}
	return &prepared{d: d, buf: buf, geo: g}, time.Since(t0), threadCPU() - c0, nil
}

// Prepare letterboxes the frame and converts it to the model's input ahead
// of Detect; the pipeline calls it on the source's capture goroutine so that
// preparing the next frame overlaps inference of this one.
func (d *Detector) Prepare(f *capture.Frame) error {
	p, wall, cpu, err := d.prepare(f)
	if err != nil {
		return err
	}
	if f.Prep != nil {
		_ = f.Prep.Close()
	}
	f.Prep = p
	d.rec.prepared(wall, cpu)
	return nil
}

// Detect returns the detections of each frame, in batch order. Frames
// prepared by Prepare are used as they are; others are prepared here. When
// the model's batch dimension is dynamic, all frames go through one
// inference call; a model with a fixed batch size B takes them B at a time
// (the last call padded with blank images); the shared YOLOX model has B = 1.
func (d *Detector) Detect(ctx context.Context, batch []*capture.Frame) ([][]detect.Detection, error) {
	out := make([][]detect.Detection, len(batch))
	if len(batch) == 0 {
		return out, nil
	}
	start := time.Now()
	items := make([]*prepared, len(batch))
	for i, f := range batch {
		if p, ok := f.Prep.(*prepared); ok && p.d == d && p.buf != nil {
			items[i] = p
			continue
		}
		p, wall, cpu, err := d.prepare(f)
		if err != nil {
			return nil, err
		}
		defer p.Close()
		items[i] = p
		d.rec.inlinePrepare(wall, cpu)
	}
	chunk := len(items)
	if d.info.Batch > 0 {
		chunk = d.info.Batch
	}
	for lo := 0; lo < len(items); lo += chunk {
		if err := ctx.Err(); err != nil {
			return nil, err
		}
		hi := min(lo+chunk, len(items))
		s, err := d.pool.acquire(ctx)
		if err != nil {
			return nil, err
		}
		err = d.detectChunk(s, items[lo:hi], chunk, batch[lo:hi], out[lo:hi], start)
		d.pool.release(s)
		if err != nil {
			return nil, err
		}
	}
	return out, nil
}

// detectChunk runs one inference on session s over items (padded to n
// images when the model's batch size is fixed) and decodes each image.
func (d *Detector) detectChunk(s *session, items []*prepared, n int, frames []*capture.Frame, out [][]detect.Detection, start time.Time) error {
	size := d.pre.size()
	input := *items[0].buf
	if n > 1 {
		if cap(s.batch) < n*size {
			s.batch = make([]float32, n*size)
		}
		input = s.batch[:n*size]
		for i, p := range items {
			copy(input[i*size:(i+1)*size], *p.buf)
		}
		clear(input[len(items)*size:])
	}
	runtime.LockOSThread()
	defer runtime.UnlockOSThread()
	// With one intra-op thread ONNX Runtime infers on the calling thread, so
	// this thread's CPU time is the inference's own, not that of sessions
	// running beside it; otherwise the engine's threads count too and only
	// the process's CPU time says what the call cost.
	t0, c0, p0 := time.Now(), threadCPU(), processCPU()
	outs, err := s.eng.run(input, n)
	if err != nil {
		return fmt.Errorf("onnx detector: %w", err)
	}
	cpu := processCPU() - p0
	if d.inferOnCaller {
		cpu = threadCPU() - c0
	}
	d.rec.inferred(time.Since(t0), cpu)
	for i, p := range items {
		t1, c1 := time.Now(), threadCPU()
		s.cands, err = d.dec.decode(outs, i, s.cands[:0])
		if err != nil {
			return fmt.Errorf("onnx detector: decode %s frame %d: %w", frames[i].Source, frames[i].Seq, err)
		}
		out[i] = d.post.finish(s.cands, p.geo, d.dec.plan.Layout == LayoutE2E)
		done := time.Now()
		d.rec.frame(done.Sub(t1), threadCPU()-c1, done.Sub(start), frames[i].Captured, done)
	}
	return nil
}

// Close waits for inferences under way, then stops every session; safe to
// call twice. Detect calls after Close fail. Frames still holding prepared
// input may be closed afterwards.
func (d *Detector) Close() error { return d.pool.close() }
