package testsrv

import (
	"net"
	"net/url"
	"sync"
	"testing"
)

// camera is what the RTSP and MJPEG servers share: a feed of frames served
// on a listener that can stop and restart on the same port.
type camera struct {
	t            testing.TB
	scheme, path string
	feed         *feed
	noRepeat     bool // set before start: see feed.noRepeat
	l            listener
	closeOnce    sync.Once
}

// start serves frames at fps on a free loopback port with serve; the camera
// stops when the test ends.
func (c *camera) start(t testing.TB, scheme, path string, frames Frames, fps float64, serve func(net.Conn)) {
	t.Helper()
	c.t, c.scheme, c.path, c.feed = t, scheme, path, newFeed(frames, fps, c.noRepeat)
	c.l.serve = serve
	c.l.start(t)
	t.Cleanup(c.Close)
}

// URL is the stream's address, without credentials.
func (c *camera) URL() string { return c.scheme + "://" + c.l.address() + c.path }

// URLWithAuth is the stream's address with user:password in it.
func (c *camera) URLWithAuth(user, password string) string {
	u := &url.URL{Scheme: c.scheme, Host: c.l.address(), Path: c.path, User: url.UserPassword(user, password)}
	return u.String()
}

// Addr is the server's host:port.
func (c *camera) Addr() string { return c.l.address() }

// Stop closes the listener and every connection, like a camera that lost
// power; the frame clock pauses until a client watches again.
func (c *camera) Stop() { c.l.stop() }

// Restart listens again on the same port after Stop.
func (c *camera) Restart() { c.l.start(c.t) }

// Stall stops (true) or resumes (false) sending frames while connections
// stay open: an RTSP server still answers requests, an MJPEG server does
// not answer new connections.
func (c *camera) Stall(on bool) { c.feed.stall(on) }

// FramesSent is the number of frames the camera produced so far.
func (c *camera) FramesSent() int { return c.feed.produced() }

// Close stops the server for good; safe to call twice.
func (c *camera) Close() {
	c.closeOnce.Do(func() {
		c.l.stop()
		c.feed.close()
	})
}
