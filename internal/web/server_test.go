package web

import (
	"context"
	"fmt"
	"io"
	"mime"
	"mime/multipart"
	"net/http"
	"net/http/httptest"
	"strings"
	"testing"
	"time"
)

// stubSite answers with fixed values; problems and frames can be changed.
type stubSite struct {
	problems []string
	frame    []byte
	rules    []Rule // last posted
}

func (s *stubSite) Sources() SitePage { return SitePage{Site: "ferry-terminal"} }
func (s *stubSite) Status() any       { return map[string]any{"sources": []any{}} }
func (s *stubSite) Problems() []string {
	return s.problems
}
func (s *stubSite) Snapshot(source, ext string, plain bool) ([]byte, error) {
	switch {
	case source != "walkway":
		return nil, fmt.Errorf("%w: no source %q", ErrNotFound, source)
	case s.frame == nil:
		return nil, fmt.Errorf("%w: no frame yet", ErrUnavailable)
	}
	return s.frame, nil
}
func (s *stubSite) Rules(_ context.Context, source string, rules []Rule, save bool) (RulesResult, error) {
	s.rules = rules
	if save {
		return RulesResult{}, fmt.Errorf("%w: saving is off", ErrForbidden)
	}
	return RulesResult{OK: true, YAML: "rules: []\n"}, nil
}

func newTestServer(t *testing.T, site Site, token string) *httptest.Server {
	t.Helper()
	s := &Server{opts: Options{Token: token, PreviewFPS: 20}, site: site, log: discard()}
	ts := httptest.NewServer(s.Handler())
	t.Cleanup(ts.Close)
	return ts
}

func do(t *testing.T, method, url, auth, body string) (*http.Response, string) {
	t.Helper()
	req, err := http.NewRequest(method, url, strings.NewReader(body))
	if err != nil {
		t.Fatal(err)
	}
	if auth != "" {
		req.Header.Set("Authorization", auth)
	}
	c := &http.Client{CheckRedirect: func(*http.Request, []*http.Request) error { return http.ErrUseLastResponse }}
	resp, err := c.Do(req)
	if err != nil {
		t.Fatal(err)
	}
	defer resp.Body.Close()
	b, _ := io.ReadAll(resp.Body)
	return resp, string(b)
}

func TestRoutes(t *testing.T) {
	site := &stubSite{}
	ts := newTestServer(t, site, "")
	for _, c := range []struct {
		method, path, body string
		code               int
		contains           string
	}{
		{"GET", "/healthz", "", 200, `"ok"`},
		{"GET", "/readyz", "", 200, `"ready":true`},
		{"GET", "/api/sources", "", 200, `"site":"ferry-terminal"`},
		{"GET", "/api/status", "", 200, `"sources"`},
		{"GET", "/api/sources/walkway/snapshot.jpg", "", 503, "no frame yet"},
		{"GET", "/api/sources/nowhere/snapshot.png", "", 404, `no source \"nowhere\"`},
		{"POST", "/api/sources/walkway/rules/check", `{"rules":[{"name":"gate","line":[[0.1,0.5],[0.9,0.5]]}]}`, 200, `"ok":true`},
		{"POST", "/api/sources/walkway/rules/check", `{"rules":[{"name":"gate","colour":"red"}]}`, 400, `unknown field \"colour\"`},
		{"POST", "/api/sources/walkway/rules/check", `{"rules":` + strings.Repeat(" ", MaxBodyBytes) + `[]}`, 400, "request body too large"},
		{"POST", "/api/sources/walkway/rules/save", `{"rules":[]}`, 403, "saving is off"},
		{"GET", "/", "", 200, "<"},
	} {
		resp, body := do(t, c.method, ts.URL+c.path, "", c.body)
		if resp.StatusCode != c.code || !strings.Contains(body, c.contains) {
			t.Errorf("%s %s: %d %q, want %d containing %q", c.method, c.path, resp.StatusCode, body, c.code, c.contains)
		}
	}
	if site.rules == nil || len(site.rules) != 0 {
		t.Errorf("the last posted list (an empty save) reached the site as %v", site.rules)
	}
	site.problems = []string{"nats: not connected to nats://127.0.0.1:4222"}
	if resp, body := do(t, "GET", ts.URL+"/readyz", "", ""); resp.StatusCode != 503 || !strings.Contains(body, "not connected") {
		t.Errorf("readyz with a problem: %d %s", resp.StatusCode, body)
	}
}

