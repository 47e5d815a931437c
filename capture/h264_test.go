package capture

import (
	"context"
	"errors"
	"fmt"
	"math"
	"sync"
	"testing"
	"time"

	"gocv.io/x/gocv"

	"tallyd/capture/scene"
	"tallyd/capture/testsrv"
	"tallyd/capture/testsrv/h264enc"
	"tallyd/internal/testkit"
)

// Each test picture carries its own number: a row of stampBits square
// blocks, black for 0 and white for 1, in the top-left corner (the last bit
// is an even-parity bit). A decoded picture whose blocks are not clearly
// black or white was not decoded from a complete chain of references.
const (
	stampBits  = 12
	stampBlock = 16 // one macroblock, so that each bit codes on its own
)

// stamp writes number i into a BGR picture w pixels wide.
func stamp(bgr []byte, w, i int) {
	parity := 0
	for b := range stampBits {
		bit := i >> b & 1
		if b == stampBits-1 {
			bit = parity
		}
		parity ^= bit
		for y := range stampBlock {
			for x := b * stampBlock; x < (b+1)*stampBlock; x++ {
				p := bgr[(y*w+x)*3:]
				p[0], p[1], p[2] = byte(255*bit), byte(255*bit), byte(255*bit)
			}
		}
	}
}

// readStamp reads the number back from a decoded picture; an error says the
// picture is damaged (a block neither black nor white, or bad parity).
func readStamp(m gocv.Mat) (int, error) {
	n, parity := 0, 0
	for b := range stampBits {
		sum, count := 0, 0
		for y := 4; y < stampBlock-4; y++ { // the block's middle: no edge ringing
			for x := b*stampBlock + 4; x < (b+1)*stampBlock-4; x++ {
				v := m.GetVecbAt(y, x)
				sum += int(v[0]) + int(v[1]) + int(v[2])
				count += 3
			}
		}
		mean := sum / count
		var bit int
		switch {
		case mean < 48:
		case mean > 207:
			bit = 1
		default:
			return 0, fmt.Errorf("bit %d is grey (mean %d)", b, mean)
		}
		parity ^= bit
		if b < stampBits-1 {
			n |= bit << b
		}
	}
	if parity != 0 {
		return 0, errors.New("parity error")
	}
	return n, nil
}

// h264Stream is a short stamped walkway scene coded as H.264.
type h264Stream struct {
	sc      *scene.Scene
	frames  int // pictures served: the first frames of the scene
	gop     int
	aus     [][]byte
	w, h    int
	renderM sync.Mutex
	buf     []byte
}

func newH264Stream(t testing.TB, frames, gop int) *h264Stream {
	t.Helper()
	s := &h264Stream{sc: testScene(t), frames: frames, gop: gop}
	s.w, s.h = s.sc.Size()
	s.buf = make([]byte, s.w*s.h*3)
	var err error
	// A second of pictures more than the test reads: the decoder holds a
	// few back (frame threads), and after the last the camera falls silent.
	s.aus, err = h264enc.Encode(h264enc.Config{Width: s.w, Height: s.h, FPS: 25, GOP: gop}, frames+25, s.render)
	if err != nil {
		t.Fatal(err)
	}
	return s
}

func (s *h264Stream) render(i int, bgr []byte) {
	s.sc.Render(i, bgr)
	stamp(bgr, s.w, i)
}

// psnr compares the brightness of a decoded picture with that of source
// picture i, in dB (colour is left out: 4:2:0 sampling halves it before any
// coding).
func (s *h264Stream) psnr(t testing.TB, m gocv.Mat, i int) float64 {
	s.renderM.Lock()
	defer s.renderM.Unlock()
	s.render(i, s.buf)
	ref, err := gocv.NewMatFromBytes(s.h, s.w, gocv.MatTypeCV8UC3, s.buf)
	if err != nil {
		t.Fatal(err)
	}
	defer ref.Close()
	a, b := gocv.NewMat(), gocv.NewMat()
	defer a.Close()
	defer b.Close()
	gocv.CvtColor(m, &a, gocv.ColorBGRToGray)
	gocv.CvtColor(ref, &b, gocv.ColorBGRToGray)
	l2 := gocv.NormWithMats(a, b, gocv.NormL2)
	mse := l2 * l2 / float64(s.w*s.h)
	return 10 * math.Log10(255*255/max(mse, 1e-9))
}

