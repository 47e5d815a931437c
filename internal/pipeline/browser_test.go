package pipeline

import (
	"context"
	"encoding/json"
	"fmt"
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/chromedp/chromedp"

	"tallyd/capture"
	"tallyd/internal/testkit"
	"tallyd/internal/web"
)

// TestBrowserDrawCountSave is the operator's page end to end, in headless
// Chromium against the real server and pipeline: on a generated scene, draw
// a line by dragging from right to left, so that its "in" arrow points up
// the frame; the YAML the page shows loads in the same check as `tallyd
// check`; save it; a replay of the saved site file counts "in" exactly the
// walkers whose true feet crossed the drawn segment going up (the way the
// arrow points), computed here from the scene's ground-truth boxes.
// (internal/web's TestBrowserRuleEditor covers the editing gestures.)
func TestBrowserDrawCountSave(t *testing.T) {
	exe := ""
	for _, name := range []string{"chromium", "chromium-browser"} {
		if p, err := exec.LookPath(name); err == nil {
			exe = p
			break
		}
	}
	if exe == "" {
		t.Skip("no chromium on PATH (make setup installs Debian's chromium package)")
	}
	site, _ := sceneSite(t, "seed: 5, duration: 60s, crossings: 10, visitors: 3", "")
	cfg, err := Load(site)
	if err != nil {
		t.Fatal(err)
	}
	p, err := Build(cfg, Options{Pace: capture.PaceMax, Offline: true, Log: testkit.Log(t)})
	if err != nil {
		t.Fatal(err)
	}
	defer p.Close()
	if err := p.Run(context.Background()); err != nil {
		t.Fatal(err)
	}
	srv, err := web.Listen(p.Operator(true), web.Options{Addr: "127.0.0.1:0", Log: testkit.Log(t)})
	if err != nil {
		t.Fatal(err)
	}
	sctx, stop := context.WithCancel(context.Background())
	defer stop()
	go func() { _ = srv.Run(sctx) }()

	profile := t.TempDir()
	alloc, cancelAlloc := chromedp.NewExecAllocator(context.Background(), chromedp.ExecPath(exe),
		chromedp.Headless, chromedp.NoSandbox, chromedp.DisableGPU, chromedp.NoFirstRun,
		chromedp.Flag("disable-quic", true), chromedp.Flag("disable-background-networking", true),
		chromedp.Flag("disable-component-update", true), chromedp.Flag("disable-sync", true),
		chromedp.UserDataDir(profile), chromedp.WindowSize(1280, 900))
	defer cancelAlloc()
	tab, cancelTab := chromedp.NewContext(alloc)
	defer cancelTab()
	ctx, cancel := context.WithTimeout(tab, 60*time.Second)
	defer cancel()
	run := func(what string, acts ...chromedp.Action[chromedp.Void]) {
		t.Helper()
		if err := chromedp.Do(ctx, acts...); err != nil {
			t.Fatalf("%s: %v", what, err)
		}
	}
	eval := func(expr string) string {
		t.Helper()
		v, err := chromedp.Run(ctx, chromedp.Evaluate[string](expr))
		if err != nil {
			t.Fatalf("%s: %v", expr, err)
		}
		return v
	}
	wait := func(what, expr string) {
		t.Helper()
		if _, err := chromedp.Run(ctx, chromedp.Poll[chromedp.Void](expr, chromedp.WithPollingTimeout(15*time.Second))); err != nil {
			t.Fatalf("waiting for %s: %v", what, err)
		}
	}
	run("open the editor", chromedp.Navigate("http://"+srv.Addr()+"/#/source/walkway"))
	wait("the editor", `window.tallyd && tallyd.editor && tallyd.editor.ready && tallyd.editor.checks > 0 && tallyd.editor.idle()`)
	var rect [4]float64
	if err := json.Unmarshal([]byte(eval(`JSON.stringify((r => [r.left, r.top, r.width, r.height])(document.querySelector("#frame").getBoundingClientRect()))`)), &rect); err != nil {
		t.Fatal(err)
	}
	scr := func(x, y float64) (float64, float64) { return rect[0] + x*rect[2], rect[1] + y*rect[3] }
	// Right to left at 65% of the height: "in" is the right-hand side of
	// A→B on screen, which for a leftward line is up the frame.
	ax, ay := scr(0.85, 0.65)
	bx, by := scr(0.15, 0.65)
	n := eval(`String(tallyd.editor.checks)`)
	run("add a line", chromedp.Click(chromedp.CSS("#add-line")), chromedp.DragAndDropXY(ax, ay, bx, by, 8))
	wait("the new line checked", fmt.Sprintf(`tallyd.editor.checks > %s && tallyd.editor.idle() && tallyd.editor.rules().length === 3`, n))
	// The arrow the page draws for it points up.
	arrow := eval(`(() => { const i = tallyd.editor.rules().length - 1; const e = document.querySelector('#frame g.rule[data-index="' + i + '"] line.in-arrow'); return JSON.stringify([+e.getAttribute("y1"), +e.dataset.y2]); })()`)
	var ys [2]float64
	if err := json.Unmarshal([]byte(arrow), &ys); err != nil || ys[1] >= ys[0] {
		t.Fatalf("the new line's arrow %s (%v): want it pointing up the frame", arrow, err)
	}
	// Name it, then read the YAML the page shows: it loads in check.
	n = eval(`String(tallyd.editor.checks)`)
	eval(`(() => { const e = document.querySelector('[data-rule-index="2"] input.name'); e.focus(); e.select(); return ""; })()`)
	run("rename", chromedp.KeyEvent("drawn"))
	wait("the renamed line checked", fmt.Sprintf(`tallyd.editor.checks > %s && tallyd.editor.idle() && tallyd.editor.rules()[2].name === "drawn"`, n))
	yaml := eval(`document.querySelector("#yaml").textContent`)
	base, _ := os.ReadFile(site)
	head := string(base[:strings.Index(string(base), "rules:")])
	if _, err := Parse(filepath.Join(filepath.Dir(site), "pasted.yaml"), []byte(head+yaml+"output:\n  jsonl: events.jsonl\n")); err != nil {
		t.Fatalf("the YAML the page shows does not pass check: %v\n%s", err, yaml)
	}
	if !strings.Contains(yaml, "name: drawn") {
		t.Fatalf("the YAML shown lacks the drawn line:\n%s", yaml)
	}
	run("save", chromedp.Click(chromedp.CSS("#save")))
	wait("saved", `document.querySelector("#save-result").textContent.startsWith("Saved to")`)
	if path := os.Getenv("TALLYD_SCREENSHOT"); path != "" { // the README's picture
		png, err := chromedp.Run(ctx, chromedp.Screenshot(chromedp.CSS("body")))
		if err != nil {
			t.Fatal(err)
		}
		if err := os.WriteFile(path, png, 0o644); err != nil {
			t.Fatal(err)
		}
	}

	// Replay the saved file and compare with the walkers' true crossings.
	saved, err := Load(site)
	if err != nil {
		t.Fatalf("the saved site file: %v", err)
	}
	var drawn [][2]float64
	for _, r := range saved.Rules {
		if r.Name == "drawn" {
			drawn = r.Line
		}
	}
	if len(drawn) != 2 || drawn[0][0] < drawn[1][0] {
		t.Fatalf("saved line %v: want it drawn right to left", drawn)
	}
	q, err := Build(saved, Options{Pace: capture.PaceMax, Offline: true, Log: testkit.Log(t)})
	if err != nil {
		t.Fatal(err)
	}
	defer q.Close()
	if err := q.Run(context.Background()); err != nil {
		t.Fatal(err)
	}
	got := q.Summary().Rules["drawn"]
	up, down := trueCrossings(q, drawn)
	if up+down == 0 {
		t.Fatal("no walker crosses the drawn line: move it")
	}
	if got.In != up || got.Out != down {
		t.Errorf("drawn line counted in %d / out %d; the truth has %d going up (the arrow's way) and %d going down", got.In, got.Out, up, down)
	}
	t.Logf("drawn line %v: in %d (true up %d), out %d (true down %d)", drawn, got.In, up, got.Out, down)
}

// trueCrossings counts, from the scene's ground-truth boxes, the people whose
// feet (bottom-centre) moved across the horizontal segment, up and down the
// frame. Independent of the rule engine: a sign change of y - lineY while x
// is inside the segment's span.
func trueCrossings(p *Pipeline, line [][2]float64) (up, down int) {
	sc := p.sources[0].scene
	w, h := sc.Size()
	y0 := line[0][1] * float64(h)
	x1, x2 := math.Min(line[0][0], line[1][0])*float64(w), math.Max(line[0][0], line[1][0])*float64(w)
	last := map[int64][2]float64{}
	for i := range sc.Frames() {
		for _, o := range sc.Truth(i) {
			fx, fy := (o.Box.X1+o.Box.X2)/2, o.Box.Y2
			if prev, ok := last[o.ID]; ok && fx > x1 && fx < x2 && prev[0] > x1 && prev[0] < x2 {
				switch {
				case prev[1] > y0 && fy <= y0:
					up++
				case prev[1] <= y0 && fy > y0:
					down++
				}
			}
			last[o.ID] = [2]float64{fx, fy}
		}
	}
	return up, down
}
