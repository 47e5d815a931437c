package testsrv

import (
	"bufio"
	"encoding/base64"
	"encoding/binary"
	"fmt"
	"io"
	"net"
	"net/textproto"
	"net/url"
	"strconv"
	"strings"
	"sync"
	"sync/atomic"
	"testing"
	"time"
)

// RTSPOptions configure an RTSP test server.
type RTSPOptions struct {
	Frames Frames  // the camera's pictures (required)
	FPS    float64 // frame rate; default 25
	Path   string  // stream path; default "/live"
	// Username and Password, when set, are required (HTTP Basic
	// authentication, as RFC 2326 section 11.2 allows).
	Username, Password string
}

// RTSPServer is an RTSP 1.0 server (RFC 2326) with one video track sent
// over RTP (RFC 3550), interleaved in the RTSP connection or over UDP, as
// the client asks: Motion-JPEG (RFC 2435, StartRTSP) or H.264 (RFC 6184,
// StartRTSPH264).
type RTSPServer struct {
	camera
	opts  RTSPOptions
	media media

	sessionID atomic.Int64

	mu        sync.Mutex
	transport string // of the latest SETUP
}

// StartRTSP starts an RTSP server on a free loopback port; it stops when the
// test ends.
func StartRTSP(t testing.TB, o RTSPOptions) *RTSPServer {
	t.Helper()
	if o.Frames == nil {
		t.Fatal("testsrv: RTSPOptions.Frames is required")
	}
	if o.Path == "" {
		o.Path = "/live"
	}
	s := &RTSPServer{opts: o, media: jpegMedia{}}
	s.start(t, "rtsp", o.Path, o.Frames, o.FPS, s.serve)
	return s
}

// media is what an RTSP server sends: its session description and, per
// session, a packetizer.
type media interface {
	// sdp is the media description: the m= line and its attributes.
	sdp() string
	// newPacketizer starts the RTP stream of one session.
	newPacketizer() framePacketizer
	// queue is how many frames a session may fall behind before the
	// oldest are dropped (1: newest wins).
	queue() int
}

// framePacketizer turns frame i's data into RTP packets with timestamp ts.
type framePacketizer func(i int, data []byte, ts uint32) ([][]byte, error)

// jpegMedia is Motion-JPEG, payload type 26 (RFC 2435).
type jpegMedia struct{}

func (jpegMedia) sdp() string {
	return "m=video 0 RTP/AVP 26\r\na=rtpmap:26 JPEG/90000\r\na=control:trackID=0\r\n"
}

func (jpegMedia) queue() int { return 1 }

func (jpegMedia) newPacketizer() framePacketizer {
	p := &rtpPacketizer{seq: 1, ssrc: 0x7a11d, mtu: 1400}
	return func(_ int, data []byte, ts uint32) ([][]byte, error) {
		f, err := parseJPEG(data)
		if err != nil {
			return nil, err
		}
		return p.packets(f, ts), nil
	}
}

// LastTransport is "tcp" or "udp": how the latest session asked for media.
func (s *RTSPServer) LastTransport() string {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.transport
}

// rtspConn is one client connection and its (single) session.
type rtspConn struct {
	s   *RTSPServer
	c   net.Conn
	wmu sync.Mutex // serializes responses and interleaved packets

	session   string
	tcp       bool
	rtpChan   byte
	udp       *net.UDPConn // server RTP socket (UDP transport)
	udpRTCP   *net.UDPConn
	udpClient *net.UDPAddr
	setupURL  string

	playing bool
	stop    chan struct{}
	wg      sync.WaitGroup
}

func (s *RTSPServer) serve(c net.Conn) {
	rc := &rtspConn{s: s, c: c, stop: make(chan struct{})}
	defer rc.close()
	br := bufio.NewReader(c)
	tp := textproto.NewReader(br)
	for {
		b, err := br.Peek(1)
		if err != nil {
			return
		}
		if b[0] == '$' { // interleaved RTCP from the client: skip
			var h [4]byte
			if _, err := io.ReadFull(br, h[:]); err != nil {
				return
			}
			if _, err := br.Discard(int(binary.BigEndian.Uint16(h[2:]))); err != nil {
				return
			}
			continue
		}
		line, err := tp.ReadLine()
		if err != nil {
			return
		}
		if line == "" {
			continue
		}
		hdr, err := tp.ReadMIMEHeader()
		if err != nil {
			return
		}
		if n, _ := strconv.Atoi(hdr.Get("Content-Length")); n > 0 {
			if _, err := br.Discard(n); err != nil {
				return
			}
		}
		if !rc.handle(line, hdr) {
			return
		}
	}
}

