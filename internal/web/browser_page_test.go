package web

import (
	"bytes"
	"context"
	"encoding/json"
	"fmt"
	"io"
	"math"
	"net/http"
	"os"
	"os/exec"
	"path/filepath"
	"reflect"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/chromedp/chromedp"
)

// chromiumPath finds Debian's chromium; the test skips without one.
func chromiumPath(t *testing.T) string {
	for _, name := range []string{"chromium", "chromium-browser"} {
		if p, err := exec.LookPath(name); err == nil {
			return p
		}
	}
	t.Skip("no chromium on PATH (make setup installs Debian's chromium package)")
	return ""
}

// browserPage drives one tab of a headless Chromium.
type browserPage struct {
	t   *testing.T
	ctx context.Context

	mu      sync.Mutex
	console []chromedp.ConsoleMessage
}

// openBrowser starts a headless Chromium with a fresh profile; the test's
// cleanup stops it and fails the test if the page wrote an error or threw.
func openBrowser(t *testing.T) *browserPage {
	t.Helper()
	exe := chromiumPath(t)
	profile, err := os.MkdirTemp("", "tallyd-chromium-")
	if err != nil {
		t.Fatal(err)
	}
	alloc, cancelAlloc := chromedp.NewExecAllocator(context.Background(),
		chromedp.ExecPath(exe),
		chromedp.Headless, chromedp.NoSandbox, chromedp.DisableGPU, chromedp.NoFirstRun,
		chromedp.Flag("disable-quic", true),
		chromedp.Flag("disable-background-networking", true),
		chromedp.Flag("disable-component-update", true),
		chromedp.Flag("disable-sync", true),
		chromedp.UserDataDir(profile),
		chromedp.WindowSize(1280, 900),
	)
	tab, cancelTab := chromedp.NewContext(alloc)
	p := &browserPage{t: t}
	t.Cleanup(func() {
		cancelTab()
		cancelAlloc()
		// Chromium's helpers can still write in the profile for a moment.
		for range 50 {
			if os.RemoveAll(profile) == nil {
				break
			}
			time.Sleep(100 * time.Millisecond)
		}
		p.mu.Lock()
		defer p.mu.Unlock()
		for _, m := range p.console {
			// A snapshot of a source without a frame is a 503 the page expects.
			expected := m.Source == "network" && strings.Contains(m.URL, "/snapshot.") && strings.Contains(m.Text, "503")
			switch {
			case expected:
				t.Logf("page console (expected): %s (%s)", m, m.URL)
			case m.IsException() || m.Type == chromedp.ConsoleError:
				t.Errorf("page console: %s (%s:%d)", m, m.URL, m.Line+1)
			}
		}
	})
	if err := chromedp.Do(tab); err != nil { // starts the browser, without a deadline
		t.Fatalf("starting %s: %v", exe, err)
	}
	messages := chromedp.Console(tab)
	go func() {
		for m, err := range messages {
			if err != nil {
				return
			}
			p.mu.Lock()
			p.console = append(p.console, m)
			p.mu.Unlock()
		}
	}()
	ctx, cancel := context.WithTimeout(tab, 60*time.Second)
	t.Cleanup(cancel)
	p.ctx = ctx
	return p
}

func (p *browserPage) do(steps ...chromedp.Action[chromedp.Void]) {
	p.t.Helper()
	if err := chromedp.Do(p.ctx, steps...); err != nil {
		p.t.Fatal(err)
	}
}

func evalJS[T any](p *browserPage, expr string) T {
	p.t.Helper()
	v, err := chromedp.Run(p.ctx, chromedp.Evaluate[T](expr))
	if err != nil {
		p.t.Fatalf("evaluating %s: %v", expr, err)
	}
	return v
}

func jsString(s string) string {
	b, _ := json.Marshal(s)
	return string(b)
}

// waitJS waits until the expression is truthy.
func (p *browserPage) waitJS(what, expr string) {
	p.t.Helper()
	_, err := chromedp.Run(p.ctx, chromedp.Poll[chromedp.Void](expr, chromedp.WithPollingTimeout(10*time.Second)))
	if err != nil {
		p.t.Fatalf("waiting for %s (%s): %v", what, expr, err)
	}
}

