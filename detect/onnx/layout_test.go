package onnx

import (
	"reflect"
	"strings"
	"testing"
)

func out(name string, dims ...int64) TensorInfo {
	return TensorInfo{Name: name, ElemType: elemFloat, Dims: dims, DimNames: make([]string, len(dims))}
}

func TestChooseLayout(t *testing.T) {
	tests := []struct {
		name    string
		outs    []TensorInfo
		w, h    int
		want    Layout
		names   int
		plan    layoutPlan
		wantErr string
	}{
		// Output shapes of common exports (common practice; the YOLOX one from
		// ../shared/models/README.md).
		{"YOLOX raw grid 416", []TensorInfo{out("output", 1, 3549, 85)}, 416, 416, LayoutAuto, 80,
			layoutPlan{Layout: LayoutYOLOXGrid, Classes: 80}, ""},
		{"YOLOX one class", []TensorInfo{out("output", 1, 3549, 6)}, 416, 416, LayoutAuto, 0,
			layoutPlan{Layout: LayoutYOLOXGrid, Classes: 1}, ""},
		{"anchor rows 640", []TensorInfo{out("output0", 1, 25200, 85)}, 640, 640, LayoutAuto, 80,
			layoutPlan{Layout: LayoutRowsObj, Classes: 80}, ""},
		{"anchor rows one class", []TensorInfo{out("output0", 1, 25200, 6)}, 640, 640, LayoutAuto, 0,
			layoutPlan{Layout: LayoutRowsObj, Classes: 1}, ""},
		{"channels first 640", []TensorInfo{out("output0", 1, 84, 8400)}, 640, 640, LayoutAuto, 80,
			layoutPlan{Layout: LayoutRowsNoObjCHW, Classes: 80}, ""},
		{"channels first, dynamic rows", []TensorInfo{out("output0", -1, 84, -1)}, 640, 640, LayoutAuto, 0,
			layoutPlan{Layout: LayoutRowsNoObjCHW, Classes: 80}, ""},
		{"boxes and scores", []TensorInfo{out("boxes", 1, 10647, 1, 4), out("confs", 1, 10647, 80)}, 416, 416, LayoutAuto, 80,
			layoutPlan{Layout: LayoutBoxesScores, Classes: 80, Boxes: 0, Scores: 1}, ""},
		{"scores and boxes", []TensorInfo{out("confs", 1, 10647, 80), out("boxes", 1, 10647, 4)}, 416, 416, LayoutAuto, 0,
			layoutPlan{Layout: LayoutBoxesScores, Classes: 80, Boxes: 1, Scores: 0}, ""},
		{"end to end", []TensorInfo{out("output0", 1, 300, 6)}, 640, 640, LayoutAuto, 80, layoutPlan{Layout: LayoutE2E}, ""},
		{"end to end, dynamic rows", []TensorInfo{out("dets", -1, -1, 6)}, 640, 640, LayoutAuto, 0, layoutPlan{Layout: LayoutE2E}, ""},
		{"rows set explicitly", []TensorInfo{out("output", 1, 3549, 85)}, 416, 416, LayoutRowsObj, 80,
			layoutPlan{Layout: LayoutRowsObj, Classes: 80}, ""},
		{"rank 2", []TensorInfo{out("output", 1, 10)}, 64, 48, LayoutAuto, 0, layoutPlan{},
			"output shapes output [1,10] fit none of the supported layouts: " + layoutHelp},
		{"three outputs", []TensorInfo{out("a", 1, 8, 4), out("b", 1, 8, 3), out("c", 1, 8)}, 64, 48, LayoutAuto, 0, layoutPlan{},
			"output shapes a [1,8,4], b [1,8,3], c [1,8] fit none of the supported layouts: " + layoutHelp},
		{"rows too short", []TensorInfo{out("output", 1, 3549, 4)}, 416, 416, LayoutAuto, 0, layoutPlan{},
			"output shapes output [1,3549,4] fit none of the supported layouts: " + layoutHelp},
		{"grid of another input size", []TensorInfo{out("output", 1, 3549, 85)}, 640, 640, LayoutYOLOXGrid, 0, layoutPlan{},
			"output shapes output [1,3549,85] do not fit layout yolox-grid: want N = 8400 grid cells for a 640x640 input, found 3549 (supported: " + layoutHelp + ")"},
		{"names of another model", []TensorInfo{out("output0", 1, 84, 8400)}, 640, 640, LayoutAuto, 79, layoutPlan{},
			"output shapes output0 [1,84,8400] read as layout rows-noobj-chw give 80 classes, but 79 class names are known; set layout or check the names"},
		{"int64 output", []TensorInfo{{Name: "labels", ElemType: 7, Dims: []int64{1, 100}, DimNames: []string{"", ""}}}, 640, 640, LayoutAuto, 0, layoutPlan{},
			"output labels [1,100] has element type 7, want float32 (1)"},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			plan, err := ChooseLayout(tt.outs, tt.w, tt.h, tt.want, tt.names)
			if tt.wantErr != "" {
				if err == nil || err.Error() != tt.wantErr {
					t.Fatalf("error\n got: %v\nwant: %s", err, tt.wantErr)
				}
				return
			}
			if err != nil {
				t.Fatal(err)
			}
			if !reflect.DeepEqual(plan, tt.plan) {
				t.Fatalf("plan %+v, want %+v", plan, tt.plan)
			}
		})
	}
	if !strings.Contains(layoutHelp, "e2e [B,K,6]") {
		t.Fatal(layoutHelp)
	}
}

// YOLOX grid counts: 52*52 + 26*26 + 13*13 = 3549 at 416 (../shared/models/README.md).
func TestGridCells(t *testing.T) {
	for _, tt := range []struct{ w, h, want int }{{416, 416, 3549}, {640, 640, 8400}, {64, 64, 84}, {640, 480, 6300}, {100, 100, -1}} {
		if got := gridCells(tt.w, tt.h); got != tt.want {
			t.Errorf("gridCells(%d, %d) = %d, want %d", tt.w, tt.h, got, tt.want)
		}
	}
}
