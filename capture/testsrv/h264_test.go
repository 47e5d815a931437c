package testsrv

import (
	"bytes"
	"encoding/base64"
	"strings"
	"testing"

	"github.com/pion/rtp"
	"github.com/pion/rtp/codecs"
)

// Hand-made NAL units: the first byte is forbidden_zero_bit, nal_ref_idc
// and nal_unit_type (ITU-T H.264 section 7.3.1); a slice header starts with
// first_mb_in_slice in ue(v) coding, where a leading 1 bit means 0.
var (
	testSPS    = []byte{0x67, 0x64, 0x00, 0x1e, 0xac, 0xd9}
	testPPS    = []byte{0x68, 0xeb, 0xe3, 0xcb}
	testSEI    = []byte{0x06, 0x05, 0x01, 0x02, 0x80}
	testAUD    = []byte{0x09, 0xf0}
	idrFirst   = append([]byte{0x65, 0x88}, bytes.Repeat([]byte{0x11}, 3000)...) // first_mb 0
	idrSecond  = []byte{0x65, 0x4c, 0x22, 0x33}                                  // first_mb 1: same picture
	pFirst     = []byte{0x41, 0x9a, 0x24, 0x6c}
	pFirstNext = []byte{0x41, 0x9e, 0x42, 0x78}
)

func annexB(four bool, nals ...[]byte) []byte {
	var b []byte
	for _, n := range nals {
		if four {
			b = append(b, 0)
		}
		b = append(b, 0, 0, 1)
		b = append(b, n...)
	}
	return b
}

func TestAccessUnits(t *testing.T) {
	// Mixed 3- and 4-byte start codes and trailing zero bytes (annex B.2).
	stream := annexB(true, testSPS, testPPS, testSEI)
	stream = append(stream, annexB(false, idrFirst, idrSecond)...)
	stream = append(stream, 0, 0) // trailing_zero_8bits
	stream = append(stream, annexB(true, testAUD, pFirst)...)
	stream = append(stream, annexB(false, pFirstNext)...)

	nals := NALUnits(stream)
	if len(nals) != 8 || !bytes.Equal(nals[4], idrSecond) || !bytes.Equal(nals[7], pFirstNext) {
		t.Fatalf("NAL units: %d, %x", len(nals), nals)
	}
	aus := AccessUnits(stream)
	want := [][]byte{
		annexB(true, testSPS, testPPS, testSEI, idrFirst, idrSecond),
		annexB(true, testAUD, pFirst),
		annexB(true, pFirstNext),
	}
	if len(aus) != len(want) {
		t.Fatalf("%d access units, want %d", len(aus), len(want))
	}
	for i := range want {
		if !bytes.Equal(aus[i], want[i]) {
			t.Errorf("access unit %d:\n got % x\nwant % x", i, aus[i][:min(40, len(aus[i]))], want[i][:min(40, len(want[i]))])
		}
	}
	if !IsKeyFrame(aus[0]) || IsKeyFrame(aus[1]) || IsKeyFrame(aus[2]) {
		t.Error("key frames misread")
	}
	if got := NALUnits([]byte{1, 2, 3}); got != nil {
		t.Errorf("no start code: %x", got)
	}
}

// TestH264PacketsReassemble: the packets of an access unit respect the MTU,
// only the last has the marker bit (RFC 6184 section 5.1), sequence numbers
// run on across access units, and pion's depacketizer (an independent
// reader of RFC 6184) gives back the NAL units sent (SPS and PPS in a STAP-A,
// the large slice in FU-A fragments).
func TestH264PacketsReassemble(t *testing.T) {
	packetize := newH264Packetizer(500)
	aus := [][]byte{
		annexB(true, testAUD, testSPS, testPPS, testSEI, idrFirst, idrSecond),
		annexB(true, pFirst),
	}
	wantNALs := [][][]byte{{testSPS, testPPS, testSEI, idrFirst, idrSecond}, {pFirst}} // no AUD: RFC 6184 drops it
	seq := uint16(0)
	for i, au := range aus {
		pkts, err := packetize(i, au, uint32(3600*i))
		if err != nil {
			t.Fatal(err)
		}
		if i == 0 && len(pkts) < 7 {
			t.Fatalf("%d packets for a 3 kB access unit at MTU 500", len(pkts))
		}
		var (
			d   codecs.H264Packet
			out []byte
		)
		for k, b := range pkts {
			if len(b) > 500 {
				t.Errorf("access unit %d packet %d: %d bytes", i, k, len(b))
			}
			var p rtp.Packet
			if err := p.Unmarshal(b); err != nil {
				t.Fatal(err)
			}
			if p.Marker != (k == len(pkts)-1) || p.PayloadType != 96 || p.Timestamp != uint32(3600*i) {
				t.Errorf("access unit %d packet %d header %+v", i, k, p.Header)
			}
			if i+k > 0 && p.SequenceNumber != seq+1 {
				t.Errorf("sequence %d after %d", p.SequenceNumber, seq)
			}
			seq = p.SequenceNumber
			nal, err := d.Unmarshal(p.Payload)
			if err != nil {
				t.Fatalf("access unit %d packet %d: %v", i, k, err)
			}
			out = append(out, nal...)
		}
		if got := NALUnits(out); !equalNALs(got, wantNALs[i]) {
			t.Errorf("access unit %d: depacketized %d NAL units, want %d", i, len(got), len(wantNALs[i]))
		}
	}
}

func equalNALs(a, b [][]byte) bool {
	if len(a) != len(b) {
		return false
	}
	for i := range a {
		if !bytes.Equal(a[i], b[i]) {
			return false
		}
	}
	return true
}

// TestH264SDP: the session description announces packetization-mode 1,
// the profile and level from the SPS (profile_idc, constraint flags,
// level_idc: RFC 6184 section 8.1) and both parameter sets.
func TestH264SDP(t *testing.T) {
	p, err := findParams([][]byte{annexB(true, testSPS, testPPS, idrFirst)})
	if err != nil {
		t.Fatal(err)
	}
	sdp := h264Media{params: p}.sdp()
	want := "a=fmtp:96 packetization-mode=1;profile-level-id=64001E;sprop-parameter-sets=" +
		base64.StdEncoding.EncodeToString(testSPS) + "," + base64.StdEncoding.EncodeToString(testPPS) + "\r\n"
	if !strings.Contains(sdp, "m=video 0 RTP/AVP 96\r\na=rtpmap:96 H264/90000\r\n") || !strings.Contains(sdp, want) {
		t.Errorf("sdp:\n%s\nwant the line\n%s", sdp, want)
	}
	if _, err := findParams([][]byte{annexB(true, pFirst)}); err == nil {
		t.Error("no parameter sets: no error")
	}
}
