package capture

import (
	"bufio"
	"context"
	"crypto/md5"
	"crypto/rand"
	"crypto/tls"
	"encoding/hex"
	"errors"
	"fmt"
	"io"
	"mime"
	"net"
	"net/http"
	"net/textproto"
	"net/url"
	"strconv"
	"strings"
	"syscall"
	"time"
)

// diagnose looks at a stream server that OpenCV could not open and says what
// is wrong: nothing listening, credentials wanted or refused, no such path,
// or an answer that is not video. It returns nil when it finds nothing wrong.
// The probe is one connection, bounded by ctx; the URL's password is only
// sent to the server, never put in the result.
func diagnose(ctx context.Context, u *url.URL, timeout time.Duration) error {
	addr := hostPort(u)
	var d net.Dialer
	conn, err := d.DialContext(ctx, "tcp", addr)
	if err != nil {
		return reasonf(ErrUnreachable, "cannot connect to %s: %s", addr, dialReason(err, timeout))
	}
	defer conn.Close()
	if dl, ok := ctx.Deadline(); ok {
		_ = conn.SetDeadline(dl)
	}
	dial := func() (net.Conn, error) {
		c, err := d.DialContext(ctx, "tcp", addr)
		if err != nil {
			return nil, err
		}
		if dl, ok := ctx.Deadline(); ok {
			_ = c.SetDeadline(dl)
		}
		if strings.EqualFold(u.Scheme, "https") {
			// FFmpeg does not verify certificates by default either.
			c = tls.Client(c, &tls.Config{ServerName: u.Hostname(), InsecureSkipVerify: true})
		}
		return c, nil
	}
	switch strings.ToLower(u.Scheme) {
	case "rtsp":
		return probeRTSP(conn, u, timeout)
	case "http":
		return probeHTTP(conn, u, timeout, dial)
	case "https":
		tc := tls.Client(conn, &tls.Config{ServerName: u.Hostname(), InsecureSkipVerify: true})
		return probeHTTP(tc, u, timeout, dial)
	}
	return nil
}

func hostPort(u *url.URL) string {
	if u.Port() != "" {
		return u.Host
	}
	port := map[string]string{"rtsp": "554", "rtsps": "322", "http": "80", "https": "443"}[strings.ToLower(u.Scheme)]
	return net.JoinHostPort(u.Hostname(), port)
}

func dialReason(err error, timeout time.Duration) string {
	var errno syscall.Errno
	var dnsErr *net.DNSError
	switch {
	case errors.As(err, &errno):
		return errno.Error()
	case errors.As(err, &dnsErr):
		return "unknown host"
	case errors.Is(err, context.DeadlineExceeded), isTimeout(err):
		return fmt.Sprintf("no answer within open_timeout %v", timeout)
	}
	return "network error"
}

func isTimeout(err error) bool {
	var ne net.Error
	return errors.As(err, &ne) && ne.Timeout()
}

func silent(timeout time.Duration) error {
	return reasonf(ErrTimeout, "the server accepted the connection but sent nothing within open_timeout %v", timeout)
}

// probeRTSP sends DESCRIBE (RFC 2326 section 10.2), answering one
// authentication challenge when the URL carries credentials.
func probeRTSP(conn net.Conn, u *url.URL, timeout time.Duration) error {
	clean := *u
	clean.User = nil
	target := clean.String()
	br := bufio.NewReader(conn)
	auth := ""
	for cseq := 1; cseq <= 2; cseq++ {
		req := fmt.Sprintf("DESCRIBE %s RTSP/1.0\r\nCSeq: %d\r\nAccept: application/sdp\r\nUser-Agent: tallyd\r\n", target, cseq)
		if auth != "" {
			req += "Authorization: " + auth + "\r\n"
		}
		if _, err := io.WriteString(conn, req+"\r\n"); err != nil {
			return reasonf(ErrUnreachable, "the server closed the connection")
		}
		resp, err := readRTSPResponse(br)
		if err != nil {
			if isTimeout(err) {
				return silent(timeout)
			}
			return reasonf(ErrNotVideo, "the server did not answer as an RTSP server (%v)", err)
		}
		switch {
		case resp.code == 200:
			return nil
		case resp.code == 401 && u.User == nil:
			return reasonf(ErrUnauthorized, "the server requires credentials (RTSP 401 %s); set username and password", resp.status)
		case resp.code == 401 && auth == "":
			user := u.User.Username()
			pass, _ := u.User.Password()
			auth = authorization(resp.header.Get("WWW-Authenticate"), "DESCRIBE", target, user, pass)
			if auth == "" {
				return reasonf(ErrUnauthorized, "the server asks for an authentication scheme tallyd does not speak (%s)", challengeScheme(resp.header.Get("WWW-Authenticate")))
			}
			if resp.bodyLen > 0 {
				_, _ = io.CopyN(io.Discard, br, int64(resp.bodyLen))
			}
		case resp.code == 401:
			return reasonf(ErrUnauthorized, "the server refused the credentials (RTSP 401 %s)", resp.status)
		case resp.code == 404:
			return reasonf(ErrNotFound, "the server has no stream at %s (RTSP 404 %s)", clean.Path, resp.status)
		default:
			return reasonf(ErrNotVideo, "the server answered RTSP %d %s", resp.code, resp.status)
		}
	}
	return nil
}

