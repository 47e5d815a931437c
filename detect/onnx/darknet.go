package onnx

import (
	"bufio"
	"bytes"
	"fmt"
	"os"
	"path/filepath"
	"strconv"
	"strings"
)

// Darknet models (a .cfg text with its .weights beside it) run on OpenCV's
// DNN module, which reads both (cv::dnn::readNetFromDarknet). tallyd reads
// the cfg itself for what decoding needs: the input size from [net], and
// the anchors, masks, class count and scale_x_y of each [yolo] section. The
// heads are taken before OpenCV's own region decoding: OpenCV names the
// input of the [yolo] section at cfg layer i "permute_<i>", a [1, H, W,
// A*(5+C)] tensor of raw values (layout anchor-heads-last), so a Darknet
// model goes through the same decoding, thresholds and NMS as every other.

// Limits of a Darknet cfg read here.
const (
	maxCfgBytes  = 1 << 20 // 1 MiB of text
	maxCfgLayers = 1000
)

// isDarknetPath reports whether a model path names a Darknet cfg.
func isDarknetPath(p string) bool { return strings.EqualFold(filepath.Ext(p), ".cfg") }

// darknetWeights is the weights file beside a cfg: the same name ending in
// .weights.
func darknetWeights(cfgPath string) string {
	return strings.TrimSuffix(cfgPath, filepath.Ext(cfgPath)) + ".weights"
}

// cfgSection is one [section] of a cfg with its keys and the line it starts on.
type cfgSection struct {
	Name string
	Line int
	Keys map[string]string
	Key  map[string]int // line of each key
}

// darknetCfg is what tallyd reads from a cfg.
type darknetCfg struct {
	Path          string
	Width, Height int
	Channels      int
	Layers        []cfgSection // after [net]
	Heads         []darknetHead
}

// darknetHead is one [yolo] section.
type darknetHead struct {
	Layer    int // cfg layer index (0 = first section after [net])
	Line     int
	Classes  int
	Anchors  [][2]float64 // the masked anchors, input pixels
	ScaleXY  float64
	W, H, Ch int // size of its input grid and channels
}

// readDarknetCfg reads and checks a cfg file.
func readDarknetCfg(path string) (*darknetCfg, error) {
	st, err := os.Stat(path)
	if err != nil {
		return nil, fmt.Errorf("cannot open Darknet cfg %q: %v", path, unwrapPathErr(err))
	}
	if st.Size() > maxCfgBytes {
		return nil, fmt.Errorf("the Darknet cfg %q is %d bytes, more than the limit of %d", path, st.Size(), maxCfgBytes)
	}
	data, err := os.ReadFile(path)
	if err != nil {
		return nil, fmt.Errorf("cannot read Darknet cfg %q: %v", path, unwrapPathErr(err))
	}
	dc, err := parseDarknetCfg(data)
	if err != nil {
		return nil, fmt.Errorf("%s:%v", path, err)
	}
	dc.Path = path
	return dc, nil
}

// cfgError is a problem at a line of a cfg.
type cfgError struct {
	Line int
	Msg  string
}

func (e *cfgError) Error() string { return fmt.Sprintf("%d: %s", e.Line, e.Msg) }

func errAt(line int, format string, args ...any) error {
	return &cfgError{Line: line, Msg: fmt.Sprintf(format, args...)}
}

// looksLikeDarknetCfg reports whether data starts (after comments) with a
// [net] or [network] section.
func looksLikeDarknetCfg(data []byte) bool {
	sc := bufio.NewScanner(bytes.NewReader(data[:min(len(data), 4096)]))
	for sc.Scan() {
		l := strings.TrimSpace(sc.Text())
		if l == "" || l[0] == '#' || l[0] == ';' {
			continue
		}
		return l == "[net]" || l == "[network]"
	}
	return false
}

