package testsrv

import (
	"encoding/binary"
	"errors"
	"fmt"
)

// jpegFrame is what RTP/JPEG (RFC 2435) carries of a baseline JPEG: the size,
// the sampling type, the quantization tables and the entropy-coded scan. The
// receiver rebuilds the headers with the standard Huffman tables, which are
// the ones image/jpeg writes.
type jpegFrame struct {
	width, height int
	typ           byte     // 0: 4:2:2, 1: 4:2:0 (RFC 2435 section 4.1)
	qtables       [][]byte // 64 bytes each, zig-zag order, luma first
	scan          []byte
}

// parseJPEG splits a baseline JPEG as written by image/jpeg (three
// components, 8-bit tables, no restart markers).
func parseJPEG(b []byte) (jpegFrame, error) {
	var f jpegFrame
	if len(b) < 4 || b[0] != 0xFF || b[1] != 0xD8 {
		return f, errors.New("not a JPEG (no SOI marker)")
	}
	i := 2
	for i+4 <= len(b) {
		if b[i] != 0xFF {
			return f, fmt.Errorf("no marker at byte %d", i)
		}
		marker := b[i+1]
		n := int(binary.BigEndian.Uint16(b[i+2:]))
		if n < 2 || i+2+n > len(b) {
			return f, fmt.Errorf("segment %#x runs past the end", marker)
		}
		seg := b[i+4 : i+2+n]
		switch marker {
		case 0xDB: // DQT: one or more tables
			for len(seg) >= 65 {
				if seg[0]>>4 != 0 {
					return f, errors.New("16-bit quantization table")
				}
				f.qtables = append(f.qtables, seg[1:65])
				seg = seg[65:]
			}
		case 0xC0: // SOF0
			if len(seg) < 6+3*3 || seg[5] != 3 {
				return f, errors.New("want a baseline frame with 3 components")
			}
			f.height = int(binary.BigEndian.Uint16(seg[1:]))
			f.width = int(binary.BigEndian.Uint16(seg[3:]))
			switch seg[7] {
			case 0x21:
				f.typ = 0
			case 0x22:
				f.typ = 1
			default:
				return f, fmt.Errorf("luma sampling %#x is neither 4:2:2 nor 4:2:0", seg[7])
			}
		case 0xC1, 0xC2, 0xC3:
			return f, errors.New("not a baseline JPEG")
		case 0xDD:
			return f, errors.New("restart markers are not supported")
		case 0xDA: // SOS: the scan runs to EOI
			start := i + 2 + n
			end := len(b)
			if end >= 2 && b[end-2] == 0xFF && b[end-1] == 0xD9 {
				end -= 2
			}
			f.scan = b[start:end]
			if f.width == 0 || len(f.qtables) < 2 {
				return f, errors.New("scan before frame header or tables")
			}
			if f.width%8 != 0 || f.height%8 != 0 || f.width > 2040 || f.height > 2040 {
				return f, fmt.Errorf("size %dx%d: RTP/JPEG wants multiples of 8 up to 2040", f.width, f.height)
			}
			return f, nil
		}
		i += 2 + n
	}
	return f, errors.New("no scan (SOS marker) found")
}

// rtpPacketizer turns JPEG frames into RTP packets (RFC 3550 header, payload
// type 26, 90 kHz clock) with the RFC 2435 JPEG header; the quantization
// tables travel in-band (Q = 255) in the first packet of every frame.
type rtpPacketizer struct {
	seq  uint16
	ssrc uint32
	mtu  int // largest RTP packet
}

const payloadJPEG = 26

func (p *rtpPacketizer) packets(f jpegFrame, ts uint32) [][]byte {
	var out [][]byte
	qlen := 64 * len(f.qtables[:2])
	for off := 0; off < len(f.scan) || off == 0; {
		hdr := 12 + 8
		if off == 0 {
			hdr += 4 + qlen
		}
		n := min(p.mtu-hdr, len(f.scan)-off)
		pkt := make([]byte, hdr+n)
		pkt[0] = 0x80 // version 2
		pkt[1] = payloadJPEG
		if off+n == len(f.scan) {
			pkt[1] |= 0x80 // marker: last packet of the frame
		}
		binary.BigEndian.PutUint16(pkt[2:], p.seq)
		binary.BigEndian.PutUint32(pkt[4:], ts)
		binary.BigEndian.PutUint32(pkt[8:], p.ssrc)
		j := pkt[12:]
		j[0] = 0 // type-specific
		j[1], j[2], j[3] = byte(off>>16), byte(off>>8), byte(off)
		j[4] = f.typ
		j[5] = 255 // Q >= 128: tables in-band
		j[6] = byte(f.width / 8)
		j[7] = byte(f.height / 8)
		k := 20
		if off == 0 {
			pkt[k], pkt[k+1] = 0, 0 // MBZ, precision: 8-bit tables
			binary.BigEndian.PutUint16(pkt[k+2:], uint16(qlen))
			k += 4
			for _, t := range f.qtables[:2] {
				k += copy(pkt[k:], t)
			}
		}
		copy(pkt[k:], f.scan[off:off+n])
		out = append(out, pkt)
		p.seq++
		off += n
		if n == 0 {
			break
		}
	}
	return out
}