// handle answers one request; false ends the connection.
func (rc *rtspConn) handle(line string, hdr textproto.MIMEHeader) bool {
	parts := strings.Fields(line)
	if len(parts) != 3 || !strings.HasPrefix(parts[2], "RTSP/") {
		rc.reply(hdr, 400, "Bad Request", nil, "")
		return false
	}
	method, target := parts[0], parts[1]
	u, err := url.Parse(target)
	if err != nil {
		rc.reply(hdr, 400, "Bad Request", nil, "")
		return false
	}
	o := rc.s.opts
	if method != "OPTIONS" && o.Username != "" && !rc.authorized(hdr.Get("Authorization")) {
		rc.reply(hdr, 401, "Unauthorized", []string{`WWW-Authenticate: Basic realm="testsrv"`}, "")
		return true
	}
	path := strings.TrimSuffix(u.Path, "/")
	switch method {
	case "OPTIONS":
		rc.reply(hdr, 200, "OK", []string{"Public: OPTIONS, DESCRIBE, SETUP, PLAY, TEARDOWN, GET_PARAMETER"}, "")
	case "DESCRIBE":
		if path != o.Path {
			rc.reply(hdr, 404, "Not Found", nil, "")
			return true
		}
		sdp := "v=0\r\no=- 1 1 IN IP4 127.0.0.1\r\ns=testsrv\r\nc=IN IP4 0.0.0.0\r\nt=0 0\r\n" + rc.s.media.sdp()
		base := *u
		base.User = nil
		base.Path = o.Path + "/"
		rc.reply(hdr, 200, "OK", []string{"Content-Base: " + base.String(), "Content-Type: application/sdp"}, sdp)
	case "SETUP":
		if !strings.HasPrefix(path, o.Path) {
			rc.reply(hdr, 404, "Not Found", nil, "")
			return true
		}
		tr, ok := rc.setup(hdr.Get("Transport"))
		if !ok {
			rc.reply(hdr, 461, "Unsupported Transport", nil, "")
			return true
		}
		rc.setupURL = target
		rc.s.mu.Lock()
		rc.s.transport = map[bool]string{true: "tcp", false: "udp"}[rc.tcp]
		rc.s.mu.Unlock()
		rc.reply(hdr, 200, "OK", []string{"Transport: " + tr, "Session: " + rc.session + ";timeout=60"}, "")
	case "PLAY":
		if rc.session == "" {
			rc.reply(hdr, 455, "Method Not Valid in This State", nil, "")
			return true
		}
		rc.reply(hdr, 200, "OK", []string{"Session: " + rc.session, "Range: npt=0.000-"}, "")
		rc.play()
	case "TEARDOWN":
		rc.reply(hdr, 200, "OK", []string{"Session: " + rc.session}, "")
		return false
	case "GET_PARAMETER", "SET_PARAMETER", "PAUSE":
		rc.reply(hdr, 200, "OK", []string{"Session: " + rc.session}, "")
	default:
		rc.reply(hdr, 501, "Not Implemented", nil, "")
	}
	return true
}

func (rc *rtspConn) authorized(h string) bool {
	o := rc.s.opts
	want := "Basic " + base64.StdEncoding.EncodeToString([]byte(o.Username+":"+o.Password))
	return h == want
}