// parseDarknetCfg reads the sections of a cfg and follows the grid size
// through the layers tallyd knows (convolutional, maxpool, upsample, route,
// shortcut, yolo, and those that keep the size), so that every [yolo] head
// has its grid size and channel count. Errors carry the line.
func parseDarknetCfg(data []byte) (*darknetCfg, error) {
	var secs []cfgSection
	sc := bufio.NewScanner(bytes.NewReader(data))
	sc.Buffer(make([]byte, 64*1024), maxCfgBytes)
	n := 0
	for sc.Scan() {
		n++
		l := strings.TrimSpace(sc.Text())
		if l == "" || l[0] == '#' || l[0] == ';' {
			continue
		}
		if l[0] == '[' {
			if !strings.HasSuffix(l, "]") {
				return nil, errAt(n, "section header %q has no closing ]", l)
			}
			if len(secs) > maxCfgLayers {
				return nil, errAt(n, "more than %d sections", maxCfgLayers)
			}
			secs = append(secs, cfgSection{Name: strings.TrimSpace(l[1 : len(l)-1]), Line: n, Keys: map[string]string{}, Key: map[string]int{}})
			continue
		}
		k, v, ok := strings.Cut(l, "=")
		if !ok {
			return nil, errAt(n, "want key=value or [section] (found %q)", l)
		}
		if len(secs) == 0 {
			return nil, errAt(n, "key %q before the first section", strings.TrimSpace(k))
		}
		s := &secs[len(secs)-1]
		k = strings.TrimSpace(k)
		s.Keys[k], s.Key[k] = strings.TrimSpace(v), n
	}
	if err := sc.Err(); err != nil {
		return nil, errAt(n+1, "%v", err)
	}
	if len(secs) == 0 || (secs[0].Name != "net" && secs[0].Name != "network") {
		return nil, errAt(1, "want [net] as the first section")
	}
	net := secs[0]
	dc := &darknetCfg{Layers: secs[1:]}
	var err error
	if dc.Width, err = net.int("width", 0, 1, 8192); err != nil {
		return nil, err
	}
	if dc.Height, err = net.int("height", 0, 1, 8192); err != nil {
		return nil, err
	}
	if dc.Channels, err = net.int("channels", 3, 3, 3); err != nil {
		return nil, err
	}
	if err := dc.walk(); err != nil {
		return nil, err
	}
	if len(dc.Heads) == 0 {
		return nil, errAt(net.Line, "no [yolo] section: tallyd reads YOLOv3/v4-style anchor heads")
	}
	if len(dc.Heads) > maxHeads {
		return nil, errAt(dc.Heads[maxHeads].Line, "more than %d [yolo] sections", maxHeads)
	}
	return dc, nil
}

// int reads an integer key within lo..hi; def is used when the key is
// absent (0 = required).
func (s cfgSection) int(key string, def, lo, hi int) (int, error) {
	v, ok := s.Keys[key]
	if !ok {
		if def == 0 && lo > 0 {
			return 0, errAt(s.Line, "[%s] needs %s", s.Name, key)
		}
		return def, nil
	}
	n, err := strconv.Atoi(v)
	if err != nil || n < lo || n > hi {
		return 0, errAt(s.Key[key], "[%s] %s must be a whole number within %d..%d (found %q)", s.Name, key, lo, hi, v)
	}
	return n, nil
}

// floats reads a comma-separated list of numbers.
func (s cfgSection) floats(key string) ([]float64, error) {
	v, ok := s.Keys[key]
	if !ok {
		return nil, nil
	}
	var out []float64
	for _, p := range strings.Split(v, ",") {
		p = strings.TrimSpace(p)
		if p == "" {
			continue
		}
		f, err := strconv.ParseFloat(p, 64)
		if err != nil {
			return nil, errAt(s.Key[key], "[%s] %s: %q is not a number", s.Name, key, p)
		}
		out = append(out, f)
	}
	return out, nil
}

