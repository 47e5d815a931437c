package onnx

import (
	"context"
	"errors"
	"math"
	"math/rand"
	"os"
	"strings"
	"testing"

	"tallyd/capture"
)

// TestDarknetMatchesOpenCVRegion runs the random-weights Darknet fixture
// (scripts/gen-rawhead-fixtures.py) in OpenCV DNN and takes both what
// OpenCV's own region layer decodes ("yolo_<i>": rows of x, y, w, h as
// fractions of the input, objectness, objectness*class) and the raw heads
// it decodes from ("permute_<i>"). Our decoding of the raw numbers must
// agree with OpenCV's to 1e-4 (OpenCV's region layer, modules/dnn of
// OpenCV 4.6, is an independent implementation of the same YOLOv3/v4
// formulas).
func TestDarknetMatchesOpenCVRegion(t *testing.T) {
	cfgPath := fixture("darknet-tiny.cfg")
	dc, err := readDarknetCfg(cfgPath)
	if err != nil {
		t.Fatal(err)
	}
	mi := dc.modelInfo()
	if got := shapes(mi.Outputs); got != "permute_3 [1,16,16,16], permute_7 [1,8,8,16]" {
		t.Fatalf("outputs %s", got)
	}
	outs := []TensorInfo{mi.Outputs[0], {Name: "yolo_3"}, mi.Outputs[1], {Name: "yolo_7"}}
	e, err := newCVEngine(cfgPath, mi.Inputs[0], outs, 64, 64)
	if err != nil {
		t.Fatal(err)
	}
	defer e.close()
	rng := rand.New(rand.NewSource(14))
	in := make([]float32, 3*64*64)
	for i := range in {
		in[i] = rng.Float32()
	}
	res, err := e.run(in, 1)
	if err != nil {
		t.Fatal(err)
	}
	spec := dc.headSpec()
	plan, err := rawPlan(mi.Outputs, 64, 64, LayoutAnchorHeadsLast, 0, spec)
	if err != nil {
		t.Fatal(err)
	}
	d := newDecoder(plan, 64, 64, plan.Classes, []float64{0, 0, 0}) // keep every anchor of every cell
	compared, maxDiff := 0, 0.0
	for hi, h := range plan.Heads {
		raw, region := res[2*h.Out], res[2*h.Out+1]
		cands := d.rawHead(h, raw.data, h.H, h.W, true, nil)
		rows := h.H * h.W * h.A
		if len(cands) != rows || len(region.data) != rows*8 {
			t.Fatalf("head %d: %d candidates, region %v, want %d rows", hi, len(cands), region.dims, rows)
		}
		// Our candidates run anchor by anchor over the cells; OpenCV's rows
		// run cell by cell over the anchors.
		for i, c := range cands {
			a, cell := i/(h.H*h.W), i%(h.H*h.W)
			r := region.data[(cell*h.A+a)*8 : (cell*h.A+a)*8+8]
			cx, cy := (c.x1+c.x2)/2/64, (c.y1+c.y2)/2/64
			w, ht := (c.x2-c.x1)/64, (c.y2-c.y1)/64
			bestC, best := -1, -1.0
			for k := 0; k < 3; k++ {
				if float64(r[5+k]) > best {
					bestC, best = k, float64(r[5+k])
				}
			}
			diffs := []float64{cx - float64(r[0]), cy - float64(r[1]), w - float64(r[2]), ht - float64(r[3]), c.score - best}
			for k, df := range diffs {
				maxDiff = math.Max(maxDiff, math.Abs(df))
				if math.Abs(df) > 1e-4 {
					t.Fatalf("head %d anchor %d cell %d value %d: ours %+v, OpenCV %v (diff %g)", hi, a, cell, k, c, r, df)
				}
			}
			if bestC != c.class {
				t.Fatalf("head %d anchor %d cell %d: class %d, OpenCV %d (%v)", hi, a, cell, c.class, bestC, r)
			}
			compared++
		}
	}
	if compared != 2*(16*16+8*8) {
		t.Fatalf("compared %d rows", compared)
	}
	t.Logf("%d anchor rows compared, largest difference %.3g", compared, maxDiff)
}

