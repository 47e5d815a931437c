package testsrv

import (
	"fmt"
	"testing"

	"github.com/pion/rtp"
	"github.com/pion/rtp/codecs"
)

// H264Options configure an RTSP test server that sends H.264.
type H264Options struct {
	// AccessUnits are the coded pictures, one per frame in display order
	// (no B-frames), each an Annex-B byte stream: AccessUnits splits an
	// encoder's output. The first must carry the SPS and PPS. Required.
	AccessUnits [][]byte
	FPS         float64 // frame rate; default 25
	Path        string  // stream path; default "/live"
	// Username and Password, when set, are required (HTTP Basic).
	Username, Password string
	// Loop starts again from the first access unit after the last (which
	// then must be a key frame) instead of falling silent.
	Loop bool
}

// StartRTSPH264 starts an RTSP server on a free loopback port that sends
// the access units as H.264 over RTP (RFC 6184, non-interleaved mode:
// single NAL units, STAP-A for the parameter sets, FU-A for large slices),
// once (or in a loop), like a camera that joined the stream at frame 0. A
// client that connects (or reconnects) mid-stream starts at the current
// frame, whatever its type, as a real camera does; after the last frame the
// server sends nothing unless it loops. It stops when the test ends.
func StartRTSPH264(t testing.TB, o H264Options) *RTSPServer {
	t.Helper()
	if len(o.AccessUnits) == 0 {
		t.Fatal("testsrv: H264Options.AccessUnits is required")
	}
	params, err := findParams(o.AccessUnits[:1])
	if err != nil {
		t.Fatalf("testsrv: first access unit: %v", err)
	}
	if o.Path == "" {
		o.Path = "/live"
	}
	s := &RTSPServer{
		opts:  RTSPOptions{FPS: o.FPS, Path: o.Path, Username: o.Username, Password: o.Password},
		media: h264Media{params: params},
	}
	s.noRepeat = true
	aus := o.AccessUnits
	if o.Loop && !IsKeyFrame(aus[0]) {
		t.Fatal("testsrv: H264Options.Loop needs a key frame first")
	}
	frames := func(i int) []byte {
		if o.Loop && i >= 0 {
			i %= len(aus)
		}
		if i < 0 || i >= len(aus) {
			return nil
		}
		return aus[i]
	}
	s.start(t, "rtsp", o.Path, frames, o.FPS, s.serve)
	return s
}

// payloadH264 is the dynamic RTP payload type the server announces.
const payloadH264 = 96

// h264Media is H.264 over RTP, payload type 96.
type h264Media struct{ params h264Params }

func (m h264Media) sdp() string {
	return fmt.Sprintf("m=video 0 RTP/AVP %d\r\na=rtpmap:%d H264/90000\r\n", payloadH264, payloadH264) +
		m.params.fmtp(payloadH264) + "a=control:trackID=0\r\n"
}

// queue: a coded stream breaks when a picture is skipped, so a session may
// fall up to 64 frames behind before the server drops any.
func (h264Media) queue() int { return 64 }

func (h264Media) newPacketizer() framePacketizer {
	return newH264Packetizer(1400)
}

// newH264Packetizer packetizes access units with pion's H.264 payloader
// into RTP packets of at most mtu bytes; the marker bit is set on the last
// packet of each access unit (RFC 6184 section 5.1).
func newH264Packetizer(mtu int) framePacketizer {
	pl := &codecs.H264Payloader{}
	seq := uint16(1)
	return func(_ int, au []byte, ts uint32) ([][]byte, error) {
		payloads := pl.Payload(uint16(mtu-12), au)
		if len(payloads) == 0 {
			return nil, fmt.Errorf("access unit of %d bytes gave no RTP payload", len(au))
		}
		out := make([][]byte, 0, len(payloads))
		for k, pay := range payloads {
			p := rtp.Packet{
				Header: rtp.Header{Version: 2, PayloadType: payloadH264, SequenceNumber: seq, Timestamp: ts,
					SSRC: 0x264d, Marker: k == len(payloads)-1},
				Payload: pay,
			}
			b, err := p.Marshal()
			if err != nil {
				return nil, err
			}
			out = append(out, b)
			seq++
		}
		return out, nil
	}
}
