package h264enc

import (
	"strings"
	"testing"

	"tallyd/capture/testsrv"
)

// TestEncode: one access unit per picture, an IDR picture with its SPS and
// PPS in front every GOP pictures and only there (ITU-T H.264 table 7-1:
// nal_unit_type 5 is an IDR slice, 7 an SPS, 8 a PPS, 1 any other slice).
func TestEncode(t *testing.T) {
	const w, h, n, gop = 160, 96, 23, 10
	aus, err := Encode(Config{Width: w, Height: h, FPS: 10, GOP: gop}, n, func(i int, bgr []byte) {
		for k := range bgr {
			bgr[k] = byte(k/3%w + 4*i) // a ramp moving right
		}
	})
	if err != nil {
		t.Fatal(err)
	}
	if len(aus) != n {
		t.Fatalf("%d access units, want %d", len(aus), n)
	}
	for i, au := range aus {
		var types []int
		for _, nal := range testsrv.NALUnits(au) {
			types = append(types, testsrv.NALType(nal))
		}
		key := i%gop == 0
		has := func(want int) bool {
			for _, x := range types {
				if x == want {
					return true
				}
			}
			return false
		}
		if testsrv.IsKeyFrame(au) != key || has(7) != key || has(8) != key || has(1) == key {
			t.Errorf("picture %d: NAL unit types %v", i, types)
		}
	}
}

func TestEncodeRejects(t *testing.T) {
	for _, tc := range []struct {
		c    Config
		n    int
		want string
	}{
		{Config{Width: 161, Height: 96, FPS: 10}, 1, "h264enc: size 161x96: want positive even numbers"},
		{Config{Width: 160, Height: 96}, 1, "h264enc: fps 0, 1 pictures: want both positive (fps up to 1000)"},
		{Config{Width: 160, Height: 96, FPS: 10}, 0, "h264enc: fps 10, 0 pictures: want both positive (fps up to 1000)"},
		{Config{Width: 160, Height: 96, FPS: 10, Preset: "warp"}, 1, "h264enc: open libx264:"},
	} {
		_, err := Encode(tc.c, tc.n, func(int, []byte) {})
		if err == nil || !strings.HasPrefix(err.Error(), tc.want) {
			t.Errorf("%+v: %v, want %q", tc.c, err, tc.want)
		}
	}
}
