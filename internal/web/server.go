// Package web is tallyd's HTTP server for operators: Prometheus metrics,
// health and readiness, per-source status, snapshots and a Motion-JPEG
// preview with the rules drawn, and a page to draw rules. It serves what a
// Site gives it and knows nothing of the pipeline.
//
// Previews and snapshots show people. The server listens on loopback by
// default; anywhere else it requires a bearer token.
package web

import (
	"context"
	"crypto/subtle"
	"encoding/json"
	"errors"
	"fmt"
	"io/fs"
	"log/slog"
	"net"
	"net/http"
	"time"

	"github.com/prometheus/client_golang/prometheus"
	"github.com/prometheus/client_golang/prometheus/promhttp"
)

// Errors a Site returns for the server's status codes.
var (
	ErrNotFound    = errors.New("not found")       // 404
	ErrUnavailable = errors.New("not available")   // 503: no frame yet
	ErrForbidden   = errors.New("not allowed")     // 403: saving is off
	ErrInvalid     = errors.New("invalid request") // 400
)

// Site is what the server shows and edits.
type Site interface {
	// Sources lists the sources with their rules and counts.
	Sources() SitePage
	// Status is each source's status line as JSON-able values.
	Status() any
	// Problems lists why the daemon is not ready (empty: ready).
	Problems() []string
	// Snapshot is a source's newest frame as ".jpg" or ".png", with the
	// overlay unless plain.
	Snapshot(source, ext string, plain bool) ([]byte, error)
	// Rules checks (and with save, writes and reloads) a source's edited
	// rule list.
	Rules(ctx context.Context, source string, rules []Rule, save bool) (RulesResult, error)
}

// SitePage is GET /api/sources.
type SitePage struct {
	Site        string       `json:"site"`
	SaveEnabled bool         `json:"save_enabled"`
	Sources     []SourcePage `json:"sources"`
}

// SourcePage is one source on the page.
type SourcePage struct {
	ID        string          `json:"id"`
	State     string          `json:"state"`
	Width     int             `json:"width"`
	Height    int             `json:"height"`
	Rules     []Rule          `json:"rules"`
	Totals    json.RawMessage `json:"totals"`
	Occupancy map[string]int  `json:"occupancy"`
}

// Rule is a rule as the site file writes it, coordinates as fractions of
// the frame.
type Rule struct {
	Name    string       `json:"name"`
	Line    [][2]float64 `json:"line,omitempty"`
	Zone    [][2]float64 `json:"zone,omitempty"`
	Classes []string     `json:"classes,omitempty"`
	Anchor  string       `json:"anchor,omitempty"`
	Dwell   string       `json:"dwell,omitempty"`
	Band    *float64     `json:"band,omitempty"`
}

// RulesResult is the answer to a rules check or save.
type RulesResult struct {
	OK     bool        `json:"ok"`
	YAML   string      `json:"yaml"`
	Errors []RuleError `json:"errors"`
	Saved  string      `json:"saved,omitempty"`  // the file written
	Reload string      `json:"reload,omitempty"` // what the reload did
}

// RuleError is one problem, located at the rule (Index in the posted list,
// -1 when not about one rule).
type RuleError struct {
	Rule    string `json:"rule"`
	Index   int    `json:"index"`
	Message string `json:"message"`
}

// Options configure the server.
type Options struct {
	Addr string // host:port
	// Token, when set, is required as "Authorization: Bearer <token>" (or
	// the cookie the page gets) on every request but /healthz.
	Token      string
	PreviewFPS float64 // Motion-JPEG preview rate (default 2)
	Gatherer   prometheus.Gatherer
	Log        *slog.Logger
}

// Server serves a Site over HTTP.
type Server struct {
	opts Options
	site Site
	log  *slog.Logger
	srv  *http.Server
	ln   net.Listener
}

// MaxBodyBytes bounds a request body (a rule list).
const MaxBodyBytes = 256 << 10

// Listen binds the address; Serve then serves on it. Binding first lets the
// caller fail before starting anything else and learn the port (":0").
func Listen(site Site, opts Options) (*Server, error) {
	if opts.Log == nil {
		opts.Log = slog.New(slog.DiscardHandler)
	}
	if opts.PreviewFPS <= 0 {
		opts.PreviewFPS = 2
	}
	ln, err := net.Listen("tcp", opts.Addr)
	if err != nil {
		return nil, fmt.Errorf("http: listen on %s: %w", opts.Addr, err)
	}
	s := &Server{opts: opts, site: site, log: opts.Log, ln: ln}
	s.srv = &http.Server{Handler: s.Handler(), ReadHeaderTimeout: 10 * time.Second, ErrorLog: slog.NewLogLogger(opts.Log.Handler(), slog.LevelWarn)}
	return s, nil
}

