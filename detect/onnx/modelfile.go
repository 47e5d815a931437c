package onnx

import (
	"encoding/binary"
	"errors"
	"fmt"
	"math"
	"slices"
	"strings"
)

// ModelInfo is what a model file declares about itself: its graph inputs and
// outputs and its metadata. It is read from the file without an inference
// engine, so that both engines choose the same layout and a broken file is
// reported the same way.
type ModelInfo struct {
	IRVersion int64
	Opset     int64 // version of the default ("ai.onnx") operator set
	Producer  string
	Inputs    []TensorInfo // graph inputs that are not initializers
	Outputs   []TensorInfo
	Metadata  map[string]string // metadata_props (e.g. "names" of an exported detector)
}

// TensorInfo is one graph input or output.
type TensorInfo struct {
	Name string
	// ElemType is the ONNX element type (1 = float32).
	ElemType int32
	// Dims holds each dimension's size, -1 where it is symbolic or unknown.
	Dims []int64
	// DimNames holds the symbol of each symbolic dimension ("" for fixed ones).
	DimNames []string
}

// elemFloat is TensorProto.DataType FLOAT in the ONNX specification (onnx.proto).
const elemFloat = 1

// String formats the tensor as name [d0,d1,...] with symbols for dynamic
// dimensions, e.g. images [batch,3,416,416].
func (t TensorInfo) String() string { return t.Name + " " + t.Shape() }

// Shape formats the dimensions alone, e.g. [1,3549,85].
func (t TensorInfo) Shape() string {
	parts := make([]string, len(t.Dims))
	for i, d := range t.Dims {
		switch {
		case d >= 0:
			parts[i] = fmt.Sprint(d)
		case i < len(t.DimNames) && t.DimNames[i] != "":
			parts[i] = t.DimNames[i]
		default:
			parts[i] = "?"
		}
	}
	return "[" + strings.Join(parts, ",") + "]"
}

// errNotModel is wrapped by ParseModel when the bytes are not an ONNX model.
var errNotModel = errors.New("not an ONNX model")

// ParseModel reads the protobuf ModelProto of an ONNX file far enough to list
// the graph's inputs, outputs and metadata (field numbers from onnx.proto of
// the ONNX specification). It never panics on malformed input.
//
// A Darknet cfg (text starting with [net]) is read as well: its input and
// its raw heads as OpenCV's DNN module names them (see darknet.go).
func ParseModel(data []byte) (ModelInfo, error) {
	if looksLikeDarknetCfg(data) {
		dc, err := parseDarknetCfg(data)
		if err != nil {
			return ModelInfo{}, fmt.Errorf("a Darknet cfg with an error at line %v", err)
		}
		return dc.modelInfo(), nil
	}
	var m ModelInfo
	var graph []byte
	seenGraph := false
	err := eachField(data, func(num int, wt int, v uint64, b []byte) error {
		switch {
		case num == 1 && wt == wireVarint:
			m.IRVersion = int64(v)
		case num == 2 && wt == wireBytes:
			m.Producer = string(b)
		case num == 7 && wt == wireBytes:
			graph, seenGraph = b, true
		case num == 8 && wt == wireBytes:
			domain, version, err := parseOpset(b)
			if err != nil {
				return err
			}
			if domain == "" || domain == "ai.onnx" {
				m.Opset = version
			}
		case num == 14 && wt == wireBytes:
			k, val, err := parseStringPair(b)
			if err != nil {
				return err
			}
			if m.Metadata == nil {
				m.Metadata = map[string]string{}
			}
			m.Metadata[k] = val
		}
		return nil
	})
	if err != nil {
		return ModelInfo{}, fmt.Errorf("%w: %v", errNotModel, err)
	}
	if !seenGraph || m.IRVersion <= 0 {
		return ModelInfo{}, fmt.Errorf("%w: no ir_version and graph fields", errNotModel)
	}
	var inits []string
	err = eachField(graph, func(num int, wt int, _ uint64, b []byte) error {
		if wt != wireBytes {
			return nil
		}
		switch num {
		case 5: // initializer (TensorProto; name is field 8)
			name, err := stringField(b, 8)
			if err != nil {
				return err
			}
			inits = append(inits, name)
		case 11, 12: // input, output (ValueInfoProto)
			ti, err := parseValueInfo(b)
			if err != nil {
				return err
			}
			if num == 11 {
				m.Inputs = append(m.Inputs, ti)
			} else {
				m.Outputs = append(m.Outputs, ti)
			}
		}
		return nil
	})
	if err != nil {
		return ModelInfo{}, fmt.Errorf("%w: graph: %v", errNotModel, err)
	}
	// Models before IR version 4 list initializers among the inputs too.
	m.Inputs = slices.DeleteFunc(m.Inputs, func(t TensorInfo) bool { return slices.Contains(inits, t.Name) })
	return m, nil
}

