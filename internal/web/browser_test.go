package web

import (
	"fmt"
	"math"
	"net/http"
	"net/http/httptest"
	"reflect"
	"strings"
	"testing"

	"github.com/chromedp/chromedp"
	"github.com/chromedp/chromedp/kb"
)

// The operator's page in a real headless Chromium, against the server from
// newTestBackend: the list, then the editor of the first source, driven by
// mouse and keyboard events as a person would (press, move, release).
//
// What the page shows is compared with what the server answers for the
// page's own rule list (the test posts it to rules/check itself), so the
// test holds for the fake and for the real server alike.
func TestBrowserRuleEditor(t *testing.T) {
	backend := newTestBackend(t)
	srv := httptest.NewServer(backend) // loopback, random port
	defer srv.Close()
	rec, _ := backend.(checkRecorder)

	p := openBrowser(t)
	info := apiSources(t, srv.URL)
	if len(info.Sources) == 0 {
		t.Fatal("GET /api/sources lists no source")
	}
	src := info.Sources[0]

	// The list: a preview and the counts per rule.
	p.do(chromedp.Navigate(srv.URL + "/"))
	dark, darkWhy := "", "" // a source without a frame yet, if any, and why
	for _, s := range info.Sources {
		c := fmt.Sprintf(`.source-card[data-source=%q]`, s.ID)
		if code, why := snapshotStatus(t, srv.URL, s.ID); code == http.StatusServiceUnavailable {
			dark, darkWhy = s.ID, why
			p.waitJS("no frame yet for "+s.ID, fmt.Sprintf(`!(document.querySelector(%s) || {hidden: true}).hidden`, jsString(c+" .no-frame")))
		} else {
			p.waitJS("the preview of "+s.ID, fmt.Sprintf(`(document.querySelector(%s) || {}).naturalWidth > 0`, jsString(c+" img.preview")))
		}
	}
	card := fmt.Sprintf(`.source-card[data-source=%q]`, src.ID)
	for _, r := range src.Rules {
		got := p.text(fmt.Sprintf(`%s tr[data-rule=%q] .count`, card, r.Name))
		for _, want := range countWords(src.Totals[r.Name]) {
			if !strings.Contains(got, want) {
				t.Errorf("list, counts of %s: %q does not contain %q", r.Name, got, want)
			}
		}
	}

	// The editor of that source.
	p.do(chromedp.Click(chromedp.CSS(card + " a.edit")))
	p.waitJS("the editor", `window.tallyd.editor && tallyd.editor.ready && tallyd.editor.checks > 0 && tallyd.editor.idle()`)
	if got := p.rules(); !reflect.DeepEqual(got, src.Rules) {
		t.Fatalf("editor starts with rules %+v, the server has %+v", got, src.Rules)
	}
	p.expectShown(srv.URL, src.ID)
	frameSize := evalJS[[2]float64](p, `tallyd.editor.size()`)
	if src.Width > 0 && (frameSize != [2]float64{float64(src.Width), float64(src.Height)}) {
		t.Errorf("editor draws in %v pixels, the source has %dx%d", frameSize, src.Width, src.Height)
	}
	// The example of the API: A=(0.15,0.55) B=(0.85,0.55) points "in" down the frame.
	for i, r := range src.Rules {
		if len(r.Line) == 2 {
			p.checkArrow(i, r.Line, frameSize)
		}
	}

	// Draw a line by dragging from A to B.
	p.clickButton("#add-line")
	a, b := [2]float64{0.30, 0.20}, [2]float64{0.70, 0.35}
	n := p.checks()
	p.drag(p.screen(a), p.screen(b))
	p.waitChecked(n, "the new line checked")
	rules := p.rules()
	if len(rules) != len(src.Rules)+1 {
		t.Fatalf("after drawing a line: %d rules, want %d", len(rules), len(src.Rules)+1)
	}
	li := len(rules) - 1
	drawn := rules[li]
	tol := p.tolerance()
	if len(drawn.Line) != 2 || !nearPoint(drawn.Line[0], a, tol) || !nearPoint(drawn.Line[1], b, tol) {
		t.Fatalf("drawn line %v, want %v → %v within %.4f", drawn.Line, a, b, tol)
	}
	for _, q := range drawn.Line {
		for _, v := range q {
			if math.Abs(v*1e4-math.Round(v*1e4)) > 1e-6 {
				t.Errorf("coordinate %v is not rounded to 4 decimals", v)
			}
		}
	}
	if got := p.handles(li); !reflect.DeepEqual(got, drawn.Line) {
		t.Errorf("handles drawn at %v, the page's state has %v", got, drawn.Line)
	}
	p.expectReceived(rec, rules)
	before := p.checkArrow(li, drawn.Line, frameSize)
	p.expectShown(srv.URL, src.ID)

	// Flip its direction: A and B swap, the arrow turns round.
	n = p.checks()
	p.clickButton(fmt.Sprintf(`[data-rule-index="%d"] button.flip`, li))
	p.waitChecked(n, "the flipped line checked")
	rules = p.rules()
	if want := [][2]float64{drawn.Line[1], drawn.Line[0]}; !reflect.DeepEqual(rules[li].Line, want) {
		t.Fatalf("flipped line %v, want %v", rules[li].Line, want)
	}
	after := p.checkArrow(li, rules[li].Line, frameSize)
	if dot := before[0]*after[0] + before[1]*after[1]; dot >= 0 {
		t.Errorf("arrow after the flip %v does not point against the one before %v", after, before)
	}
	p.expectReceived(rec, rules)
	p.expectShown(srv.URL, src.ID)

	// A name with a space: the error is shown beside that rule only.
	p.rename(li, "exit gate")
	ans := p.expectShown(srv.URL, src.ID)
	var mine []string
	for _, e := range ans.Errors {
		if e.Index == li {
			mine = append(mine, e.Message)
		}
	}
	if ans.OK || len(mine) == 0 {
		t.Fatalf("rules/check finds no problem with the name %q: %+v", "exit gate", ans)
	}
	if !p.hasClass(fmt.Sprintf(`#frame g.rule[data-index="%d"]`, li), "invalid") {
		t.Errorf("the rule with the error is not marked invalid in the picture")
	}
	p.rename(li, "exit-gate")
	if ans := p.expectShown(srv.URL, src.ID); !ans.OK {
		t.Fatalf("rules still invalid after the rename: %+v", ans.Errors)
	}

	// Move a point: drag the first rule's first handle.
	to := [2]float64{0.10, 0.62}
	old := p.rules()[0]
	n = p.checks()
	p.drag(p.handleCenter(0, 0), p.screen(to))
	p.waitChecked(n, "the moved point checked")
	moved := p.rules()[0]
	if pts := rulePoints(moved); !nearPoint(pts[0], to, tol) || !reflect.DeepEqual(pts[1:], rulePoints(old)[1:]) {
		t.Fatalf("after dragging point 0 of %s to %v: %v (was %v)", old.Name, to, pts, rulePoints(old))
	}

	// Draw a zone with four clicks and close it on its first corner.
	p.clickButton("#add-zone")
	corners := [][2]float64{{0.60, 0.62}, {0.92, 0.62}, {0.92, 0.80}, {0.60, 0.80}}
	for _, c := range corners {
		p.click(p.screen(c))
	}
	n = p.checks()
	p.click(p.screen(corners[0]))
	p.waitChecked(n, "the new zone checked")
	rules = p.rules()
	zi := len(rules) - 1
	if z := rules[zi].Zone; len(z) != 4 || !nearPoint(z[0], corners[0], tol) || !nearPoint(z[2], corners[2], tol) {
		t.Fatalf("drawn zone %v, want %v", z, corners)
	}

	// Keyboard: select its last corner with a click, Delete removes it.
	n = p.checks()
	p.click(p.handleCenter(zi, 3))
	if !evalJS[bool](p, fmt.Sprintf(`document.activeElement.matches('.handle[data-rule="%d"][data-point="3"]')`, zi)) {
		t.Fatal("a clicked point does not take the keyboard focus")
	}
	p.do(chromedp.KeyEvent(kb.Delete))
	p.waitChecked(n, "the zone without its last corner checked")
	if z := p.rules()[zi].Zone; !reflect.DeepEqual(z, rules[zi].Zone[:3]) {
		t.Fatalf("zone after Delete on corner 4: %v, want %v", z, rules[zi].Zone[:3])
	}
	if ans := p.expectShown(srv.URL, src.ID); !ans.OK {
		t.Fatalf("the edited rules do not pass the check: %+v", ans.Errors)
	}
	p.expectReceived(rec, p.rules())
	p.screenshot()

	// Keyboard: nudge a corner with the arrow keys (with Shift ten times more).
	z0 := p.rules()[zi].Zone[0]
	n = p.checks()
	p.click(p.handleCenter(zi, 0))
	p.do(chromedp.KeyEvent(kb.ArrowDown), chromedp.KeyEvent(kb.ArrowRight, chromedp.KeyModifiers(chromedp.ModifierShift)))
	p.waitChecked(n, "the nudged corner checked")
	if got, want := p.rules()[zi].Zone[0], [2]float64{pageRound4(z0[0] + 0.01), pageRound4(z0[1] + 0.001)}; got != want {
		t.Fatalf("corner after ArrowDown, Shift+ArrowRight: %v, want %v (was %v)", got, want, z0)
	}

	// Drag a whole zone by its inside.
	orig := p.rules()[zi].Zone
	var c [2]float64
	for _, q := range orig {
		c[0], c[1] = c[0]+q[0]/float64(len(orig)), c[1]+q[1]/float64(len(orig))
	}
	delta := [2]float64{-0.05, -0.04}
	n = p.checks()
	p.drag(p.screen(c), p.screen([2]float64{c[0] + delta[0], c[1] + delta[1]}))
	p.waitChecked(n, "the moved zone checked")
	for j, q := range p.rules()[zi].Zone {
		if want := [2]float64{orig[j][0] + delta[0], orig[j][1] + delta[1]}; !nearPoint(q, want, tol) {
			t.Errorf("zone corner %d after moving the zone by %v: %v, want %v", j, delta, q, want)
		}
	}

	// Escape abandons a zone being drawn.
	count := len(p.rules())
	p.clickButton("#add-zone")
	p.click(p.screen([2]float64{0.40, 0.88}))
	p.click(p.screen([2]float64{0.50, 0.88}))
	p.do(chromedp.KeyEvent(kb.Escape))
	p.waitJS("the select mode", `document.querySelector("#add-zone").getAttribute("aria-pressed") === "false"`)
	if got := len(p.rules()); got != count {
		t.Fatalf("Escape while drawing a zone: %d rules, want %d", got, count)
	}

	// A line by two clicks, A then B, without dragging.
	p.clickButton("#add-line")
	n = p.checks()
	a, b = [2]float64{0.40, 0.90}, [2]float64{0.80, 0.94}
	p.click(p.screen(a))
	p.click(p.screen(b))
	p.waitChecked(n, "the clicked line checked")
	if r := p.rules(); len(r) != count+1 || !nearPoint(r[count].Line[0], a, tol) || !nearPoint(r[count].Line[1], b, tol) {
		t.Fatalf("line by two clicks: %+v, want %v → %v", r[len(r)-1], a, b)
	}
	p.expectShown(srv.URL, src.ID)

	// Delete a rule.
	rules = p.rules()
	n = p.checks()
	p.clickButton(`[data-rule-index="1"] button.delete`)
	p.waitChecked(n, "the list without rule 1 checked")
	if got, want := p.rules(), append(rules[:1:1], rules[2:]...); !reflect.DeepEqual(got, want) {
		t.Fatalf("after deleting rule 1: %+v, want %+v", got, want)
	}
	p.expectShown(srv.URL, src.ID)

	// A source without a frame: the editor draws on an empty area of the
	// fallback shape and says so; drawing works the same.
	if dark != "" {
		p.do(chromedp.Navigate(srv.URL + "/?dark#/source/" + dark))
		p.waitJS("the editor of "+dark, `window.tallyd.editor && tallyd.editor.ready && tallyd.editor.checks > 0 && tallyd.editor.idle()`)
		note := evalJS[string](p, `(e => e.hidden ? "" : e.textContent)(document.querySelector("#frame-note"))`)
		if note == "" || !strings.Contains(note, darkWhy) {
			t.Errorf("editor of %s: note %q does not say the server's reason %q", dark, note, darkWhy)
		}
		size := evalJS[[2]float64](p, `tallyd.editor.size()`)
		if size[0] <= 0 || size[1] <= 0 {
			t.Fatalf("editor of %s draws in %v pixels", dark, size)
		}
		before := len(p.rules())
		p.clickButton("#add-line")
		n = p.checks()
		a, b = [2]float64{0.10, 0.50}, [2]float64{0.90, 0.50}
		p.drag(p.screen(a), p.screen(b))
		p.waitChecked(n, "a line on "+dark+" checked")
		r := p.rules()
		if len(r) != before+1 || !nearPoint(r[before].Line[0], a, p.tolerance()) || !nearPoint(r[before].Line[1], b, p.tolerance()) {
			t.Fatalf("line drawn on %s without a frame: %+v, want %v → %v", dark, r, a, b)
		}
		p.checkArrow(before, r[before].Line, size)
		p.expectShown(srv.URL, dark)
	}

	// Saving: no button while the server has it off.
	if !info.SaveEnabled && p.exists("#save") {
		t.Error("a Save button while saving is off")
	}
	if rec == nil {
		return
	}
	rec.setSaveEnabled(true)
	p.do(chromedp.Navigate(srv.URL + "/?again#/source/" + src.ID))
	p.waitJS("the editor with saving on", `window.tallyd.editor && tallyd.editor.ready && tallyd.editor.checks > 0 && tallyd.editor.idle()`)
	p.clickButton("#save")
	p.waitJS("the saved message", `document.querySelector("#save-result").textContent.startsWith("Saved to ")`)
	saved, ok := rec.lastSave()
	if !ok || !reflect.DeepEqual(saved.Rules, p.rules()) {
		t.Errorf("saved %+v, the page has %+v", saved.Rules, p.rules())
	}
}