// checks is how many times the editor has called rules/check.
func (p *browserPage) checks() int {
	p.t.Helper()
	return evalJS[int](p, `tallyd.editor.checks`)
}

// waitChecked waits for a check newer than n, and for no edit to be pending.
func (p *browserPage) waitChecked(n int, what string) {
	p.t.Helper()
	p.waitJS(what, fmt.Sprintf(`tallyd.editor.checks > %d && tallyd.editor.idle()`, n))
}

// rules is the editor's rule list, as the page would post it.
func (p *browserPage) rules() []testRule {
	p.t.Helper()
	var rules []testRule
	if err := json.Unmarshal([]byte(p.rulesJSON()), &rules); err != nil {
		p.t.Fatal(err)
	}
	return rules
}

func (p *browserPage) rulesJSON() string {
	p.t.Helper()
	return evalJS[string](p, `JSON.stringify(tallyd.editor.rules())`)
}

func (p *browserPage) text(sel string) string {
	p.t.Helper()
	s, err := chromedp.Run(p.ctx, chromedp.TextContent(chromedp.CSS(sel)))
	if err != nil {
		p.t.Fatalf("text of %s: %v", sel, err)
	}
	return s
}

func (p *browserPage) exists(sel string) bool {
	p.t.Helper()
	return evalJS[bool](p, fmt.Sprintf(`document.querySelector(%s) !== null`, jsString(sel)))
}

func (p *browserPage) hasClass(sel, class string) bool {
	p.t.Helper()
	return evalJS[bool](p, fmt.Sprintf(`document.querySelector(%s).classList.contains(%s)`, jsString(sel), jsString(class)))
}

func (p *browserPage) clickButton(sel string) {
	p.t.Helper()
	p.do(chromedp.Click(chromedp.CSS(sel)))
}

// screen is a point of the frame (fractions) in the viewport's CSS pixels.
func (p *browserPage) screen(f [2]float64) [2]float64 {
	p.t.Helper()
	r := evalJS[[4]float64](p, `(() => { const r = document.querySelector("#frame").getBoundingClientRect(); return [r.left, r.top, r.width, r.height]; })()`)
	return [2]float64{r[0] + f[0]*r[2], r[1] + f[1]*r[3]}
}

// tolerance is how far a drawn fraction may be from the aimed one: a CSS
// pixel of the frame and the 4-decimal rounding.
func (p *browserPage) tolerance() float64 {
	p.t.Helper()
	w := evalJS[float64](p, `document.querySelector("#frame").getBoundingClientRect().width`)
	return 1/w + 1e-4
}

func (p *browserPage) handleCenter(rule, point int) [2]float64 {
	p.t.Helper()
	sel := fmt.Sprintf(`#frame .handle[data-rule="%d"][data-point="%d"]`, rule, point)
	r := evalJS[[4]float64](p, fmt.Sprintf(`(() => { const r = document.querySelector(%s).getBoundingClientRect(); return [r.left, r.top, r.width, r.height]; })()`, jsString(sel)))
	return [2]float64{r[0] + r[2]/2, r[1] + r[3]/2}
}

// handles reads the points of a rule from its drawn handles.
func (p *browserPage) handles(rule int) [][2]float64 {
	p.t.Helper()
	return evalJS[[][2]float64](p, fmt.Sprintf(`[...document.querySelectorAll('#frame .handle[data-rule="%d"]')].map(h => [+h.dataset.x, +h.dataset.y])`, rule))
}

// drag presses the left button at from, moves in steps and releases at to.
func (p *browserPage) drag(from, to [2]float64) {
	p.t.Helper()
	p.do(chromedp.DragAndDropXY(from[0], from[1], to[0], to[1], 8))
}

func (p *browserPage) click(at [2]float64) {
	p.t.Helper()
	p.do(chromedp.MouseClickXY(at[0], at[1]))
}

// rename types a new name into a rule's name field.
func (p *browserPage) rename(rule int, name string) {
	p.t.Helper()
	sel := fmt.Sprintf(`[data-rule-index="%d"] input.name`, rule)
	n := p.checks()
	evalJS[bool](p, fmt.Sprintf(`(() => { const e = document.querySelector(%s); e.focus(); e.select(); return true; })()`, jsString(sel)))
	p.do(chromedp.KeyEvent(name))
	p.waitChecked(n, "the renamed rule checked")
	if got := p.rules()[rule].Name; got != name {
		p.t.Fatalf("rule %d is named %q after typing %q", rule, got, name)
	}
}

