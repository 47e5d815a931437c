// Package h264enc encodes pictures as H.264 for the test servers: a
// camera's stream, encoded once per test with libx264 through Debian's
// libavcodec (which libopencv-dev already brings). It is the cgo half of
// testsrv's H.264 support, kept apart so that testsrv stays pure Go.
//
// OpenCV's own video writer also reaches libx264, but OpenCV 4.6 passes no
// encoder options to it: it writes x264's defaults (a key frame every 250
// pictures and B-frames), which no test of a reconnecting camera can use.
package h264enc

/*
#cgo pkg-config: libavcodec libavutil libswscale
#include <stdlib.h>
#include "x264.h"
*/
import "C"

import (
	"errors"
	"fmt"
	"math"
	"strings"
	"unsafe"

	"tallyd/capture/scene"
	"tallyd/capture/testsrv"
)

// Config describes the stream to encode.
type Config struct {
	Width, Height int     // picture size in pixels (even numbers for 4:2:0)
	FPS           float64 // frame rate written into the stream's timing
	// GOP is the key frame interval in pictures: pictures 0, GOP, 2*GOP, ...
	// are IDR pictures (0: one per second of FPS).
	GOP int
	// Preset is libx264's speed preset (default "veryfast").
	Preset string
	// CRF is libx264's constant rate factor (default 23; lower is better).
	CRF int
}

// Encode renders n pictures with render (8-bit BGR, Width*Height*3 bytes,
// the buffer reused between calls) and returns their access units, one per
// picture, each an Annex-B byte stream. There are no B-frames (IP
// cameras' usual setting, common practice), so display and decoding order
// agree, and every IDR picture carries the SPS and PPS in front of it.
func Encode(c Config, n int, render func(i int, bgr []byte)) ([][]byte, error) {
	if c.Width <= 0 || c.Height <= 0 || c.Width%2 != 0 || c.Height%2 != 0 {
		return nil, fmt.Errorf("h264enc: size %dx%d: want positive even numbers", c.Width, c.Height)
	}
	if !(c.FPS > 0 && c.FPS <= 1000) || n <= 0 {
		return nil, fmt.Errorf("h264enc: fps %v, %d pictures: want both positive (fps up to 1000)", c.FPS, n)
	}
	if c.GOP <= 0 {
		c.GOP = max(1, int(math.Round(c.FPS)))
	}
	if c.Preset == "" {
		c.Preset = "veryfast"
	}
	if c.CRF == 0 {
		c.CRF = 23
	}
	num, den := int(math.Round(c.FPS*1000)), 1000
	preset := C.CString(c.Preset)
	defer C.free(unsafe.Pointer(preset))
	var cErr *C.char
	e := C.tallyd_x264_open(C.int(c.Width), C.int(c.Height), C.int(num), C.int(den), C.int(c.GOP), preset, C.int(c.CRF), &cErr)
	if e == nil {
		return nil, cError(cErr)
	}
	defer C.tallyd_x264_close(e)

	// Spare bytes after the picture: the colour conversion's vector code
	// may read a little past the end of the last row.
	bgr := C.calloc(C.size_t(c.Width*c.Height*3+256), 1)
	defer C.free(bgr)
	buf := unsafe.Slice((*byte)(bgr), c.Width*c.Height*3)
	aus := make([][]byte, 0, n)
	drain := func() error {
		for {
			var (
				data      *C.uint8_t
				size, key C.int
				pts       C.int64_t
			)
			switch C.tallyd_x264_receive(e, &data, &size, &pts, &key, &cErr) {
			case 0:
				return nil
			case -1:
				return cError(cErr)
			}
			i := len(aus)
			if int64(pts) != int64(i) {
				return fmt.Errorf("h264enc: coded picture %d has presentation index %d (reordered)", i, int64(pts))
			}
			au := C.GoBytes(unsafe.Pointer(data), size)
			if k := testsrv.IsKeyFrame(au); k != (i%c.GOP == 0) || k != (key != 0) {
				return fmt.Errorf("h264enc: picture %d: IDR %v, want one every %d pictures", i, k, c.GOP)
			}
			aus = append(aus, au)
		}
	}
	for i := range n {
		render(i, buf)
		if C.tallyd_x264_send(e, (*C.uint8_t)(bgr), C.int(c.Width*3), C.int64_t(i), &cErr) != 0 {
			return nil, cError(cErr)
		}
		if err := drain(); err != nil {
			return nil, err
		}
	}
	if C.tallyd_x264_send(e, nil, 0, 0, &cErr) != 0 {
		return nil, cError(cErr)
	}
	if err := drain(); err != nil {
		return nil, err
	}
	if len(aus) != n {
		return nil, fmt.Errorf("h264enc: %d pictures sent, %d coded", n, len(aus))
	}
	return aus, nil
}

// cError turns a message the C side allocated into an error and frees it.
func cError(msg *C.char) error {
	if msg == nil {
		return errors.New("h264enc: unknown error")
	}
	defer C.free(unsafe.Pointer(msg))
	return fmt.Errorf("h264enc: %s", strings.TrimSpace(C.GoString(msg)))
}

// Scene encodes a generated scene's frames at the scene's size, then extra
// copies of the last frame (a static picture codes to a few bytes), so that
// a client that lags still sees the whole scene before the stream ends.
func Scene(sc *scene.Scene, fps float64, gop, extra int) ([][]byte, error) {
	w, h := sc.Size()
	n := sc.Frames()
	return Encode(Config{Width: w, Height: h, FPS: fps, GOP: gop}, n+extra, func(i int, bgr []byte) {
		sc.Render(min(i, n-1), bgr)
	})
}