// Addr is the address the server listens on.
func (s *Server) Addr() string { return s.ln.Addr().String() }

// Run serves until ctx is cancelled, then shuts down (open previews are
// closed).
func (s *Server) Run(ctx context.Context) error {
	errc := make(chan error, 1)
	go func() { errc <- s.srv.Serve(s.ln) }()
	s.log.Info("http server listening", "addr", s.Addr(), "token", s.opts.Token != "")
	select {
	case err := <-errc:
		return fmt.Errorf("http: %w", err)
	case <-ctx.Done():
	}
	sctx, cancel := context.WithTimeout(context.Background(), time.Second)
	defer cancel()
	if err := s.srv.Shutdown(sctx); err != nil {
		_ = s.srv.Close()
	}
	return nil
}

// Handler is the server's routes (tests use it without a listener).
func (s *Server) Handler() http.Handler {
	mux := http.NewServeMux()
	mux.HandleFunc("GET /healthz", func(w http.ResponseWriter, _ *http.Request) {
		writeJSON(w, http.StatusOK, map[string]any{"status": "ok"})
	})
	mux.HandleFunc("GET /readyz", s.ready)
	if s.opts.Gatherer != nil {
		mux.Handle("GET /metrics", promhttp.HandlerFor(s.opts.Gatherer, promhttp.HandlerOpts{ErrorLog: slog.NewLogLogger(s.log.Handler(), slog.LevelWarn)}))
	}
	mux.HandleFunc("GET /api/status", func(w http.ResponseWriter, _ *http.Request) { writeJSON(w, http.StatusOK, s.site.Status()) })
	mux.HandleFunc("GET /api/sources", func(w http.ResponseWriter, _ *http.Request) { writeJSON(w, http.StatusOK, s.site.Sources()) })
	mux.HandleFunc("GET /api/sources/{id}/snapshot.jpg", s.snapshot(".jpg"))
	mux.HandleFunc("GET /api/sources/{id}/snapshot.png", s.snapshot(".png"))
	mux.HandleFunc("GET /api/sources/{id}/preview.mjpg", s.preview)
	mux.HandleFunc("POST /api/sources/{id}/rules/check", s.rules(false))
	mux.HandleFunc("POST /api/sources/{id}/rules/save", s.rules(true))
	page, _ := fs.Sub(pageFS, "page")
	mux.Handle("GET /", http.FileServerFS(page))
	return s.auth(securityHeaders(mux))
}

func (s *Server) ready(w http.ResponseWriter, _ *http.Request) {
	probs := s.site.Problems()
	if len(probs) > 0 {
		writeJSON(w, http.StatusServiceUnavailable, map[string]any{"ready": false, "problems": probs})
		return
	}
	writeJSON(w, http.StatusOK, map[string]any{"ready": true, "problems": []string{}})
}

func (s *Server) snapshot(ext string) http.HandlerFunc {
	return func(w http.ResponseWriter, r *http.Request) {
		b, err := s.site.Snapshot(r.PathValue("id"), ext, r.URL.Query().Get("plain") == "1")
		if err != nil {
			writeError(w, err)
			return
		}
		w.Header().Set("Content-Type", map[string]string{".jpg": "image/jpeg", ".png": "image/png"}[ext])
		w.Header().Set("Cache-Control", "no-store")
		_, _ = w.Write(b)
	}
}

// preview streams snapshots as multipart/x-mixed-replace (Motion-JPEG over
// HTTP, which browsers show in an <img>) at PreviewFPS.
func (s *Server) preview(w http.ResponseWriter, r *http.Request) {
	id := r.PathValue("id")
	first, err := s.site.Snapshot(id, ".jpg", false)
	if err != nil && !errors.Is(err, ErrUnavailable) {
		writeError(w, err)
		return
	}
	const boundary = "tallydframe"
	w.Header().Set("Content-Type", "multipart/x-mixed-replace; boundary="+boundary)
	w.Header().Set("Cache-Control", "no-store")
	rc := http.NewResponseController(w)
	t := time.NewTicker(time.Duration(float64(time.Second) / s.opts.PreviewFPS))
	defer t.Stop()
	b := first
	for {
		if b != nil {
			if _, err := fmt.Fprintf(w, "--%s\r\nContent-Type: image/jpeg\r\nContent-Length: %d\r\n\r\n", boundary, len(b)); err != nil {
				return
			}
			if _, err := w.Write(append(b, '\r', '\n')); err != nil {
				return
			}
			if err := rc.Flush(); err != nil {
				return
			}
		}
		select {
		case <-r.Context().Done():
			return
		case <-t.C:
		}
		b, err = s.site.Snapshot(id, ".jpg", false)
		if err != nil {
			b = nil
		}
	}
}