// TestToken: with a token every route but /healthz needs it, as a bearer
// header or as the cookie that opening /?token= sets; the token never
// appears in a response.
func TestToken(t *testing.T) {
	const token = "s3cret-token-for-tests"
	ts := newTestServer(t, &stubSite{frame: []byte("jpeg")}, token)
	for _, c := range []struct {
		path, auth string
		code       int
	}{
		{"/healthz", "", 200},
		{"/readyz", "", 401},
		{"/metrics", "", 401},
		{"/api/sources", "", 401},
		{"/api/sources", "Bearer wrong-token-xxxxxxxxx", 401},
		{"/api/sources", "Basic " + token, 401},
		{"/api/sources", "Bearer " + token, 200},
		{"/api/sources/walkway/snapshot.jpg", "Bearer " + token, 200},
		{"/", "", 401},
	} {
		resp, body := do(t, "GET", ts.URL+c.path, c.auth, "")
		if resp.StatusCode != c.code {
			t.Errorf("GET %s auth %q: %d, want %d", c.path, c.auth, resp.StatusCode, c.code)
		}
		if strings.Contains(body, token) {
			t.Errorf("GET %s: the response shows the token", c.path)
		}
	}
	resp, _ := do(t, "GET", ts.URL+"/?token="+token, "", "")
	if resp.StatusCode != http.StatusSeeOther || resp.Header.Get("Location") != "/" {
		t.Fatalf("/?token=: %d %s, want a redirect to /", resp.StatusCode, resp.Header.Get("Location"))
	}
	var cookie *http.Cookie
	for _, c := range resp.Cookies() {
		if c.Name == tokenCookie {
			cookie = c
		}
	}
	if cookie == nil || !cookie.HttpOnly || cookie.SameSite != http.SameSiteStrictMode {
		t.Fatalf("cookie %+v: want HttpOnly, SameSite=Strict", cookie)
	}
	req, _ := http.NewRequest("GET", ts.URL+"/api/sources/walkway/snapshot.jpg", nil)
	req.AddCookie(cookie)
	r2, err := http.DefaultClient.Do(req)
	if err != nil {
		t.Fatal(err)
	}
	r2.Body.Close()
	if r2.StatusCode != 200 {
		t.Errorf("snapshot with the cookie: %d", r2.StatusCode)
	}
	if resp, _ := do(t, "GET", ts.URL+"/?token=wrong", "", ""); resp.StatusCode != 401 {
		t.Errorf("/?token=wrong: %d, want 401", resp.StatusCode)
	}
}

// TestPreview reads a few parts of the Motion-JPEG preview with the
// standard library's multipart reader.
func TestPreview(t *testing.T) {
	ts := newTestServer(t, &stubSite{frame: []byte("\xff\xd8jpeg\xff\xd9")}, "")
	ctx, cancel := context.WithTimeout(context.Background(), 5*time.Second)
	defer cancel()
	req, _ := http.NewRequestWithContext(ctx, "GET", ts.URL+"/api/sources/walkway/preview.mjpg", nil)
	resp, err := http.DefaultClient.Do(req)
	if err != nil {
		t.Fatal(err)
	}
	defer resp.Body.Close()
	mt, params, err := mime.ParseMediaType(resp.Header.Get("Content-Type"))
	if err != nil || mt != "multipart/x-mixed-replace" {
		t.Fatalf("content type %q: %v", resp.Header.Get("Content-Type"), err)
	}
	mr := multipart.NewReader(resp.Body, params["boundary"])
	for i := range 3 {
		part, err := mr.NextPart()
		if err != nil {
			t.Fatalf("part %d: %v", i, err)
		}
		b, _ := io.ReadAll(part)
		if part.Header.Get("Content-Type") != "image/jpeg" || string(b) != "\xff\xd8jpeg\xff\xd9" {
			t.Errorf("part %d: %q %q", i, part.Header.Get("Content-Type"), b)
		}
	}
	cancel()
	// An unknown source is a 404, not a stream.
	if resp, _ := do(t, "GET", ts.URL+"/api/sources/nowhere/preview.mjpg", "", ""); resp.StatusCode != 404 {
		t.Errorf("preview of an unknown source: %d", resp.StatusCode)
	}
}