// checkArrow reads the "in" arrow drawn for line rule i and checks it
// against the API's definition: from the middle of A→B along (-dy, dx), in
// image coordinates with y down. Returns its direction in pixels.
func (p *browserPage) checkArrow(i int, line [][2]float64, size [2]float64) [2]float64 {
	p.t.Helper()
	sel := fmt.Sprintf(`#frame g.rule[data-index="%d"] line.in-arrow`, i)
	ar := evalJS[[4]float64](p, fmt.Sprintf(`(() => { const e = document.querySelector(%s); return [+e.getAttribute("x1"), +e.getAttribute("y1"), +e.dataset.x2, +e.dataset.y2]; })()`, jsString(sel)))
	w, h := size[0], size[1]
	a, b := line[0], line[1]
	mx, my := (a[0]+b[0])/2*w, (a[1]+b[1])/2*h
	if math.Abs(ar[0]-mx) > 1e-6 || math.Abs(ar[1]-my) > 1e-6 {
		p.t.Errorf("rule %d: arrow starts at (%.2f, %.2f), the line's middle is (%.2f, %.2f)", i, ar[0], ar[1], mx, my)
	}
	dir := [2]float64{ar[2] - ar[0], ar[3] - ar[1]}
	dx, dy := (b[0]-a[0])*w, (b[1]-a[1])*h // B - A in pixels
	want := [2]float64{-dy, dx}
	if cross := dir[0]*want[1] - dir[1]*want[0]; math.Abs(cross) > 1e-6*math.Hypot(dir[0], dir[1])*math.Hypot(dx, dy) {
		p.t.Errorf("rule %d: arrow %v is not along (-dy, dx) = %v", i, dir, want)
	}
	if dir[0]*want[0]+dir[1]*want[1] <= 0 {
		p.t.Errorf("rule %d: arrow %v points against (-dy, dx) = %v", i, dir, want)
	}
	// The same side as (-dy, dx) computed in fractions, as the API states it.
	fdx, fdy := b[0]-a[0], b[1]-a[1]
	if dir[0]*-fdy+dir[1]*fdx <= 0 {
		p.t.Errorf("rule %d: arrow %v is not on the side of (-dy, dx) in fractions", i, dir)
	}
	// The API's example: a horizontal line drawn left to right points down.
	if a[1] == b[1] && a[0] < b[0] && !(dir[1] > 0 && math.Abs(dir[0]) < 1e-9) {
		p.t.Errorf("rule %d: horizontal line drawn left to right, arrow %v does not point straight down", i, dir)
	}
	return dir
}

// expectShown posts the page's rule list to rules/check itself and checks
// that the page shows that answer: the YAML text and each error beside the
// rule it names.
func (p *browserPage) expectShown(base, source string) testCheckAnswer {
	p.t.Helper()
	body := `{"rules":` + p.rulesJSON() + `}`
	res, err := http.Post(base+"/api/sources/"+source+"/rules/check", "application/json", strings.NewReader(body))
	if err != nil {
		p.t.Fatal(err)
	}
	defer res.Body.Close()
	raw, _ := io.ReadAll(res.Body)
	var ans testCheckAnswer
	if res.StatusCode != http.StatusOK || json.Unmarshal(raw, &ans) != nil {
		p.t.Fatalf("rules/check: %s %s", res.Status, raw)
	}
	if got := p.text("#yaml"); got != ans.YAML {
		p.t.Errorf("YAML shown:\n%s\nrules/check answers:\n%s", got, ans.YAML)
	}
	shown := evalJS[[][]string](p, `[...document.querySelectorAll("#rule-list .rule-card")].map(c => [...c.querySelectorAll(".errors li")].map(li => li.textContent))`)
	want := make([][]string, len(shown))
	var general []string
	for _, e := range ans.Errors {
		if e.Index >= 0 && e.Index < len(want) {
			want[e.Index] = append(want[e.Index], e.Message)
		} else {
			general = append(general, e.Message)
		}
	}
	for i := range want {
		if len(want[i]) == 0 && len(shown[i]) == 0 {
			continue
		}
		if !reflect.DeepEqual(shown[i], want[i]) {
			p.t.Errorf("errors beside rule %d: %q, want %q", i, shown[i], want[i])
		}
	}
	gotGeneral := evalJS[[]string](p, `[...document.querySelectorAll("#general-errors li")].map(li => li.textContent)`)
	if len(general)+len(gotGeneral) > 0 && !reflect.DeepEqual(gotGeneral, general) {
		p.t.Errorf("errors not about one rule: %q, want %q", gotGeneral, general)
	}
	return ans
}