func (s *Server) rules(save bool) http.HandlerFunc {
	return func(w http.ResponseWriter, r *http.Request) {
		var body struct {
			Rules []Rule `json:"rules"`
		}
		dec := json.NewDecoder(http.MaxBytesReader(w, r.Body, MaxBodyBytes))
		dec.DisallowUnknownFields()
		if err := dec.Decode(&body); err != nil {
			writeError(w, fmt.Errorf("%w: request body: %v", ErrInvalid, err))
			return
		}
		res, err := s.site.Rules(r.Context(), r.PathValue("id"), body.Rules, save)
		if err != nil {
			writeError(w, err)
			return
		}
		if res.Errors == nil {
			res.Errors = []RuleError{}
		}
		code := http.StatusOK
		if save && !res.OK {
			code = http.StatusBadRequest
		}
		writeJSON(w, code, res)
	}
}

func writeJSON(w http.ResponseWriter, code int, v any) {
	w.Header().Set("Content-Type", "application/json")
	w.Header().Set("Cache-Control", "no-store")
	w.WriteHeader(code)
	_ = json.NewEncoder(w).Encode(v)
}

func writeError(w http.ResponseWriter, err error) {
	code := http.StatusInternalServerError
	switch {
	case errors.Is(err, ErrNotFound):
		code = http.StatusNotFound
	case errors.Is(err, ErrUnavailable):
		code = http.StatusServiceUnavailable
	case errors.Is(err, ErrForbidden):
		code = http.StatusForbidden
	case errors.Is(err, ErrInvalid):
		code = http.StatusBadRequest
	}
	writeJSON(w, code, map[string]string{"error": err.Error()})
}

// securityHeaders keeps the page from being framed or sniffed, and from
// loading anything from elsewhere.
func securityHeaders(h http.Handler) http.Handler {
	return http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		w.Header().Set("X-Content-Type-Options", "nosniff")
		w.Header().Set("X-Frame-Options", "DENY")
		w.Header().Set("Content-Security-Policy", "default-src 'self'; img-src 'self' data: blob:; style-src 'self' 'unsafe-inline'")
		w.Header().Set("Referrer-Policy", "no-referrer")
		h.ServeHTTP(w, r)
	})
}

// tokenCookie carries the token for the page's images and previews, which
// cannot send an Authorization header.
const tokenCookie = "tallyd_token"

// auth requires the token (bearer header or cookie) on every request but
// /healthz. Opening "/?token=T" once sets the cookie and redirects to "/",
// so the token leaves the address bar.
func (s *Server) auth(h http.Handler) http.Handler {
	if s.opts.Token == "" {
		return h
	}
	want := []byte(s.opts.Token)
	ok := func(got string) bool { return got != "" && subtle.ConstantTimeCompare([]byte(got), want) == 1 }
	return http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		if r.URL.Path == "/healthz" {
			h.ServeHTTP(w, r)
			return
		}
		if t := r.URL.Query().Get("token"); r.URL.Path == "/" && ok(t) {
			http.SetCookie(w, &http.Cookie{Name: tokenCookie, Value: t, Path: "/", HttpOnly: true, SameSite: http.SameSiteStrictMode, Secure: r.TLS != nil})
			http.Redirect(w, r, "/", http.StatusSeeOther)
			return
		}
		if got, found := bearer(r); found && ok(got) {
			h.ServeHTTP(w, r)
			return
		}
		if c, err := r.Cookie(tokenCookie); err == nil && ok(c.Value) {
			h.ServeHTTP(w, r)
			return
		}
		w.Header().Set("WWW-Authenticate", `Bearer realm="tallyd"`)
		writeJSON(w, http.StatusUnauthorized, map[string]string{"error": "a bearer token is required (Authorization: Bearer <token>)"})
	})
}

func bearer(r *http.Request) (string, bool) {
	const prefix = "Bearer "
	h := r.Header.Get("Authorization")
	if len(h) > len(prefix) && h[:len(prefix)] == prefix {
		return h[len(prefix):], true
	}
	return "", false
}

func discard() *slog.Logger { return slog.New(slog.DiscardHandler) }
