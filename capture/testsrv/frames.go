// Package testsrv runs video servers on the loopback interface for tests:
// an RTSP server sending Motion-JPEG or H.264 over RTP (TCP or UDP), an HTTP
// Motion-JPEG server, a server that accepts and stays silent, and a web page
// server. Each picks a free port, can be stopped and restarted on the same
// port, and stops by itself at the end of the test.
package testsrv

import (
	"bytes"
	"image"
	"image/jpeg"
	"sync"

	"tallyd/capture/scene"
)

// Frames gives the JPEG image of frame i (i = 0, 1, ...); nil means there
// are no more frames and the server repeats the last one.
type Frames func(i int) []byte

// EncodeBGR encodes an 8-bit BGR image (as OpenCV and the scene renderer
// hold it) as a baseline 4:2:0 JPEG.
func EncodeBGR(bgr []byte, w, h, quality int) []byte {
	img := image.NewRGBA(image.Rect(0, 0, w, h))
	for i, j := 0, 0; i+2 < len(bgr) && j+3 < len(img.Pix); i, j = i+3, j+4 {
		img.Pix[j], img.Pix[j+1], img.Pix[j+2], img.Pix[j+3] = bgr[i+2], bgr[i+1], bgr[i], 255
	}
	var b bytes.Buffer
	_ = jpeg.Encode(&b, img, &jpeg.Options{Quality: quality})
	return b.Bytes()
}

// SceneFrames serves a generated scene once through: frame i is the scene's
// frame i as a JPEG of the given quality (1..100), nil after the last. The
// scene's size must be a multiple of 8 in both directions for RTSP.
func SceneFrames(sc *scene.Scene, quality int) Frames {
	w, h := sc.Size()
	var (
		mu  sync.Mutex
		buf = make([]byte, w*h*3)
	)
	return func(i int) []byte {
		if i < 0 || i >= sc.Frames() {
			return nil
		}
		mu.Lock()
		defer mu.Unlock()
		sc.Render(i, buf)
		return EncodeBGR(buf, w, h, quality)
	}
}