// expectReceived checks the newest body the fake's rules/check received
// (only with the fake: the real server keeps none).
func (p *browserPage) expectReceived(rec checkRecorder, rules []testRule) {
	p.t.Helper()
	if rec == nil {
		return
	}
	body, _, ok := rec.lastCheck()
	if !ok || !reflect.DeepEqual(body.Rules, rules) {
		p.t.Errorf("rules/check received %+v, the page has %+v", body.Rules, rules)
	}
}

// screenshot saves the editor as PNG to $TALLYD_SCREENSHOT (default: a file
// in the temporary directory), for the README.
func (p *browserPage) screenshot() {
	p.t.Helper()
	png, err := chromedp.Run(p.ctx, chromedp.Screenshot(chromedp.CSS("body")))
	if err != nil {
		p.t.Fatal(err)
	}
	path := os.Getenv("TALLYD_SCREENSHOT")
	if path == "" {
		path = filepath.Join(os.TempDir(), "tallyd-editor.png")
	}
	if err := os.WriteFile(path, png, 0o644); err != nil {
		p.t.Fatal(err)
	}
	p.t.Logf("screenshot of the editor: %s", path)
}

// testSourcesInfo is the part of GET /api/sources the test reads.
type testSourcesInfo struct {
	SaveEnabled bool `json:"save_enabled"`
	Sources     []struct {
		ID     string                    `json:"id"`
		Width  int                       `json:"width"`
		Height int                       `json:"height"`
		Rules  []testRule                `json:"rules"`
		Totals map[string]map[string]any `json:"totals"`
	} `json:"sources"`
}

// snapshotStatus is the HTTP status of a source's snapshot.jpg, and the
// server's error message when it has one.
func snapshotStatus(t *testing.T, base, id string) (int, string) {
	t.Helper()
	res, err := http.Get(base + "/api/sources/" + id + "/snapshot.jpg")
	if err != nil {
		t.Fatal(err)
	}
	defer res.Body.Close()
	var e struct {
		Error string `json:"error"`
	}
	if res.StatusCode != http.StatusOK {
		_ = json.NewDecoder(res.Body).Decode(&e)
	}
	_, _ = io.Copy(io.Discard, res.Body)
	return res.StatusCode, e.Error
}

func apiSources(t *testing.T, base string) testSourcesInfo {
	t.Helper()
	res, err := http.Get(base + "/api/sources")
	if err != nil {
		t.Fatal(err)
	}
	defer res.Body.Close()
	raw, _ := io.ReadAll(res.Body)
	var info testSourcesInfo
	if res.StatusCode != http.StatusOK {
		t.Fatalf("GET /api/sources: %s %s", res.Status, raw)
	}
	if err := json.NewDecoder(bytes.NewReader(raw)).Decode(&info); err != nil {
		t.Fatalf("GET /api/sources: %v", err)
	}
	return info
}

// countWords are the words the list must show for a rule's totals.
func countWords(t map[string]any) []string {
	var keys []string
	switch t["kind"] {
	case "line":
		keys = []string{"in", "out"}
	case "zone":
		keys = []string{"enter", "exit"}
	}
	var words []string
	for _, k := range keys {
		words = append(words, fmt.Sprintf("%s %v", k, t[k]))
	}
	return words
}

func rulePoints(r testRule) [][2]float64 {
	if len(r.Zone) > 0 {
		return r.Zone
	}
	return r.Line
}

func nearPoint(p, q [2]float64, tol float64) bool {
	return math.Abs(p[0]-q[0]) <= tol && math.Abs(p[1]-q[1]) <= tol
}

// pageRound4 rounds as the page does (to 4 decimals).
func pageRound4(v float64) float64 { return math.Round(v*1e4) / 1e4 }