// walk follows width, height and channels through the layers.
func (dc *darknetCfg) walk() error {
	type shape struct{ w, h, c int }
	out := make([]shape, len(dc.Layers))
	cur := shape{dc.Width, dc.Height, dc.Channels}
	ref := func(s cfgSection, key string, i, r int) (int, error) {
		j := r
		if r < 0 {
			j = i + r
		}
		if j < 0 || j >= i {
			return 0, errAt(s.lineOf(key), "[%s] refers to layer %d, want an earlier layer (0..%d)", s.Name, r, i-1)
		}
		return j, nil
	}
	for i, s := range dc.Layers {
		switch s.Name {
		case "convolutional", "conv":
			f, err := s.int("filters", 1, 1, 65536)
			if err != nil {
				return err
			}
			size, err := s.int("size", 1, 1, 64)
			if err != nil {
				return err
			}
			stride, err := s.int("stride", 1, 1, 64)
			if err != nil {
				return err
			}
			pad := 0
			if p, _ := s.int("pad", 0, 0, 1); p == 1 {
				pad = size / 2
			} else if pad, err = s.int("padding", 0, 0, 64); err != nil {
				return err
			}
			cur = shape{(cur.w+2*pad-size)/stride + 1, (cur.h+2*pad-size)/stride + 1, f}
		case "maxpool":
			stride, err := s.int("stride", 1, 1, 64)
			if err != nil {
				return err
			}
			size, err := s.int("size", stride, 1, 64)
			if err != nil {
				return err
			}
			pad, err := s.int("padding", size-1, 0, 64)
			if err != nil {
				return err
			}
			cur = shape{(cur.w+pad-size)/stride + 1, (cur.h+pad-size)/stride + 1, cur.c}
		case "upsample":
			stride, err := s.int("stride", 2, 1, 64)
			if err != nil {
				return err
			}
			cur = shape{cur.w * stride, cur.h * stride, cur.c}
		case "route":
			rs, err := s.floats("layers")
			if err != nil {
				return err
			}
			if len(rs) == 0 {
				return errAt(s.Line, "[route] needs layers")
			}
			groups, err := s.int("groups", 1, 1, 64)
			if err != nil {
				return err
			}
			c := 0
			var first shape
			for k, r := range rs {
				j, err := ref(s, "layers", i, int(r))
				if err != nil {
					return err
				}
				if k == 0 {
					first = out[j]
				} else if out[j].w != first.w || out[j].h != first.h {
					return errAt(s.Key["layers"], "[route] joins layers of different sizes %dx%d and %dx%d", first.w, first.h, out[j].w, out[j].h)
				}
				c += out[j].c / groups
			}
			cur = shape{first.w, first.h, c}
		case "shortcut":
			r, err := s.floats("from")
			if err != nil {
				return err
			}
			if len(r) != 1 {
				return errAt(s.Line, "[shortcut] needs one from")
			}
			if _, err := ref(s, "from", i, int(r[0])); err != nil {
				return err
			}
		case "yolo":
			h, err := dc.yolo(s, i, cur.w, cur.h, cur.c)
			if err != nil {
				return err
			}
			dc.Heads = append(dc.Heads, h)
		case "dropout", "batchnorm", "scale_channels", "sam":
		default:
			return errAt(s.Line, "section [%s] is not supported (tallyd reads convolutional, maxpool, upsample, route, shortcut and yolo)", s.Name)
		}
		if cur.w < 1 || cur.h < 1 {
			return errAt(s.Line, "[%s] leaves an empty grid", s.Name)
		}
		out[i] = cur
	}
	return nil
}

