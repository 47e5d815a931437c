package onnx

import (
	"errors"
	"fmt"
	"strings"

	ort "github.com/yalue/onnxruntime_go"
)

// ortEngine runs a model with ONNX Runtime. Output tensors of fully known
// shape are allocated once per batch size and reused; outputs with dynamic
// dimensions are allocated by ONNX Runtime and released on the next run.
type ortEngine struct {
	sess    *ort.DynamicAdvancedSession
	ver     string
	c, h, w int
	outDims [][]int64 // per output, batch dimension excluded; -1 = dynamic

	outN    int                    // batch size the cached outputs are for
	outs    []*ort.Tensor[float32] // cached outputs (nil when a shape is dynamic)
	pending []ort.Value            // outputs ONNX Runtime allocated on the last run
}

var optLevels = map[string]ort.GraphOptimizationLevel{
	"disabled": ort.GraphOptimizationLevelDisableAll,
	"basic":    ort.GraphOptimizationLevelEnableBasic,
	"extended": ort.GraphOptimizationLevelEnableExtended,
	"all":      ort.GraphOptimizationLevelEnableAll,
}

func newORTEngine(cfg Config, input TensorInfo, outputs []TensorInfo, h, w int) (*ortEngine, error) {
	lib, from, err := ResolveLibrary(cfg.Library)
	if err != nil {
		return nil, err
	}
	ver, err := loadORT(lib, from)
	if err != nil {
		return nil, err
	}
	opts, err := ort.NewSessionOptions()
	if err != nil {
		return nil, fmt.Errorf("onnx runtime session options: %w", err)
	}
	defer opts.Destroy()
	if cfg.IntraThreads > 0 {
		if err := opts.SetIntraOpNumThreads(cfg.IntraThreads); err != nil {
			return nil, fmt.Errorf("onnx runtime intra-op threads: %w", err)
		}
	}
	if cfg.InterThreads > 0 {
		if err := opts.SetInterOpNumThreads(cfg.InterThreads); err != nil {
			return nil, fmt.Errorf("onnx runtime inter-op threads: %w", err)
		}
	}
	if err := sessionEntries(opts, cfg); err != nil {
		return nil, err
	}
	level, ok := optLevels[cfg.Optimization]
	if !ok {
		level = ort.GraphOptimizationLevelEnableAll
	}
	if err := opts.SetGraphOptimizationLevel(level); err != nil {
		return nil, fmt.Errorf("onnx runtime optimisation level: %w", err)
	}
	names := make([]string, len(outputs))
	dims := make([][]int64, len(outputs))
	for i, o := range outputs {
		names[i] = o.Name
		dims[i] = o.Dims[1:]
	}
	sess, err := ort.NewDynamicAdvancedSession(cfg.Model, []string{input.Name}, names, opts)
	if err != nil {
		return nil, modelErr("model", fmt.Sprintf("ONNX Runtime %s cannot load %q: %v", ver, cfg.Model, err))
	}
	return &ortEngine{sess: sess, ver: ver, c: 3, h: h, w: w, outDims: dims}, nil
}

// Session config entries (onnxruntime_session_options_config_keys.h of ONNX
// Runtime 1.24).
const (
	entryIntraSpin         = "session.intra_op.allow_spinning"
	entryInterSpin         = "session.inter_op.allow_spinning"
	entryDisableOptimizers = "optimization.disable_specified_optimizers"
)

// sessionEntries sets spinning and the disabled optimisers.
func sessionEntries(opts *ort.SessionOptions, cfg Config) error {
	if !cfg.Spin {
		for _, k := range []string{entryIntraSpin, entryInterSpin} {
			if err := opts.AddSessionConfigEntry(k, "0"); err != nil {
				return fmt.Errorf("onnx runtime session entry %s: %w", k, err)
			}
		}
	}
	for i, name := range cfg.DisableOptimizers {
		if name == "" || strings.ContainsAny(name, ", \t") {
			return settingErr(fmt.Sprintf("disable_optimizers[%d]", i), fmt.Sprintf("want an optimiser name without commas or spaces (found %q)", name))
		}
	}
	if len(cfg.DisableOptimizers) > 0 {
		v := strings.Join(cfg.DisableOptimizers, ",")
		if err := opts.AddSessionConfigEntry(entryDisableOptimizers, v); err != nil {
			return fmt.Errorf("onnx runtime session entry %s=%s: %w", entryDisableOptimizers, v, err)
		}
	}
	return nil
}

func (e *ortEngine) run(input []float32, n int) ([]tensor, error) {
	if e.sess == nil {
		return nil, errors.New("onnx runtime engine: closed")
	}
	e.releasePending()
	in, err := ort.NewTensor(ort.NewShape(int64(n), int64(e.c), int64(e.h), int64(e.w)), input)
	if err != nil {
		return nil, fmt.Errorf("onnx runtime input tensor: %w", err)
	}
	defer in.Destroy()
	if err := e.ensureOutputs(n); err != nil {
		return nil, err
	}
	vals := make([]ort.Value, len(e.outs))
	for i, t := range e.outs {
		if t != nil {
			vals[i] = t
		}
	}
	if err := e.sess.Run([]ort.Value{in}, vals); err != nil {
		return nil, fmt.Errorf("onnx runtime run: %w", err)
	}
	outs := make([]tensor, len(vals))
	for i, v := range vals {
		if e.outs[i] == nil {
			e.pending = append(e.pending, v)
		}
		t, ok := v.(*ort.Tensor[float32])
		if !ok {
			return nil, fmt.Errorf("onnx runtime run: output %d is %T, want a float32 tensor", i, v)
		}
		shape := t.GetShape()
		dims := make([]int, len(shape))
		for k, d := range shape {
			dims[k] = int(d)
		}
		outs[i] = tensor{dims: dims, data: t.GetData()}
	}
	return outs, nil
}

// ensureOutputs allocates the reusable output tensors for batch size n.
func (e *ortEngine) ensureOutputs(n int) error {
	if e.outs != nil && e.outN == n {
		return nil
	}
	e.destroyOutputs()
	e.outs = make([]*ort.Tensor[float32], len(e.outDims))
	e.outN = n
	for i, d := range e.outDims {
		shape := ort.Shape{int64(n)}
		known := true
		for _, v := range d {
			if v < 0 {
				known = false
			}
			shape = append(shape, v)
		}
		if !known {
			continue
		}
		t, err := ort.NewEmptyTensor[float32](shape)
		if err != nil {
			return fmt.Errorf("onnx runtime output tensor %d %v: %w", i, shape, err)
		}
		e.outs[i] = t
	}
	return nil
}

func (e *ortEngine) destroyOutputs() {
	for _, t := range e.outs {
		if t != nil {
			_ = t.Destroy()
		}
	}
	e.outs = nil
}

func (e *ortEngine) releasePending() {
	for _, v := range e.pending {
		if v != nil {
			_ = v.Destroy()
		}
	}
	e.pending = e.pending[:0]
}

func (e *ortEngine) version() string { return "ONNX Runtime " + e.ver }

func (e *ortEngine) close() error {
	e.releasePending()
	e.destroyOutputs()
	if e.sess == nil {
		return nil
	}
	err := e.sess.Destroy()
	e.sess = nil
	return err
}
