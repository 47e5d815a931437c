package onnx

import (
	"fmt"
	"os"
)

// readModel reads what New needs of the model file: an ONNX file's graph
// inputs and outputs, or a Darknet cfg (with its .weights beside it, on
// OpenCV DNN) read as the raw heads OpenCV names.
func readModel(cfg Config) (ModelInfo, error) {
	if isDarknetPath(cfg.Model) {
		if cfg.Engine != EngineOpenCV {
			return ModelInfo{}, settingErr("engine", fmt.Sprintf("%q is a Darknet model, which runs on OpenCV DNN: set engine: opencv (found %q)", cfg.Model, cfg.Engine))
		}
		w := darknetWeights(cfg.Model)
		if st, err := os.Stat(w); err != nil || st.IsDir() {
			why := "is a folder"
			if err != nil {
				why = unwrapPathErr(err).Error()
			}
			return ModelInfo{}, modelErr("model", fmt.Sprintf("Darknet cfg %q needs its weights beside it: %q %s", cfg.Model, w, why))
		}
		if cfg.SigmoidApplied {
			return ModelInfo{}, settingErr("sigmoid_applied", fmt.Sprintf("%q is a Darknet model, whose heads hold raw values; leave sigmoid_applied out", cfg.Model))
		}
		if cfg.DarknetCfg != "" {
			return ModelInfo{}, settingErr("cfg", fmt.Sprintf("the model %q is a Darknet cfg already; cfg is for ONNX models converted from Darknet", cfg.Model))
		}
		dc, err := readDarknetCfg(cfg.Model)
		if err != nil {
			return ModelInfo{}, modelErr("model", err.Error())
		}
		return dc.modelInfo(), nil
	}
	data, err := os.ReadFile(cfg.Model)
	if err != nil {
		return ModelInfo{}, modelErr("model", fmt.Sprintf("cannot open %q: %v", cfg.Model, unwrapPathErr(err)))
	}
	mi, err := ParseModel(data)
	if err != nil {
		return ModelInfo{}, modelErr("model", fmt.Sprintf("%q is %v (want a protobuf ModelProto with a graph)", cfg.Model, err))
	}
	return mi, nil
}

// rawHeadPlan is the complete plan of a Darknet model or an ONNX model with
// raw anchor heads, with anchors and scale_x_y from the configuration
// (Anchors, ScaleXY) or a Darknet cfg (DarknetCfg, or the model itself); nil
// for every other model. names is the number of class names known (0: none).
func rawHeadPlan(cfg Config, mi ModelInfo, w, h, names int) (*layoutPlan, error) {
	darknet := isDarknetPath(cfg.Model)
	l := cfg.Layout
	switch {
	case darknet:
		l = LayoutAnchorHeadsLast
		if cfg.Layout != LayoutAuto && cfg.Layout != "" && cfg.Layout != l {
			return nil, settingErr("layout", fmt.Sprintf("a Darknet model's heads have layout %s or auto (found %q)", l, cfg.Layout))
		}
	case isRawLayout(l):
	case l == LayoutAuto || l == "":
		var ok bool
		if l, ok = rawByShape(mi.Outputs, w, h); !ok {
			return nil, nil
		}
	default:
		return nil, nil
	}
	spec, err := headSpecOf(cfg)
	if err != nil {
		return nil, err
	}
	if spec == nil {
		return nil, settingErr("anchors", fmt.Sprintf("%q: output shapes %s are raw anchor heads (layout %s): %s",
			cfg.Model, shapes(mi.Outputs), l, headsHelp))
	}
	plan, err := rawPlan(mi.Outputs, w, h, l, names, spec)
	if err != nil {
		key := "anchors"
		switch {
		case darknet:
			key = "model"
		case cfg.DarknetCfg != "" && len(cfg.Anchors) == 0:
			key = "cfg"
		}
		if key == "anchors" {
			return nil, settingErr(key, fmt.Sprintf("%q: %v", cfg.Model, err))
		}
		return nil, modelErr(key, fmt.Sprintf("%q: %v", cfg.Model, err))
	}
	return &plan, nil
}

// Heads describes the raw anchor heads of a loaded model (grid, anchors,
// scale_x_y per head, finest first); "" for other layouts.
func (d *Detector) Heads() string { return d.dec.plan.headsString() }