// setup picks the transport the client asked for and returns the reply's
// Transport header.
func (rc *rtspConn) setup(req string) (string, bool) {
	if rc.session == "" {
		rc.session = fmt.Sprintf("%08X", 0x1000+rc.s.sessionID.Add(1))
	}
	for _, spec := range strings.Split(req, ",") {
		params := strings.Split(strings.TrimSpace(spec), ";")
		switch {
		case params[0] == "RTP/AVP/TCP":
			rc.tcp, rc.rtpChan = true, 0
			for _, p := range params[1:] {
				if v, ok := strings.CutPrefix(p, "interleaved="); ok {
					a, _, _ := strings.Cut(v, "-")
					if n, err := strconv.Atoi(a); err == nil && n >= 0 && n < 255 {
						rc.rtpChan = byte(n)
					}
				}
			}
			return fmt.Sprintf("RTP/AVP/TCP;unicast;interleaved=%d-%d", rc.rtpChan, rc.rtpChan+1), true
		case params[0] == "RTP/AVP" || params[0] == "RTP/AVP/UDP":
			var cp int
			for _, p := range params[1:] {
				if v, ok := strings.CutPrefix(p, "client_port="); ok {
					a, _, _ := strings.Cut(v, "-")
					cp, _ = strconv.Atoi(a)
				}
				if p == "multicast" {
					cp = 0
				}
			}
			if cp <= 0 || cp > 65534 {
				continue
			}
			host, _, _ := net.SplitHostPort(rc.c.RemoteAddr().String())
			rtp, err1 := net.ListenUDP("udp", &net.UDPAddr{IP: net.IPv4(127, 0, 0, 1)})
			rtcp, err2 := net.ListenUDP("udp", &net.UDPAddr{IP: net.IPv4(127, 0, 0, 1)})
			if err1 != nil || err2 != nil {
				closeUDP(rtp, rtcp)
				return "", false
			}
			closeUDP(rc.udp, rc.udpRTCP)
			rc.tcp, rc.udp, rc.udpRTCP = false, rtp, rtcp
			rc.udpClient = &net.UDPAddr{IP: net.ParseIP(host), Port: cp}
			return fmt.Sprintf("RTP/AVP;unicast;client_port=%d-%d;server_port=%d-%d", cp, cp+1,
				rtp.LocalAddr().(*net.UDPAddr).Port, rtcp.LocalAddr().(*net.UDPAddr).Port), true
		}
	}
	return "", false
}

func closeUDP(cs ...*net.UDPConn) {
	for _, c := range cs {
		if c != nil {
			_ = c.Close()
		}
	}
}

func (rc *rtspConn) reply(req textproto.MIMEHeader, code int, status string, headers []string, body string) {
	var b strings.Builder
	fmt.Fprintf(&b, "RTSP/1.0 %d %s\r\nCSeq: %s\r\nServer: tallyd-testsrv\r\n", code, status, req.Get("CSeq"))
	for _, h := range headers {
		b.WriteString(h + "\r\n")
	}
	if body != "" {
		fmt.Fprintf(&b, "Content-Length: %d\r\n", len(body))
	}
	b.WriteString("\r\n" + body)
	rc.wmu.Lock()
	defer rc.wmu.Unlock()
	_ = rc.c.SetWriteDeadline(time.Now().Add(5 * time.Second))
	_, _ = io.WriteString(rc.c, b.String())
}

// play starts sending the feed's frames to this session.
func (rc *rtspConn) play() {
	if rc.playing {
		return
	}
	rc.playing = true
	sb := rc.s.feed.subscribe(rc.s.media.queue())
	packets := rc.s.media.newPacketizer()
	period := rc.s.feed.period
	rc.wg.Add(1)
	go func() {
		defer rc.wg.Done()
		defer rc.s.feed.unsubscribe(sb)
		for {
			var m frameMsg
			select {
			case <-rc.stop:
				return
			case m = <-sb.ch:
			}
			ts := uint32(int64(m.i) * int64(period) * 90000 / int64(time.Second))
			pkts, err := packets(m.i, m.data, ts)
			if err != nil {
				rc.s.t.Errorf("testsrv: frame %d cannot be sent over RTP: %v", m.i, err)
				return
			}
			for _, pkt := range pkts {
				if err := rc.send(pkt); err != nil {
					_ = rc.c.Close() // the client is gone or stuck: end the connection
					return
				}
			}
		}
	}()
}

func (rc *rtspConn) send(pkt []byte) error {
	if !rc.tcp {
		_, err := rc.udp.WriteToUDP(pkt, rc.udpClient)
		return err
	}
	var h [4]byte
	h[0], h[1] = '$', rc.rtpChan
	binary.BigEndian.PutUint16(h[2:], uint16(len(pkt)))
	rc.wmu.Lock()
	defer rc.wmu.Unlock()
	_ = rc.c.SetWriteDeadline(time.Now().Add(5 * time.Second))
	if _, err := rc.c.Write(h[:]); err != nil {
		return err
	}
	_, err := rc.c.Write(pkt)
	return err
}

func (rc *rtspConn) close() {
	close(rc.stop)
	_ = rc.c.Close()
	rc.wg.Wait()
	closeUDP(rc.udp, rc.udpRTCP)
}
