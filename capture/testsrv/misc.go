package testsrv

import (
	"io"
	"net"
	"net/http"
	"net/http/httptest"
	"testing"
)

// StartSilent starts a TCP server on a free loopback port that accepts
// connections, reads what comes and never answers: a camera that hangs. It
// returns host:port; the server stops when the test ends.
func StartSilent(t testing.TB) string {
	t.Helper()
	l := &listener{serve: func(c net.Conn) { _, _ = io.Copy(io.Discard, c) }}
	l.start(t)
	t.Cleanup(l.stop)
	return l.address()
}

// StartPage starts an HTTP server that answers every request with body of
// the given content type (e.g. a web page where a stream was expected) and
// returns its base URL.
func StartPage(t testing.TB, contentType, body string) string {
	t.Helper()
	s := httptest.NewServer(http.HandlerFunc(func(w http.ResponseWriter, _ *http.Request) {
		w.Header().Set("Content-Type", contentType)
		_, _ = io.WriteString(w, body)
	}))
	t.Cleanup(s.Close)
	return s.URL
}

// ClosedAddr returns a loopback host:port where nothing listens: a port
// that was free a moment ago, then closed.
func ClosedAddr(t testing.TB) string {
	t.Helper()
	ln, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	addr := ln.Addr().String()
	_ = ln.Close()
	return addr
}
