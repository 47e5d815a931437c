package onnx

import (
	"fmt"
	"os"
)

// Load opens a detector for every model kind tallyd reads: ONNX files with
// decoded outputs (as New), ONNX files with raw anchor heads, and Darknet
// models (a .cfg with its .weights beside it, engine opencv). Raw heads take
// their anchors and scale_x_y from the configuration (Anchors, ScaleXY) or
// from a Darknet cfg (DarknetCfg, or the model itself); problems are
// *SetupError values like New's.
func Load(cfg Config) (*Detector, error) {
	plan, err := rawSetup(cfg)
	if err != nil || plan == nil {
		if err != nil {
			return nil, err
		}
		return New(cfg)
	}
	c := cfg
	c.Layout = plan.Layout
	d, err := New(c)
	if err != nil {
		return nil, err
	}
	if err := d.useRawPlan(cfg, *plan); err != nil {
		_ = d.Close()
		return nil, err
	}
	return d, nil
}

// rawSetup checks a Darknet model or an ONNX model with raw heads and
// returns its complete plan; nil when the model is neither (or cannot be
// read: New then says why).
func rawSetup(cfg Config) (*layoutPlan, error) {
	darknet := isDarknetPath(cfg.Model)
	if darknet {
		if cfg.Engine != EngineOpenCV {
			return nil, settingErr("engine", fmt.Sprintf("%q is a Darknet model, which runs on OpenCV DNN: set engine: opencv (found %q)", cfg.Model, cfg.Engine))
		}
		w := darknetWeights(cfg.Model)
		if st, err := os.Stat(w); err != nil || st.IsDir() {
			why := "is a folder"
			if err != nil {
				why = unwrapPathErr(err).Error()
			}
			return nil, modelErr("model", fmt.Sprintf("Darknet cfg %q needs its weights beside it: %q %s", cfg.Model, w, why))
		}
		if cfg.SigmoidApplied {
			return nil, settingErr("sigmoid_applied", fmt.Sprintf("%q is a Darknet model, whose heads hold raw values; leave sigmoid_applied out", cfg.Model))
		}
		if cfg.DarknetCfg != "" {
			return nil, settingErr("cfg", fmt.Sprintf("the model %q is a Darknet cfg already; cfg is for ONNX models converted from Darknet", cfg.Model))
		}
	}
	var mi ModelInfo
	if darknet {
		dc, err := readDarknetCfg(cfg.Model)
		if err != nil {
			return nil, modelErr("model", err.Error())
		}
		mi = dc.modelInfo()
	} else {
		data, err := os.ReadFile(cfg.Model)
		if err != nil {
			return nil, nil
		}
		if mi, err = ParseModel(data); err != nil {
			return nil, nil
		}
	}
	_, w, h, _, err := checkInput(cfg, mi)
	if err != nil {
		return nil, err
	}
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
	names, _, err := loadClassNames(cfg, mi)
	if err != nil {
		return nil, err
	}
	plan, err := rawPlan(mi.Outputs, w, h, l, len(names), spec)
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

// useRawPlan puts the complete raw-head plan in place of the one New made
// without anchors; when the anchors give another class count than New's
// guess (no names known), the class index names follow.
func (d *Detector) useRawPlan(cfg Config, plan layoutPlan) error {
	thr := d.dec.thr
	if plan.Classes != len(d.info.Classes) {
		names := indexNames(plan.Classes)
		var err error
		if thr, err = thresholds(cfg, names, "class index"); err != nil {
			return err
		}
		d.info.Classes, d.post.names = names, names
		if len(cfg.Classes) == 0 {
			d.emits = names
		}
	}
	d.dec = newDecoder(plan, d.info.Width, d.info.Height, plan.Classes, thr)
	d.info.Layout = plan.Layout
	return nil
}

// Heads describes the raw anchor heads of a loaded model (grid, anchors,
// scale_x_y per head, finest first); "" for other layouts.
func (d *Detector) Heads() string { return d.dec.plan.headsString() }
