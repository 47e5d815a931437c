package onnx

import (
	"context"
	"fmt"
	"testing"

	"tallyd/capture"
	"tallyd/detect"
)

// The fixture models (scripts/onnx_fixtures.py) output fixed rows; a white
// frame adds 765/1024 = 0.7470703125 to one chosen score. Their input is
// 64x48 (64x64 for yolox-grid) and the test frames are twice as large, so a
// box maps back to source pixels by exactly x2 and every expected value below
// is exact.
const white = 0.7470703125

func det(class string, score, x1, y1, x2, y2 float64) detect.Detection {
	return detect.Detection{Box: detect.Box{X1: x1, Y1: y1, X2: x2, Y2: y2}, Score: score, Class: class}
}

func TestFixtureLayouts(t *testing.T) {
	person := det("person", 0.25, 24, 14, 40, 34)
	car := det("car", 0.75, 64, 28, 96, 68)
	dog := det("dog", 0.25*white, 104, 72, 120, 88)
	tests := []struct {
		model      string
		layout     Layout
		w, h       int    // input size to configure (dynamic models)
		names      string // names file
		black, wht []detect.Detection
	}{
		// rows 0-3: person 0.25, car 0.75, a car 0.5 that NMS drops, a dog
		// scoring 0.25 * (0 or 0.747...).
		{"rows-obj.onnx", LayoutRowsObj, 64, 48, "fixture.names",
			[]detect.Detection{car, person}, []detect.Detection{car, person, dog}},
		{"rows-noobj-chw.onnx", LayoutRowsNoObjCHW, 0, 0, "fixture.names",
			[]detect.Detection{car, person}, []detect.Detection{car, dog2(white), person}},
		{"boxes-scores.onnx", LayoutBoxesScores, 0, 0, "fixture.names",
			[]detect.Detection{det("car", 0.75, 64, 30, 96, 72), det("person", 0.25, 24, 12, 40, 36)},
			[]detect.Detection{det("car", 0.75, 64, 30, 96, 72), det("dog", white, 104, 72, 120, 90), det("person", 0.25, 24, 12, 40, 36)}},
		// Names from the model's metadata; the model's own NMS is trusted.
		{"e2e.onnx", LayoutE2E, 0, 0, "",
			[]detect.Detection{car, person}, []detect.Detection{car, dog2(white), person}},
		// Stride 8 cell (2,3), stride 16 cell (1,1), stride 32 cell (1,1).
		{"yolox-grid.onnx", LayoutYOLOXGrid, 0, 0, "fixture.names",
			[]detect.Detection{det("person", 0.5, 32, 48, 48, 64), det("car", 0.5, 16, 16, 48, 48)},
			[]detect.Detection{det("dog", white, 32, 32, 96, 96), det("person", 0.5, 32, 48, 48, 64), det("car", 0.5, 16, 16, 48, 48)}},
	}
	for _, eng := range engines(t) {
		for _, tt := range tests {
			t.Run(fmt.Sprintf("%s/%s", eng, tt.model), func(t *testing.T) {
				for _, layout := range []Layout{LayoutAuto, tt.layout} {
					cfg := testConfig(t, fixture(tt.model), eng)
					cfg.Layout, cfg.Width, cfg.Height, cfg.ScoreThreshold = layout, tt.w, tt.h, 0.1
					if tt.names != "" {
						cfg.Names = fixture(tt.names)
					}
					d := mustNew(t, cfg)
					if got := d.Info().Layout; got != tt.layout {
						t.Fatalf("layout %s chose %s, want %s", layout, got, tt.layout)
					}
					fw, fh := 2*d.Info().Width, 2*d.Info().Height
					black, wht := uniformFrame(fw, fh, 0), uniformFrame(fw, fh, 255)
					defer black.Close()
					defer wht.Close()
					// One call with both frames: one inference (dynamic batch).
					got, err := d.Detect(context.Background(), []*capture.Frame{black, wht})
					if err != nil {
						t.Fatal(err)
					}
					checkDets(t, "black frame", got[0], tt.black)
					checkDets(t, "white frame", got[1], tt.wht)
					if st := d.Stats(); st.Batches != 1 || st.Frames != 2 {
						t.Errorf("stats: %d inference calls for %d frames, want 1 for 2", st.Batches, st.Frames)
					}
					// Prepared ahead, one frame per call.
					if err := d.Prepare(wht); err != nil {
						t.Fatal(err)
					}
					got, err = d.Detect(context.Background(), []*capture.Frame{wht})
					if err != nil {
						t.Fatal(err)
					}
					checkDets(t, "white frame, prepared", got[0], tt.wht)
				}
			})
		}
	}
}

func dog2(score float64) detect.Detection { return det("dog", score, 104, 72, 120, 88) }

func checkDets(t *testing.T, what string, got, want []detect.Detection) {
	t.Helper()
	if fmt.Sprint(got) != fmt.Sprint(want) {
		t.Errorf("%s:\n got %v\nwant %v", what, got, want)
	}
}

// TestConcurrentDetect: several sources call Detect at once (the pipeline
// runs one processing goroutine per source); every result is right.
func TestConcurrentDetect(t *testing.T) {
	for _, eng := range engines(t) {
		cfg := testConfig(t, fixture("e2e.onnx"), eng)
		cfg.ScoreThreshold = 0.1
		d := mustNew(t, cfg)
		errs := make(chan error, 4)
		for g := 0; g < 4; g++ {
			go func() {
				for i := 0; i < 25; i++ {
					v := uint8(255 * ((g + i) % 2))
					f := uniformFrame(128, 96, v)
					if i%3 == 0 {
						if err := d.Prepare(f); err != nil {
							errs <- err
							return
						}
					}
					got, err := d.Detect(context.Background(), []*capture.Frame{f})
					f.Close()
					if err != nil {
						errs <- err
						return
					}
					if want := 2 + int(v/255); len(got[0]) != want {
						errs <- fmt.Errorf("%s: value %d: %d detections, want %d", eng, v, len(got[0]), want)
						return
					}
				}
				errs <- nil
			}()
		}
		for g := 0; g < 4; g++ {
			if err := <-errs; err != nil {
				t.Fatal(err)
			}
		}
		if st := d.Stats(); st.Frames != 100 || st.Prepared != 36 {
			t.Errorf("%s: stats %d frames, %d prepared ahead; want 100, 36", eng, st.Frames, st.Prepared)
		}
	}
}
