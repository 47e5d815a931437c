package config

import (
	"errors"
	"net"
	"strings"
	"time"
)

// HTTP is the operator's HTTP server: metrics, health, status, snapshots
// with the rules drawn, and the page to draw rules. Off unless Listen is set.
//
// Previews and snapshots show people: keep the server on loopback unless the
// network it is reachable from may see the cameras.
type HTTP struct {
	// Listen is host:port to serve on, e.g. 127.0.0.1:9321 (DefaultHTTPPort
	// when only a host is given). Empty: no server.
	Listen string `yaml:"listen"`
	// Token is required as a bearer token on every request when Listen is
	// not a loopback address. env:NAME or file:PATH (never in the file
	// itself, never logged).
	Token Secret `yaml:"token"`
	// SaveRules lets the page write edited rules back into the site file
	// (atomically) and reload it. Off by default.
	SaveRules bool `yaml:"save_rules"`
	// PreviewFPS is the Motion-JPEG preview's frame rate (default 2, at most
	// MaxPreviewFPS).
	PreviewFPS float64 `yaml:"preview_fps"`
}

// HTTP limits and defaults.
const (
	DefaultHTTPPort   = "9321"
	DefaultPreviewFPS = 2.0
	MaxPreviewFPS     = 15.0
	MinTokenChars     = 16
)

// HTTPAddr is the address to listen on, with the default port filled in;
// "" when the server is off.
func (c *Config) HTTPAddr() string {
	l := strings.TrimSpace(c.HTTP.Listen)
	if l == "" {
		return ""
	}
	var ae *net.AddrError
	if _, _, err := net.SplitHostPort(l); errors.As(err, &ae) && ae.Err == "missing port in address" {
		return net.JoinHostPort(strings.Trim(l, "[]"), DefaultHTTPPort)
	}
	return l
}

// PreviewEvery is the interval between preview frames.
func (c *Config) PreviewEvery() time.Duration {
	fps := c.HTTP.PreviewFPS
	if fps <= 0 {
		fps = DefaultPreviewFPS
	}
	return time.Duration(float64(time.Second) / fps)
}

// http checks the http section.
func (v *validator) http() {
	h := v.c.HTTP
	if h.Listen == "" {
		for _, set := range []struct {
			key string
			on  bool
		}{{"token", h.Token != ""}, {"save_rules", h.SaveRules}, {"preview_fps", h.PreviewFPS != 0}} {
			if set.on {
				v.fail("http."+set.key, "has no effect without http.listen")
			}
		}
		return
	}
	host, port, err := net.SplitHostPort(v.c.HTTPAddr())
	if err != nil {
		v.fail("http.listen", "want host:port such as 127.0.0.1:%s (found %q): %v", DefaultHTTPPort, clip(h.Listen), err)
		return
	}
	if port == "" {
		v.fail("http.listen", "want host:port such as 127.0.0.1:%s (found %q)", DefaultHTTPPort, clip(h.Listen))
	}
	if !isLoopback(host) && h.Token == "" {
		v.fail("http.token", "http.listen %s is reachable from the network: set a token (env:NAME or file:PATH); previews show people", h.Listen)
	}
	if h.Token != "" && len(h.Token.Value()) < MinTokenChars {
		v.fail("http.token", "want at least %d characters (found %d)", MinTokenChars, len(h.Token.Value()))
	}
	if h.PreviewFPS < 0 || h.PreviewFPS > MaxPreviewFPS {
		v.fail("http.preview_fps", "want 0 (default %g) up to %g (found %g)", DefaultPreviewFPS, MaxPreviewFPS, h.PreviewFPS)
	}
}