// yolo reads one [yolo] section whose input is a w x h x c grid.
func (dc *darknetCfg) yolo(s cfgSection, i, w, h, c int) (darknetHead, error) {
	classes, err := s.int("classes", 1, 1, 10000)
	if err != nil {
		return darknetHead{}, err
	}
	anchors, err := s.floats("anchors")
	if err != nil {
		return darknetHead{}, err
	}
	if len(anchors) == 0 || len(anchors)%2 != 0 {
		return darknetHead{}, errAt(s.lineOf("anchors"), "[yolo] anchors must be width,height pairs (found %d values)", len(anchors))
	}
	masks, err := s.floats("mask")
	if err != nil {
		return darknetHead{}, err
	}
	if len(masks) == 0 {
		for k := 0; k < len(anchors)/2; k++ {
			masks = append(masks, float64(k))
		}
	}
	hd := darknetHead{Layer: i, Line: s.Line, Classes: classes, ScaleXY: 1, W: w, H: h, Ch: c}
	for _, m := range masks {
		k := int(m)
		if k < 0 || 2*k+1 >= len(anchors) {
			return darknetHead{}, errAt(s.Key["mask"], "[yolo] mask %v names no anchor (there are %d)", m, len(anchors)/2)
		}
		hd.Anchors = append(hd.Anchors, [2]float64{anchors[2*k], anchors[2*k+1]})
	}
	if v, ok := s.Keys["scale_x_y"]; ok {
		f, err := strconv.ParseFloat(v, 64)
		if err != nil || !(f >= 1 && f <= 4) {
			return darknetHead{}, errAt(s.Key["scale_x_y"], "[yolo] scale_x_y must be within 1..4 (found %q)", v)
		}
		hd.ScaleXY = f
	}
	if nc, ok := s.Keys["new_coords"]; ok && nc != "0" {
		return darknetHead{}, errAt(s.Key["new_coords"], "[yolo] new_coords=%s (scaled-YOLOv4 box formula) is not supported", nc)
	}
	if want := len(hd.Anchors) * (5 + classes); c != want {
		return darknetHead{}, errAt(s.Line, "[yolo] gets %d channels from the layer before it, want %d anchors * (5 + %d classes) = %d",
			c, len(hd.Anchors), classes, want)
	}
	return hd, nil
}

// lineOf is the line of a key, or of the section when the key is absent.
func (s cfgSection) lineOf(key string) int {
	if l, ok := s.Key[key]; ok {
		return l
	}
	return s.Line
}

// headSpec orders the [yolo] heads from the finest grid to the coarsest.
func (dc *darknetCfg) headSpec() *HeadSpec {
	heads := dc.sortedHeads()
	spec := &HeadSpec{From: dc.Path}
	for _, h := range heads {
		spec.Anchors = append(spec.Anchors, h.Anchors)
		spec.ScaleXY = append(spec.ScaleXY, h.ScaleXY)
		spec.Strides = append(spec.Strides, dc.Width/h.W)
	}
	return spec
}

func (dc *darknetCfg) sortedHeads() []darknetHead {
	heads := append([]darknetHead(nil), dc.Heads...)
	for i := 1; i < len(heads); i++ {
		for j := i; j > 0 && heads[j].W > heads[j-1].W; j-- {
			heads[j], heads[j-1] = heads[j-1], heads[j]
		}
	}
	return heads
}

// modelInfo describes the cfg as a model: input "data" [1,3,H,W] and one
// output per [yolo] head, OpenCV's "permute_<layer>" [1,H,W,A*(5+C)], in
// cfg order.
func (dc *darknetCfg) modelInfo() ModelInfo {
	mi := ModelInfo{Producer: "Darknet cfg",
		Inputs: []TensorInfo{{Name: "data", ElemType: elemFloat, Dims: []int64{1, 3, int64(dc.Height), int64(dc.Width)}}}}
	for _, h := range dc.Heads {
		mi.Outputs = append(mi.Outputs, TensorInfo{Name: fmt.Sprintf("permute_%d", h.Layer), ElemType: elemFloat,
			Dims: []int64{1, int64(h.H), int64(h.W), int64(h.Ch)}})
	}
	return mi
}