func parseOpset(b []byte) (domain string, version int64, err error) {
	err = eachField(b, func(num int, wt int, v uint64, s []byte) error {
		switch {
		case num == 1 && wt == wireBytes:
			domain = string(s)
		case num == 2 && wt == wireVarint:
			version = int64(v)
		}
		return nil
	})
	return domain, version, err
}

func parseStringPair(b []byte) (k, v string, err error) {
	err = eachField(b, func(num int, wt int, _ uint64, s []byte) error {
		switch {
		case num == 1 && wt == wireBytes:
			k = string(s)
		case num == 2 && wt == wireBytes:
			v = string(s)
		}
		return nil
	})
	return k, v, err
}

func stringField(b []byte, field int) (string, error) {
	var out string
	err := eachField(b, func(num int, wt int, _ uint64, s []byte) error {
		if num == field && wt == wireBytes {
			out = string(s)
		}
		return nil
	})
	return out, err
}

// parseValueInfo reads ValueInfoProto{name=1, type=2} with
// TypeProto{tensor_type=1}, TypeProto.Tensor{elem_type=1, shape=2},
// TensorShapeProto{dim=1} and Dimension{dim_value=1, dim_param=2}.
func parseValueInfo(b []byte) (TensorInfo, error) {
	var t TensorInfo
	var typ []byte
	err := eachField(b, func(num int, wt int, _ uint64, s []byte) error {
		switch {
		case num == 1 && wt == wireBytes:
			t.Name = string(s)
		case num == 2 && wt == wireBytes:
			typ = s
		}
		return nil
	})
	if err != nil {
		return t, err
	}
	var tensor []byte
	if err := eachField(typ, func(num int, wt int, _ uint64, s []byte) error {
		if num == 1 && wt == wireBytes {
			tensor = s
		}
		return nil
	}); err != nil {
		return t, err
	}
	var shape []byte
	if err := eachField(tensor, func(num int, wt int, v uint64, s []byte) error {
		switch {
		case num == 1 && wt == wireVarint:
			t.ElemType = int32(v)
		case num == 2 && wt == wireBytes:
			shape = s
		}
		return nil
	}); err != nil {
		return t, err
	}
	err = eachField(shape, func(num int, wt int, _ uint64, s []byte) error {
		if num != 1 || wt != wireBytes {
			return nil
		}
		d, name := int64(-1), ""
		if err := eachField(s, func(n int, w int, v uint64, p []byte) error {
			switch {
			case n == 1 && w == wireVarint:
				if int64(v) >= 0 {
					d = int64(v)
				}
			case n == 2 && w == wireBytes:
				name = string(p)
			}
			return nil
		}); err != nil {
			return err
		}
		t.Dims = append(t.Dims, d)
		t.DimNames = append(t.DimNames, name)
		return nil
	})
	return t, err
}

// Protocol buffer wire types (protobuf encoding specification).
const (
	wireVarint = 0
	wireI64    = 1
	wireBytes  = 2
	wireI32    = 5
)

// eachField walks the top-level fields of one protobuf message; fn gets the
// field number, the wire type and either the varint value or the bytes.
func eachField(b []byte, fn func(num int, wt int, v uint64, s []byte) error) error {
	for len(b) > 0 {
		key, n := binary.Uvarint(b)
		if n <= 0 {
			return errors.New("bad field key")
		}
		b = b[n:]
		num, wt := key>>3, int(key&7)
		if num == 0 || num > math.MaxInt32 {
			return fmt.Errorf("bad field number %d", num)
		}
		var v uint64
		var s []byte
		switch wt {
		case wireVarint:
			v, n = binary.Uvarint(b)
			if n <= 0 {
				return errors.New("bad varint")
			}
			b = b[n:]
		case wireI64:
			if len(b) < 8 {
				return errors.New("truncated fixed64")
			}
			b = b[8:]
		case wireI32:
			if len(b) < 4 {
				return errors.New("truncated fixed32")
			}
			b = b[4:]
		case wireBytes:
			l, n := binary.Uvarint(b)
			if n <= 0 || l > uint64(len(b)-n) {
				return errors.New("truncated length-delimited field")
			}
			s = b[n : n+int(l)]
			b = b[n+int(l):]
		default:
			return fmt.Errorf("unsupported wire type %d", wt)
		}
		if err := fn(int(num), wt, v, s); err != nil {
			return err
		}
	}
	return nil
}
