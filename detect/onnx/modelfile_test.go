package onnx

import (
	"errors"
	"os"
	"reflect"
	"testing"
)

func TestParseModelShared(t *testing.T) {
	data, err := os.ReadFile(sharedFile(t, "models/yolox_nano_coco_416.onnx"))
	if err != nil {
		t.Fatal(err)
	}
	m, err := ParseModel(data)
	if err != nil {
		t.Fatal(err)
	}
	// Values from ../shared/models/README.md (IR version 6, exported with
	// PyTorch; input images [1,3,416,416], output [1,3549,85]).
	if m.IRVersion != 6 || m.Opset != 11 || m.Producer != "pytorch" {
		t.Errorf("IR %d opset %d producer %q", m.IRVersion, m.Opset, m.Producer)
	}
	if len(m.Inputs) != 1 || m.Inputs[0].String() != "images [1,3,416,416]" || m.Inputs[0].ElemType != elemFloat {
		t.Errorf("inputs %v (initializers must not be listed)", m.Inputs)
	}
	if len(m.Outputs) != 1 || m.Outputs[0].String() != "output [1,3549,85]" {
		t.Errorf("outputs %v", m.Outputs)
	}
}

func TestParseModelFixtures(t *testing.T) {
	data, err := os.ReadFile(fixture("e2e.onnx"))
	if err != nil {
		t.Fatal(err)
	}
	m, err := ParseModel(data)
	if err != nil {
		t.Fatal(err)
	}
	in := m.Inputs[0]
	if in.String() != "images [batch,3,48,64]" || !reflect.DeepEqual(in.Dims, []int64{-1, 3, 48, 64}) {
		t.Errorf("input %v %v", in, in.Dims)
	}
	if m.Metadata["names"] != "{0: 'person', 1: 'car', 2: 'dog'}" {
		t.Errorf("metadata %v", m.Metadata)
	}
	for _, bad := range []string{"not-onnx.onnx", "fixture.names"} {
		data, err := os.ReadFile(fixture(bad))
		if err != nil {
			t.Fatal(err)
		}
		if _, err := ParseModel(data); !errors.Is(err, errNotModel) {
			t.Errorf("%s: err = %v, want not an ONNX model", bad, err)
		}
	}
	if _, err := ParseModel(nil); !errors.Is(err, errNotModel) {
		t.Errorf("empty: err = %v", err)
	}
}

func FuzzParseModel(f *testing.F) {
	for _, name := range []string{"rows-obj.onnx", "e2e.onnx", "boxes-scores.onnx", "bad-rank3.onnx", "not-onnx.onnx"} {
		if data, err := os.ReadFile(fixture(name)); err == nil {
			f.Add(data)
		}
	}
	f.Fuzz(func(t *testing.T, data []byte) {
		m, err := ParseModel(data)
		if err != nil {
			if !errors.Is(err, errNotModel) {
				t.Fatalf("error does not wrap errNotModel: %v", err)
			}
			return
		}
		for _, ti := range append(m.Inputs, m.Outputs...) {
			if len(ti.Dims) != len(ti.DimNames) {
				t.Fatalf("%v: %d dims, %d names", ti, len(ti.Dims), len(ti.DimNames))
			}
			_ = ti.String()
		}
	})
}

func TestMetadataNames(t *testing.T) {
	tests := []struct {
		in   string
		want []string
	}{
		{"{0: 'person', 1: 'bicycle'}", []string{"person", "bicycle"}},
		{`{1: "car", 0: "person"}`, []string{"person", "car"}},
		{"{0: 'traffic light'}", []string{"traffic light"}},
		{"{0: 'a', 2: 'c'}", nil}, // gap
		{"['person']", nil},
		{"{}", nil},
		{"{0: person}", nil},
		{"{0: 'unterminated}", nil},
	}
	for _, tt := range tests {
		got, ok := metadataNames(map[string]string{"names": tt.in})
		if ok != (tt.want != nil) || !reflect.DeepEqual(got, tt.want) {
			t.Errorf("metadataNames(%q) = %v, %v; want %v", tt.in, got, ok, tt.want)
		}
	}
	if _, ok := metadataNames(nil); ok {
		t.Error("no metadata gave names")
	}
}