// TestDarknetLoad opens the fixture as a model: input size, anchors and
// scale_x_y from the cfg, raw heads decoded by the common path.
func TestDarknetLoad(t *testing.T) {
	cfg := testConfig(t, fixture("darknet-tiny.cfg"), EngineOpenCV)
	cfg.Names, cfg.RGB, cfg.Scale, cfg.ScoreThreshold = fixture("fixture.names"), true, 1, 0.05
	d, err := New(cfg)
	if err != nil {
		t.Fatal(err)
	}
	defer d.Close()
	in := d.Info()
	if in.Width != 64 || in.Height != 64 || in.Layout != LayoutAnchorHeadsLast || len(in.Classes) != 3 {
		t.Fatalf("info %+v", in)
	}
	want := "grid 16x16: 2 anchors 10x14 23x27, scale_x_y 1.05; grid 8x8: 2 anchors 37x58 81x82, scale_x_y 1.1"
	if got := d.Heads(); got != want {
		t.Fatalf("heads\n got %s\nwant %s", got, want)
	}
	f := uniformFrame(128, 96, 90)
	defer f.Close()
	if _, err := d.Detect(context.Background(), []*capture.Frame{f}); err != nil {
		t.Fatal(err)
	}
}

func TestDarknetErrors(t *testing.T) {
	tests := []struct {
		name    string
		model   string
		mod     func(*Config)
		key     string
		wantErr string
	}{
		{"cfg without weights", "darknet-noweights.cfg", func(c *Config) {}, "model",
			`model: Darknet cfg "../../testdata/onnx/darknet-noweights.cfg" needs its weights beside it: "../../testdata/onnx/darknet-noweights.weights" no such file or directory`},
		{"engine ort", "darknet-tiny.cfg", func(c *Config) { c.Engine = EngineORT }, "engine",
			`engine: "../../testdata/onnx/darknet-tiny.cfg" is a Darknet model, which runs on OpenCV DNN: set engine: opencv (found "ort")`},
		{"sigmoid applied", "darknet-tiny.cfg", func(c *Config) { c.SigmoidApplied = true }, "sigmoid_applied",
			`sigmoid_applied: "../../testdata/onnx/darknet-tiny.cfg" is a Darknet model, whose heads hold raw values; leave sigmoid_applied out`},
		{"cfg beside a cfg", "darknet-tiny.cfg", func(c *Config) { c.DarknetCfg = fixture("darknet-tiny.cfg") }, "cfg",
			`cfg: the model "../../testdata/onnx/darknet-tiny.cfg" is a Darknet cfg already; cfg is for ONNX models converted from Darknet`},
		{"cfg for an ONNX model with other heads", "anchor-heads.onnx", func(c *Config) { c.DarknetCfg = fixture("darknet-tiny.cfg") }, "cfg",
			`cfg: "../../testdata/onnx/anchor-heads.onnx": output out16 [batch,16,4,4] (head 1 of 2) has stride 16, but head 1 of ../../testdata/onnx/darknet-tiny.cfg has stride 4`},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			cfg := testConfig(t, fixture(tt.model), EngineOpenCV)
			tt.mod(&cfg)
			d, err := New(cfg)
			if err == nil {
				_ = d.Close()
				t.Fatal("no error")
			}
			var se *SetupError
			if !errors.As(err, &se) || se.Key != tt.key || err.Error() != tt.wantErr {
				t.Fatalf("error\n got: %v\nwant: %s (key %s)", err, tt.wantErr, tt.key)
			}
		})
	}
}

