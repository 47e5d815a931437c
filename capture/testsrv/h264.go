package testsrv

import (
	"bytes"
	"encoding/base64"
	"errors"
	"fmt"
)

// H.264 NAL unit types (ITU-T H.264, table 7-1) the server looks at.
const (
	nalSlice = 1 // coded slice of a non-IDR picture
	nalIDR   = 5 // coded slice of an IDR picture
	nalSEI   = 6
	nalSPS   = 7
	nalPPS   = 8
	nalAUD   = 9 // access unit delimiter
)

// NALUnits splits an Annex-B byte stream (ITU-T H.264, annex B) into its NAL
// units, without start codes. Trailing zero bytes of a unit belong to the
// next start code (annex B.2) and are dropped.
func NALUnits(stream []byte) [][]byte {
	var out [][]byte
	start := -1 // first byte of the current unit
	for i := 0; i+2 < len(stream); {
		if stream[i] != 0 || stream[i+1] != 0 || stream[i+2] != 1 {
			i++
			continue
		}
		if start >= 0 {
			out = appendNAL(out, stream[start:i])
		}
		i += 3
		start = i
	}
	if start >= 0 && start < len(stream) {
		out = appendNAL(out, stream[start:])
	}
	return out
}

func appendNAL(out [][]byte, n []byte) [][]byte {
	n = bytes.TrimRight(n, "\x00")
	if len(n) == 0 {
		return out
	}
	return append(out, n)
}

// NALType is the nal_unit_type of a NAL unit (its first byte's low 5 bits).
func NALType(nal []byte) int {
	if len(nal) == 0 {
		return 0
	}
	return int(nal[0] & 0x1f)
}

// AccessUnits groups an Annex-B stream into access units, one per coded
// picture, each returned as Annex-B again (4-byte start codes). A new access
// unit starts at an access unit delimiter, SEI, SPS or PPS that follows a
// picture's slices, or at a slice whose first_mb_in_slice is 0 (the first
// bit of its header is 1, ue(v) coding of 0); ITU-T H.264 section 7.4.1.2.3.
func AccessUnits(stream []byte) [][]byte {
	var (
		out     [][]byte
		cur     []byte
		haveVCL bool
	)
	flush := func() {
		if len(cur) > 0 {
			out = append(out, cur)
		}
		cur, haveVCL = nil, false
	}
	for _, n := range NALUnits(stream) {
		switch t := NALType(n); {
		case t == nalSlice || t == nalIDR:
			if haveVCL && len(n) > 1 && n[1]&0x80 != 0 {
				flush()
			}
			haveVCL = true
		case t == nalAUD || t == nalSEI || t == nalSPS || t == nalPPS || (t >= 14 && t <= 18):
			if haveVCL {
				flush()
			}
		}
		cur = append(cur, 0, 0, 0, 1)
		cur = append(cur, n...)
	}
	flush()
	return out
}

// IsKeyFrame reports whether an access unit holds an IDR picture.
func IsKeyFrame(au []byte) bool {
	for _, n := range NALUnits(au) {
		if NALType(n) == nalIDR {
			return true
		}
	}
	return false
}

// h264Params are the parameter sets a session description announces.
type h264Params struct{ sps, pps []byte }

// findParams takes the first SPS and PPS of the stream.
func findParams(aus [][]byte) (h264Params, error) {
	var p h264Params
	for _, au := range aus {
		for _, n := range NALUnits(au) {
			switch NALType(n) {
			case nalSPS:
				if p.sps == nil {
					p.sps = n
				}
			case nalPPS:
				if p.pps == nil {
					p.pps = n
				}
			}
		}
		if p.sps != nil && p.pps != nil {
			if len(p.sps) < 4 {
				return p, fmt.Errorf("SPS of %d bytes is too short", len(p.sps))
			}
			return p, nil
		}
	}
	return p, errors.New("no SPS and PPS in the stream")
}

// fmtp is the SDP format parameter line for payload type pt (RFC 6184
// section 8.1): non-interleaved mode (1), the profile and level from the
// SPS, and both parameter sets base64-coded.
func (p h264Params) fmtp(pt int) string {
	return fmt.Sprintf("a=fmtp:%d packetization-mode=1;profile-level-id=%02X%02X%02X;sprop-parameter-sets=%s,%s\r\n",
		pt, p.sps[1], p.sps[2], p.sps[3],
		base64.StdEncoding.EncodeToString(p.sps), base64.StdEncoding.EncodeToString(p.pps))
}
