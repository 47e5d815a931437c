package testsrv

import (
	"bytes"
	"encoding/binary"
	"testing"
)

// TestPacketsReassemble: the packets of a frame carry its scan in order, the
// fragment offsets add up, only the last has the marker bit, and the first
// carries both quantization tables (RFC 2435 sections 3.1 and 3.1.8).
func TestPacketsReassemble(t *testing.T) {
	bgr := make([]byte, 64*48*3)
	for i := range bgr {
		bgr[i] = byte(i * 7)
	}
	f, err := parseJPEG(EncodeBGR(bgr, 64, 48, 90))
	if err != nil {
		t.Fatal(err)
	}
	if f.width != 64 || f.height != 48 || f.typ != 1 || len(f.qtables) != 2 {
		t.Fatalf("parsed %dx%d type %d with %d tables", f.width, f.height, f.typ, len(f.qtables))
	}
	p := &rtpPacketizer{seq: 65534, ssrc: 9, mtu: 200}
	pkts := p.packets(f, 1234)
	if len(pkts) < 3 {
		t.Fatalf("%d packets; want the frame split", len(pkts))
	}
	var scan []byte
	for i, pkt := range pkts {
		if len(pkt) > 200 {
			t.Errorf("packet %d is %d bytes", i, len(pkt))
		}
		if seq := binary.BigEndian.Uint16(pkt[2:]); seq != uint16(65534+i) {
			t.Errorf("packet %d seq %d", i, seq)
		}
		if marker := pkt[1]&0x80 != 0; marker != (i == len(pkts)-1) || pkt[1]&0x7f != 26 {
			t.Errorf("packet %d: byte 1 = %#x", i, pkt[1])
		}
		j := pkt[12:]
		off := int(j[1])<<16 | int(j[2])<<8 | int(j[3])
		if off != len(scan) || j[4] != 1 || j[5] != 255 || j[6] != 8 || j[7] != 6 {
			t.Errorf("packet %d JPEG header % x, offset want %d", i, j[:8], len(scan))
		}
		data := j[8:]
		if i == 0 {
			if n := binary.BigEndian.Uint16(data[2:]); n != 128 || !bytes.Equal(data[4:68], f.qtables[0]) {
				t.Errorf("quantization header % x", data[:4])
			}
			data = data[4+128:]
		}
		scan = append(scan, data...)
	}
	if !bytes.Equal(scan, f.scan) {
		t.Error("reassembled scan differs")
	}
}

func TestParseJPEGRejects(t *testing.T) {
	for name, b := range map[string][]byte{
		"empty":    nil,
		"not jpeg": []byte("GIF89a"),
		"odd size": EncodeBGR(make([]byte, 30*20*3), 30, 20, 80),
	} {
		if _, err := parseJPEG(b); err == nil {
			t.Errorf("%s: no error", name)
		}
	}
}