// TestDarknetBadCfg: a cfg error reaches the caller as file:line.
func TestDarknetBadCfg(t *testing.T) {
	dir := t.TempDir()
	cfgPath := dir + "/bad.cfg"
	if err := os.WriteFile(cfgPath, []byte("[net]\nwidth=64\nheight=64\n[convolutional]\nfilters=15\nsize=1\n[yolo]\nmask=0,1\nanchors=10,14, 23,27\nclasses=3\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(dir+"/bad.weights", make([]byte, 20), 0o644); err != nil {
		t.Fatal(err)
	}
	cfg := testConfig(t, cfgPath, EngineOpenCV)
	_, err := New(cfg)
	want := "model: " + cfgPath + ":7: [yolo] gets 15 channels from the layer before it, want 2 anchors * (5 + 3 classes) = 16"
	if err == nil || err.Error() != want || !errors.Is(err, ErrModel) {
		t.Fatalf("error\n got: %v\nwant: %s", err, want)
	}
}

// TestParseDarknetCfgErrors: every problem names the cfg line.
func TestParseDarknetCfgErrors(t *testing.T) {
	const net = "[net]\nwidth=64\nheight=64\n"
	const head = "[convolutional]\nfilters=16\nsize=1\n[yolo]\nmask=0,1\nanchors=10,14, 23,27\nclasses=3\n"
	tests := []struct{ name, cfg, want string }{
		{"no net", "[convolutional]\nfilters=2\n", "1: want [net] as the first section"},
		{"no width", "[net]\nheight=64\n" + head, "1: [net] needs width"},
		{"bad width", "[net]\nwidth=abc\nheight=64\n", `2: [net] width must be a whole number within 1..8192 (found "abc")`},
		{"no key=value", net + "[convolutional]\nfilters\n", `5: want key=value or [section] (found "filters")`},
		{"unclosed section", net + "[convolutional\n", `4: section header "[convolutional" has no closing ]`},
		{"no yolo", net + "[convolutional]\nfilters=2\n", "1: no [yolo] section: tallyd reads YOLOv3/v4-style anchor heads"},
		{"unsupported", net + "[region]\nclasses=2\n", "4: section [region] is not supported (tallyd reads convolutional, maxpool, upsample, route, shortcut and yolo)"},
		{"channels do not fit", net + "[convolutional]\nfilters=15\nsize=1\n[yolo]\nmask=0,1\nanchors=10,14, 23,27\nclasses=3\n",
			"7: [yolo] gets 15 channels from the layer before it, want 2 anchors * (5 + 3 classes) = 16"},
		{"mask out of range", net + "[convolutional]\nfilters=16\nsize=1\n[yolo]\nmask=0,5\nanchors=10,14, 23,27\nclasses=3\n",
			"8: [yolo] mask 5 names no anchor (there are 2)"},
		{"odd anchors", net + "[convolutional]\nfilters=16\nsize=1\n[yolo]\nanchors=10,14, 23\nclasses=3\n",
			"8: [yolo] anchors must be width,height pairs (found 3 values)"},
		{"route forward", net + head + "[route]\nlayers=5\n", "12: [route] refers to layer 5, want an earlier layer (0..1)"},
		{"bad scale_x_y", net + head + "scale_x_y=0.5\n", `11: [yolo] scale_x_y must be within 1..4 (found "0.5")`},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			_, err := parseDarknetCfg([]byte(tt.cfg))
			if err == nil || err.Error() != tt.want {
				t.Fatalf("error\n got: %v\nwant: %s", err, tt.want)
			}
		})
	}
	// The fixture walks to the grids OpenCV computes.
	dc, err := readDarknetCfg(fixture("darknet-tiny.cfg"))
	if err != nil {
		t.Fatal(err)
	}
	if len(dc.Heads) != 2 || dc.Heads[0].W != 16 || dc.Heads[1].W != 8 || dc.Heads[1].Layer != 7 {
		t.Fatalf("heads %+v", dc.Heads)
	}
	if !strings.HasPrefix(dc.modelInfo().Inputs[0].String(), "data [1,3,64,64]") {
		t.Fatal(dc.modelInfo().Inputs[0])
	}
}

// FuzzParseDarknetCfg: the cfg reader never panics and every error names a line.
func FuzzParseDarknetCfg(f *testing.F) {
	f.Add([]byte("[net]\nwidth=64\nheight=64\n[convolutional]\nfilters=16\nsize=1\n[yolo]\nmask=0,1\nanchors=10,14, 23,27\nclasses=3\n"))
	f.Add([]byte("[net]\nwidth=8\nheight=8\n[route]\nlayers=-1\n[upsample]\nstride=64\n[maxpool]\nsize=64\n[shortcut]\nfrom=-9\n"))
	f.Fuzz(func(t *testing.T, data []byte) {
		dc, err := parseDarknetCfg(data)
		if err != nil {
			var ce *cfgError
			if !errors.As(err, &ce) || ce.Line < 1 {
				t.Fatalf("error without a line: %v", err)
			}
			return
		}
		if len(dc.Heads) == 0 || len(dc.Heads) > maxHeads {
			t.Fatalf("%d heads", len(dc.Heads))
		}
	})
}
