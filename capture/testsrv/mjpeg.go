package testsrv

import (
	"bufio"
	"fmt"
	"net"
	"net/http"
	"testing"
	"time"
)

// MJPEGOptions configure an HTTP Motion-JPEG test server.
type MJPEGOptions struct {
	Frames Frames  // the camera's pictures (required)
	FPS    float64 // frame rate; default 25
	Path   string  // stream path; default "/video.mjpg"
	// Username and Password, when set, are required (HTTP Basic).
	Username, Password string
}

// MJPEGServer serves a camera as multipart/x-mixed-replace JPEG parts over
// HTTP/1.1, the way many IP cameras do. While stalled it accepts
// connections and sends nothing.
type MJPEGServer struct {
	camera
	opts MJPEGOptions
}

const boundary = "tallydframe"

// StartMJPEG starts an MJPEG server on a free loopback port; it stops when
// the test ends.
func StartMJPEG(t testing.TB, o MJPEGOptions) *MJPEGServer {
	t.Helper()
	if o.Frames == nil {
		t.Fatal("testsrv: MJPEGOptions.Frames is required")
	}
	if o.Path == "" {
		o.Path = "/video.mjpg"
	}
	s := &MJPEGServer{opts: o}
	s.start(t, "http", o.Path, o.Frames, o.FPS, s.serve)
	return s
}

func (s *MJPEGServer) serve(c net.Conn) {
	req, err := http.ReadRequest(bufio.NewReader(c))
	if err != nil {
		return
	}
	o := s.opts
	if o.Username != "" {
		if u, p, ok := req.BasicAuth(); !ok || u != o.Username || p != o.Password {
			writeResponse(c, 401, "Unauthorized", "text/plain", []string{`WWW-Authenticate: Basic realm="testsrv"`}, "credentials required\n")
			return
		}
	}
	if req.URL.Path != o.Path {
		writeResponse(c, 404, "Not Found", "text/plain", nil, "no such stream\n")
		return
	}
	sb := s.feed.subscribe(1)
	defer s.feed.unsubscribe(sb)
	// A closed connection ends the wait below: watch for it.
	gone := make(chan struct{})
	go func() {
		var b [1]byte
		_, _ = c.Read(b[:])
		close(gone)
	}()
	headerSent := false
	for {
		var m frameMsg
		select {
		case <-gone:
			return
		case m = <-sb.ch:
		}
		_ = c.SetWriteDeadline(time.Now().Add(5 * time.Second))
		if !headerSent {
			if _, err := fmt.Fprintf(c, "HTTP/1.1 200 OK\r\nContent-Type: multipart/x-mixed-replace; boundary=%s\r\n"+
				"Cache-Control: no-cache\r\nConnection: close\r\n\r\n", boundary); err != nil {
				return
			}
			headerSent = true
		}
		if _, err := fmt.Fprintf(c, "--%s\r\nContent-Type: image/jpeg\r\nContent-Length: %d\r\n\r\n", boundary, len(m.data)); err != nil {
			return
		}
		if _, err := c.Write(append(m.data, '\r', '\n')); err != nil {
			return
		}
	}
}

func writeResponse(c net.Conn, code int, status, ctype string, headers []string, body string) {
	_ = c.SetWriteDeadline(time.Now().Add(5 * time.Second))
	fmt.Fprintf(c, "HTTP/1.1 %d %s\r\nContent-Type: %s\r\nContent-Length: %d\r\nConnection: close\r\n", code, status, ctype, len(body))
	for _, h := range headers {
		fmt.Fprintf(c, "%s\r\n", h)
	}
	fmt.Fprintf(c, "\r\n%s", body)
}