type rtspResponse struct {
	code    int
	status  string
	header  textproto.MIMEHeader
	bodyLen int
}

// readRTSPResponse reads a status line and headers ("RTSP/1.0 200 OK").
func readRTSPResponse(br *bufio.Reader) (rtspResponse, error) {
	tp := textproto.NewReader(br)
	line, err := tp.ReadLine()
	if err != nil {
		return rtspResponse{}, err
	}
	return parseRTSPResponse(line, tp)
}

func parseRTSPResponse(line string, tp *textproto.Reader) (rtspResponse, error) {
	proto, rest, ok := strings.Cut(line, " ")
	if !ok || !strings.HasPrefix(proto, "RTSP/") {
		return rtspResponse{}, fmt.Errorf("status line %q", truncate(line, 40))
	}
	codeStr, status, _ := strings.Cut(rest, " ")
	code, err := strconv.Atoi(codeStr)
	if err != nil || code < 100 || code > 999 {
		return rtspResponse{}, fmt.Errorf("status code %q", truncate(codeStr, 10))
	}
	h, err := tp.ReadMIMEHeader()
	if err != nil && !errors.Is(err, io.EOF) {
		return rtspResponse{}, err
	}
	n, _ := strconv.Atoi(h.Get("Content-Length"))
	if n < 0 || n > 1<<20 {
		n = 0
	}
	return rtspResponse{code: code, status: status, header: h, bodyLen: n}, nil
}

func truncate(s string, n int) string {
	if len(s) > n {
		return s[:n] + "…"
	}
	return s
}

// probeHTTP sends a GET and looks at the status and the content type.
// Credentials go as Basic at once (as FFmpeg does); a Digest challenge is
// answered once, on a new connection when the server closed this one.
func probeHTTP(conn net.Conn, u *url.URL, timeout time.Duration, redial func() (net.Conn, error)) error {
	clean := *u
	clean.User = nil
	user, pass, hasCreds := "", "", u.User != nil
	if hasCreds {
		user = u.User.Username()
		pass, _ = u.User.Password()
	}
	auth := ""
	if hasCreds {
		auth = basic(user, pass)
	}
	br := bufio.NewReader(conn)
	for try := 0; try < 2; try++ {
		req, err := http.NewRequest(http.MethodGet, clean.String(), nil)
		if err != nil {
			return nil
		}
		req.Header.Set("User-Agent", "tallyd")
		if auth != "" {
			req.Header.Set("Authorization", auth)
		}
		if err := req.Write(conn); err != nil {
			return reasonf(ErrUnreachable, "the server closed the connection")
		}
		resp, err := http.ReadResponse(br, req)
		if err != nil {
			if isTimeout(err) {
				return silent(timeout)
			}
			return reasonf(ErrNotVideo, "the server did not answer as an HTTP server")
		}
		// The body is not closed: closing drains it, and a video body never
		// ends. The caller closes the connection.
		switch {
		case resp.StatusCode == 401 && !hasCreds:
			return reasonf(ErrUnauthorized, "the server requires credentials (HTTP %s); set username and password", resp.Status)
		case resp.StatusCode == 401 && try == 0 && strings.EqualFold(challengeScheme(resp.Header.Get("WWW-Authenticate")), "digest"):
			auth = authorization(resp.Header.Get("WWW-Authenticate"), "GET", clean.RequestURI(), user, pass)
			if resp.Close || resp.ContentLength < 0 || resp.ContentLength > 1<<16 {
				if conn, err = redial(); err != nil {
					return nil
				}
				defer conn.Close()
				br = bufio.NewReader(conn)
			} else {
				_, _ = io.Copy(io.Discard, resp.Body)
			}
		case resp.StatusCode == 401:
			return reasonf(ErrUnauthorized, "the server refused the credentials (HTTP %s)", resp.Status)
		case resp.StatusCode == 404:
			return reasonf(ErrNotFound, "the server has no stream at %s (HTTP %s)", clean.Path, resp.Status)
		case resp.StatusCode >= 300:
			return reasonf(ErrNotVideo, "the server answered HTTP %s", resp.Status)
		default:
			mt, _, _ := mime.ParseMediaType(resp.Header.Get("Content-Type"))
			switch {
			case mt == "" || mt == "application/octet-stream" || strings.HasPrefix(mt, "multipart/") ||
				strings.HasPrefix(mt, "video/") || strings.HasPrefix(mt, "image/"):
				return nil
			default:
				return reasonf(ErrNotVideo, "the server sent %s, not a video stream", mt)
			}
		}
	}
	return nil
}