// decoded is one picture as the test read it.
type decoded struct {
	conn  int64
	index int
	psnr  float64
}

// TestRTSPH264 reads H.264 over RTSP (media interleaved in the RTSP
// connection, and over UDP) from the loopback camera: every picture arrives
// once, in order, decoded to what was sent. Mid-stream the camera drops
// the connection and comes back; the client reconnects into the middle of
// a group of pictures, and the decoder hands out nothing until the next
// key frame: no damaged or repeated picture, none skipped after it.
func TestRTSPH264(t *testing.T) {
	const (
		frames = 150 // 6 s at 25 fps
		gop    = 25  // one key frame a second
	)
	stream := newH264Stream(t, frames, gop)
	for _, transport := range []string{"tcp", "udp"} {
		t.Run(transport, func(t *testing.T) {
			t.Parallel()
			srv := testsrv.StartRTSPH264(t, testsrv.H264Options{AccessUnits: stream.aus, FPS: 25})
			log, logs := testLogger()
			spec := SourceSpec{ID: "quay", URL: srv.URL(), Transport: transport,
				OpenTimeout: 5 * time.Second, ReadTimeout: 3 * time.Second}
			r := NewReconnecting(spec, Backoff{Min: 50 * time.Millisecond, Max: 100 * time.Millisecond}, log)
			defer r.Close()
			info, err := r.Connect()
			if err != nil {
				t.Fatal(err)
			}
			if info.Width != stream.w || info.Height != stream.h || !info.Live {
				t.Fatalf("info = %+v", info)
			}
			if got := srv.LastTransport(); got != transport {
				t.Fatalf("server saw transport %q, want %q", got, transport)
			}
			ctx, cancel := context.WithTimeout(context.Background(), 30*time.Second)
			defer cancel()
			m := gocv.NewMat()
			defer m.Close()
			var (
				got      []decoded
				resumeAt = -1 // first picture the camera sent after it came back
				losses   int
			)
			for len(got) == 0 || got[len(got)-1].index < frames-1 {
				_, err := r.ReadContext(ctx, &m)
				if errors.Is(err, ErrDisconnected) {
					losses++
					continue
				}
				if err != nil {
					t.Fatalf("read after %d pictures: %v\n%s", len(got), err, logs)
				}
				d := decoded{conn: r.Link().Conn}
				if d.index, err = readStamp(m); err != nil {
					t.Fatalf("picture %d on connection %d is damaged: %v", len(got), d.conn, err)
				}
				d.psnr = stream.psnr(t, m, d.index)
				got = append(got, d)
				if d.conn == 1 && d.index >= 2*gop+gop/2 && resumeAt < 0 { // mid-way through a group of pictures
					srv.Stop()
					resumeAt = srv.FramesSent()
					srv.Restart()
				}
			}
			if resumeAt < 0 || losses != 1 {
				t.Fatalf("camera restarted at %d, %d losses seen; want one", resumeAt, losses)
			}
			// The next key frame at or after the first picture sent on the
			// new connection: H.264 decodes from an IDR picture on (ITU-T
			// H.264 section 8.2.1: an IDR picture resets every reference).
			key := (resumeAt + gop - 1) / gop * gop
			worst := math.Inf(1)
			next := 0
			for k, d := range got {
				want := next
				if d.conn == 2 && (k == 0 || got[k-1].conn == 1) {
					want = key
				}
				if d.index != want {
					t.Errorf("picture %d (connection %d) is number %d, want %d", k, d.conn, d.index, want)
				}
				next = d.index + 1
				worst = min(worst, d.psnr)
			}
			// 30 dB: a picture decoded from the right references at the
			// encoder's default quality (libx264 CRF 23) is well above this,
			// one built on missing ones far below (common practice).
			if worst < 30 {
				t.Errorf("worst picture %.1f dB from its source, want >= 30 dB", worst)
			}
			t.Logf("%d pictures over %s; camera back at picture %d, decoding resumed at key frame %d; worst %.1f dB",
				len(got), transport, resumeAt, key, worst)
			testkit.WaitFor(t, 5*time.Second, "the link to report up", func() bool { return r.Link().State == StateUp })
		})
	}
}