func challengeScheme(ch string) string {
	s, _, _ := strings.Cut(strings.TrimSpace(ch), " ")
	if s == "" {
		return "none given"
	}
	return s
}

// authorization answers a Basic or Digest challenge (RFC 7617, RFC 2617 with
// MD5); "" when the scheme is another.
func authorization(challenge, method, uri, user, pass string) string {
	scheme, params, _ := strings.Cut(strings.TrimSpace(challenge), " ")
	switch strings.ToLower(scheme) {
	case "basic":
		return basic(user, pass)
	case "digest":
		p := parseAuthParams(params)
		if alg := strings.ToUpper(p["algorithm"]); alg != "" && alg != "MD5" {
			return ""
		}
		var b [8]byte
		_, _ = rand.Read(b[:])
		return digest(p, method, uri, user, pass, hex.EncodeToString(b[:]))
	}
	return ""
}

// digest answers a Digest challenge's parameters p (RFC 2617 section 3.2.2).
func digest(p map[string]string, method, uri, user, pass, cnonce string) string {
	h := func(s string) string { sum := md5.Sum([]byte(s)); return hex.EncodeToString(sum[:]) }
	ha1 := h(user + ":" + p["realm"] + ":" + pass)
	ha2 := h(method + ":" + uri)
	out := fmt.Sprintf(`Digest username=%q, realm=%q, nonce=%q, uri=%q`, user, p["realm"], p["nonce"], uri)
	if qop := p["qop"]; qop != "" && strings.Contains(qop, "auth") {
		resp := h(ha1 + ":" + p["nonce"] + ":00000001:" + cnonce + ":auth:" + ha2)
		out += fmt.Sprintf(`, qop=auth, nc=00000001, cnonce=%q, response=%q`, cnonce, resp)
	} else {
		out += fmt.Sprintf(`, response=%q`, h(ha1+":"+p["nonce"]+":"+ha2))
	}
	if op, ok := p["opaque"]; ok {
		out += fmt.Sprintf(`, opaque=%q`, op)
	}
	return out
}

func basic(user, pass string) string {
	r := &http.Request{Header: http.Header{}}
	r.SetBasicAuth(user, pass)
	return r.Header.Get("Authorization")
}

// parseAuthParams reads key=value and key="quoted value" pairs.
func parseAuthParams(s string) map[string]string {
	out := map[string]string{}
	for s = strings.TrimSpace(s); s != ""; s = strings.TrimLeft(strings.TrimSpace(s), ",") {
		s = strings.TrimSpace(s)
		k, rest, ok := strings.Cut(s, "=")
		if !ok {
			break
		}
		k = strings.ToLower(strings.TrimSpace(k))
		rest = strings.TrimSpace(rest)
		var v string
		if strings.HasPrefix(rest, `"`) {
			end := strings.Index(rest[1:], `"`)
			if end < 0 {
				v, rest = rest[1:], ""
			} else {
				v, rest = rest[1:1+end], rest[2+end:]
			}
		} else {
			v, rest, _ = strings.Cut(rest, ",")
			v = strings.TrimSpace(v)
		}
		out[k] = v
		s = rest
	}
	return out
}
