// The rule editor of one source: the plain snapshot as background, an SVG
// overlay in the frame's pixels with the lines and zones, a list of the rules
// beside it, and the server's check of every edit (YAML fragment and errors).
import { getSources, postRules, sourceURL } from "./api.js";
import { el, svgEl } from "./dom.js";
import { drawDraft, drawRule } from "./draw.js";
import { area2, clamp01, isZone, pointsOf, round4 } from "./geom.js";
import { onDown, onKey, onMove, onUp } from "./input.js";
import { coordsText, ruleCard } from "./rulecard.js";

const CHECK_DELAY_MS = 250; // edits are checked once they pause this long
const FALLBACK_SIZE = [1280, 720]; // drawing area while no frame is known

const HINTS = {
  select: "Drag a point to move it, or a shape to move it whole. Tab to a point: arrow keys nudge it, Delete removes it (zones).",
  line: "Press where the line starts (A) and drag to where it ends (B), or click A then B. Crossing from the left to the right of A→B counts \"in\"; the arrow shows that way. Escape cancels.",
  zone: "Click the corners in order; click the first corner again, press Enter or choose Close zone to finish (at least 3 corners). Escape cancels.",
};

/** Opens the editor of source id in root; returns a func that stops it. */
export function openEditor(root, id, setSite) {
  const ed = new Editor(root, id, setSite);
  ed.start();
  return () => ed.stop();
}

function copy(v) {
  return JSON.parse(JSON.stringify(v));
}

class Editor {
  constructor(root, id, setSite) {
    this.root = root;
    this.id = id;
    this.setSite = setSite;
    this.rules = [];
    this.w = 0;
    this.h = 0;
    this.mode = "select";
    this.sel = null; // {rule, point}; point -1 when the whole rule is selected
    this.draft = null; // line: {a, b, pressed}; zone: {pts, hover}
    this.drag = null; // {rule, point, start, orig}
    this.saveEnabled = false;
    this.ready = false;
    this.stopped = false;
    this.timer = 0; // pending check
    this.inflight = null; // AbortController of the running check
    this.seq = 0;
    this.result = null; // the newest answer of rules/check
    this.checks = 0;
  }

  async start() {
    this.root.append(el("p", { class: "status", role: "status" }, "Loading…"));
    this.expose();
    let data;
    try {
      data = await getSources();
    } catch (e) {
      this.fail(`Cannot read the sources: ${e.message}`);
      return;
    }
    if (this.stopped) return;
    this.setSite(data.site);
    const src = data.sources.find((s) => s.id === this.id);
    if (!src) {
      this.fail(`The site file has no source "${this.id}".`);
      return;
    }
    this.saveEnabled = data.save_enabled === true;
    this.rules = copy(src.rules || []);
    this.w = src.width || 0;
    this.h = src.height || 0;
    this.build();
    await this.loadBackground();
    if (this.stopped) return;
    this.ready = true;
    this.checkNow();
  }

  stop() {
    this.stopped = true;
    if (this.onResize) window.removeEventListener("resize", this.onResize);
    if (this.bgURL) URL.revokeObjectURL(this.bgURL);
    clearTimeout(this.timer);
    if (this.inflight) this.inflight.abort();
  }

  fail(msg) {
    if (this.stopped) return; // the page shows another view now
    this.root.replaceChildren(el("p", { class: "error", role: "alert" }, msg), el("p", {}, el("a", { href: "#/" }, "Back to the sources")));
    this.ready = true;
  }

  // State for the console and the browser test.
  expose() {
    const ed = this;
    window.tallyd.editor = {
      source: this.id,
      get ready() { return ed.ready; },
      rules: () => copy(ed.rules),
      idle: () => ed.ready && !ed.timer && !ed.inflight && !ed.drag,
      result: () => copy(ed.result),
      get checks() { return ed.checks; },
      size: () => [ed.w, ed.h],
    };
  }

  // ---- layout -------------------------------------------------------------

  build() {
    const tool = (id, label, onclick, extra = {}) => el("button", { type: "button", id, onclick, ...extra }, label);
    this.btnLine = tool("add-line", "Add line", () => this.setMode(this.mode === "line" ? "select" : "line"), { "aria-pressed": "false" });
    this.btnZone = tool("add-zone", "Add zone", () => this.setMode(this.mode === "zone" ? "select" : "zone"), { "aria-pressed": "false" });
    this.btnClose = tool("close-zone", "Close zone", () => this.closeZone(), { hidden: true });
    this.btnCancel = tool("cancel-draw", "Cancel", () => this.setMode("select"), { hidden: true });
    this.hint = el("p", { id: "hint", class: "hint", "aria-live": "polite" });
    this.frameNote = el("p", { id: "frame-note", class: "note", hidden: true });

    this.svg = svgEl("svg", {
      id: "frame", role: "group", tabindex: "-1",
      "aria-label": `Picture of ${this.id} with its rules; points are buttons`,
    });
    this.bg = svgEl("image", { preserveAspectRatio: "none", x: 0, y: 0 });
    this.rulesLayer = svgEl("g", { class: "rules" });
    this.draftLayer = svgEl("g", { class: "draft" });
    this.svg.append(this.bg, this.rulesLayer, this.draftLayer);
    this.svg.addEventListener("pointerdown", (e) => onDown(this, e));
    this.svg.addEventListener("pointermove", (e) => onMove(this, e));
    this.svg.addEventListener("pointerup", (e) => onUp(this, e));
    this.svg.addEventListener("pointercancel", (e) => onUp(this, e));

    this.list = el("ol", { id: "rule-list", class: "rule-list" });
    this.status = el("p", { id: "check-status", role: "status" });
    this.general = el("ul", { id: "general-errors", class: "errors" });
    this.yaml = el("pre", { id: "yaml", tabindex: "0", "aria-label": "YAML fragment for the site file" });
    this.saveResult = el("p", { id: "save-result", role: "status" });
    const saveRow = el("p", { class: "save-row" });
    if (this.saveEnabled) {
      saveRow.append(el("button", { type: "button", id: "save", class: "primary", onclick: () => this.save() }, "Save to site file"), " ");
    }
    saveRow.append(el("button", { type: "button", id: "discard", onclick: () => this.discard() }, "Discard edits"));

    this.editor = el("div", { id: "editor", class: "editor" },
      el("section", { class: "canvas", "aria-label": "Picture" },
        el("div", { class: "toolbar", role: "toolbar", "aria-label": "Drawing tools" },
          this.btnLine, this.btnZone, this.btnClose, this.btnCancel,
          tool("refresh-frame", "Refresh picture", () => this.loadBackground())),
        this.hint, this.svg, this.frameNote),
      el("section", { class: "side", "aria-label": "Rules" },
        el("h3", {}, "Rules"), this.list,
        el("h3", {}, "Check"), this.status, this.general,
        el("h3", {}, "YAML for the site file"), this.yaml,
        saveRow, this.saveResult,
        this.saveEnabled ? null : el("p", { class: "note" },
          "Saving from this page is off in the server's settings: copy the YAML into the site file and reload tallyd (SIGHUP).")));
    this.editor.addEventListener("keydown", (e) => onKey(this, e));

    this.root.replaceChildren(
      el("p", { class: "back" }, el("a", { href: "#/" }, "← Sources")),
      el("h2", {}, `Rules of ${this.id}`),
      this.editor);
    this.setMode("select");
    this.renderList();
    this.onResize = () => this.renderFrame();
    window.addEventListener("resize", this.onResize);
  }

  // Loads the plain snapshot once (as a blob, so that a failure can say
  // why); its size gives the frame's pixels when the API did not know them
  // yet. Without a picture the rules are drawn on an empty area of
  // FALLBACK_SIZE's shape.
  async loadBackground() {
    let blob = null;
    let size = null;
    let why = "";
    try {
      const res = await fetch(`${sourceURL(this.id, "snapshot.jpg")}?plain=1`, { credentials: "same-origin", cache: "no-store" });
      if (res.ok) blob = await res.blob();
      else {
        const b = await res.json().catch(() => null);
        why = b && b.error ? b.error : `HTTP ${res.status}`;
      }
      if (blob) {
        const bmp = await createImageBitmap(blob);
        size = [bmp.width, bmp.height];
        bmp.close();
      }
    } catch (e) {
      why = e.message;
    }
    if (this.stopped) return;
    if (this.bgURL) URL.revokeObjectURL(this.bgURL);
    this.bgURL = null;
    if (size) {
      if (!this.w || !this.h) [this.w, this.h] = size;
      this.bgURL = URL.createObjectURL(blob);
      this.bg.setAttribute("href", this.bgURL);
      this.frameNote.hidden = true;
    } else {
      if (!this.w || !this.h) [this.w, this.h] = FALLBACK_SIZE;
      this.bg.removeAttribute("href");
      this.frameNote.textContent = `No picture from this source (${why}): the rules are drawn on an empty area. Refresh picture to try again.`;
      this.frameNote.hidden = false;
    }
    this.setSize();
  }

  setSize() {
    this.svg.setAttribute("viewBox", `0 0 ${this.w} ${this.h}`);
    this.bg.setAttribute("width", this.w);
    this.bg.setAttribute("height", this.h);
    this.renderFrame();
  }

  setMode(mode) {
    this.mode = mode;
    this.draft = null;
    this.btnLine.setAttribute("aria-pressed", String(mode === "line"));
    this.btnZone.setAttribute("aria-pressed", String(mode === "zone"));
    this.btnClose.hidden = mode !== "zone";
    this.btnCancel.hidden = mode === "select";
    this.svg.dataset.mode = mode;
    this.hint.textContent = HINTS[mode];
    this.renderFrame();
  }

  // ---- coordinates --------------------------------------------------------

  // Frame pixels per screen pixel, to keep handles and arrows a fixed size.
  scale() {
    const r = this.svg.getBoundingClientRect();
    return r.width > 0 && this.w ? this.w / r.width : 1;
  }

  // The pointer's position as fractions of the frame, rounded to 4 decimals.
  frac(e) {
    const m = this.svg.getScreenCTM();
    if (!m) return [0, 0];
    const p = new DOMPoint(e.clientX, e.clientY).matrixTransform(m.inverse());
    return [round4(clamp01(p.x / this.w)), round4(clamp01(p.y / this.h))];
  }

  // Distance of two fractional points in screen pixels.
  screenDist(a, b) {
    const k = this.scale();
    return Math.hypot((a[0] - b[0]) * this.w, (a[1] - b[1]) * this.h) / k;
  }

  px(p) {
    return [p[0] * this.w, p[1] * this.h];
  }

  // ---- drawing ------------------------------------------------------------

  renderFrame() {
    if (!this.w) return;
    // Redrawing replaces the handles: a focused one passes its focus on to
    // the selected point's new handle (or to the picture).
    const active = document.activeElement;
    const hadFocus = active && active.classList && active.classList.contains("handle");
    const k = this.scale();
    const invalid = this.invalidRules();
    this.rulesLayer.replaceChildren(...this.rules.map((r, i) => drawRule(this, r, i, k, invalid.has(i))));
    this.draftLayer.replaceChildren(...drawDraft(this, k));
    if (hadFocus) {
      if (this.sel && this.sel.point >= 0) this.focusHandle(this.sel.rule, this.sel.point);
      else this.svg.focus({ preventScroll: true });
    }
  }

  focusHandle(rule, point) {
    const h = this.svg.querySelector(`.handle[data-rule="${rule}"][data-point="${point}"]`);
    if (h) h.focus({ preventScroll: true });
  }

  invalidRules() {
    const s = new Set();
    for (const e of (this.result && this.result.errors) || []) if (e.index >= 0) s.add(e.index);
    return s;
  }

  // ---- the rule list beside the picture ------------------------------------

  renderList() {
    const cards = this.rules.map((r, i) => ruleCard(this, r, i));
    if (cards.length === 0) cards.push(el("li", { class: "empty" }, "No rules yet: add a line or a zone."));
    this.list.replaceChildren(...cards);
    this.renderErrors();
  }

  // Updates the coordinates shown in the list without rebuilding it (keeps
  // the focus and the caret of a name being typed).
  updateCoords(i) {
    const c = this.list.querySelector(`[data-rule-index="${i}"] .coords`);
    if (c) c.textContent = coordsText(this.rules[i]);
  }

  renderErrors() {
    const res = this.result;
    const perRule = new Map();
    const general = [];
    for (const e of (res && res.errors) || []) {
      if (e.index >= 0 && e.index < this.rules.length) {
        if (!perRule.has(e.index)) perRule.set(e.index, []);
        perRule.get(e.index).push(e.message);
      } else general.push(e.message);
    }
    this.list.querySelectorAll(".rule-card").forEach((card) => {
      const msgs = perRule.get(+card.dataset.ruleIndex) || [];
      card.classList.toggle("invalid", msgs.length > 0);
      card.querySelector(".errors").replaceChildren(...msgs.map((m) => el("li", {}, m)));
    });
    this.general.replaceChildren(...general.map((m) => el("li", {}, m)));
  }

  // ---- editing ------------------------------------------------------------

  select(rule, point) {
    if (this.sel && this.sel.rule === rule && this.sel.point === point) return;
    const listChanged = !this.sel || this.sel.rule !== rule;
    this.sel = rule === null ? null : { rule, point };
    this.renderFrame();
    if (listChanged) {
      this.list.querySelectorAll(".rule-card").forEach((c) => c.classList.toggle("selected", this.sel !== null && +c.dataset.ruleIndex === rule));
    }
  }

  uniqueName(prefix) {
    const names = new Set(this.rules.map((r) => r.name));
    for (let n = 1; ; n++) if (!names.has(`${prefix}-${n}`)) return `${prefix}-${n}`;
  }

  addRule(r) {
    this.rules.push(r);
    this.sel = { rule: this.rules.length - 1, point: -1 };
    this.setMode("select");
    this.renderList();
    this.edited();
    this.hint.textContent = `Added ${r.name}. ${HINTS.select}`;
  }

  closeZone() {
    const d = this.draft;
    if (!d || d.pts.length < 3) {
      this.hint.textContent = "A zone needs at least 3 corners.";
      return;
    }
    if (area2(d.pts) === 0) {
      this.hint.textContent = "These corners enclose no area; click elsewhere.";
      return;
    }
    this.addRule({ name: this.uniqueName("zone"), zone: d.pts });
  }

  flip(i) {
    const r = this.rules[i];
    r.line = [r.line[1], r.line[0]];
    this.renderFrame();
    this.updateCoords(i);
    this.edited();
    this.hint.textContent = `${r.name}: direction flipped, A and B swapped.`;
  }

  deleteRule(i) {
    const [r] = this.rules.splice(i, 1);
    this.sel = null;
    this.result = null; // the indexes of its errors are stale now
    this.renderList();
    this.renderFrame();
    this.edited();
    this.hint.textContent = `Deleted ${r.name}.`;
  }

  deletePoint(i, j) {
    const r = this.rules[i];
    if (!isZone(r)) {
      this.hint.textContent = "A line has exactly two points; use Delete rule to remove it.";
      return;
    }
    if (r.zone.length <= 3) {
      this.hint.textContent = "A zone needs at least 3 corners; use Delete rule to remove it.";
      return;
    }
    r.zone.splice(j, 1);
    this.sel = { rule: i, point: -1 };
    this.renderFrame();
    this.updateCoords(i);
    this.edited();
    this.svg.focus({ preventScroll: true });
    this.hint.textContent = `${r.name}: corner ${j + 1} removed.`;
  }

  movePoint(i, j, p) {
    pointsOf(this.rules[i])[j] = p;
    this.renderFrame();
    this.updateCoords(i);
    this.edited();
  }

  // ---- checking and saving ------------------------------------------------

  edited() {
    clearTimeout(this.timer);
    this.status.textContent = "Checking…";
    this.saveResult.textContent = "";
    this.timer = setTimeout(() => this.checkNow(), CHECK_DELAY_MS);
  }

  async checkNow() {
    clearTimeout(this.timer);
    this.timer = 0;
    if (this.drag) return; // checked when the drag ends
    if (this.inflight) this.inflight.abort();
    const ctl = new AbortController();
    this.inflight = ctl;
    const seq = ++this.seq;
    this.checks++;
    let res;
    try {
      res = await postRules(this.id, "check", copy(this.rules), ctl.signal);
    } catch (e) {
      if (seq === this.seq) {
        this.inflight = null;
        if (e.name !== "AbortError") this.status.textContent = `Cannot check the rules: ${e.message}`;
      }
      return;
    }
    if (seq !== this.seq || this.stopped) return; // a newer edit is being checked
    this.inflight = null;
    if (res.status !== 200 || !res.body) {
      this.status.textContent = `Cannot check the rules: HTTP ${res.status}${res.body && res.body.error ? ": " + res.body.error : ""}`;
      return;
    }
    this.show(res.body);
  }

  show(body) {
    this.result = body;
    const n = (body.errors || []).length;
    this.status.textContent = body.ok ? `Valid: ${this.rules.length} rule${this.rules.length === 1 ? "" : "s"}.` : `${n} problem${n === 1 ? "" : "s"}: see beside the rules.`;
    this.status.className = body.ok ? "ok" : "bad";
    this.yaml.textContent = body.yaml || "";
    this.renderErrors();
    this.renderFrame();
  }

  async save() {
    clearTimeout(this.timer);
    this.timer = 0;
    if (this.inflight) this.inflight.abort();
    this.inflight = null;
    this.seq++;
    this.saveResult.textContent = "Saving…";
    let res;
    try {
      res = await postRules(this.id, "save", copy(this.rules));
    } catch (e) {
      this.saveResult.textContent = `Not saved: ${e.message}`;
      return;
    }
    const b = res.body || {};
    if (res.status === 200) {
      this.show({ ok: true, yaml: b.yaml, errors: [] });
      this.saveResult.textContent = `Saved to ${b.saved}.${b.reload ? " " + b.reload : ""}`;
    } else if (res.status === 400 && b.errors) {
      this.show(b);
      this.saveResult.textContent = "Not saved: fix the problems first.";
    } else {
      this.saveResult.textContent = `Not saved: HTTP ${res.status}${b.error ? ": " + b.error : ""}`;
    }
  }

  async discard() {
    try {
      const data = await getSources();
      const src = data.sources.find((s) => s.id === this.id);
      this.rules = copy((src && src.rules) || []);
    } catch (e) {
      this.saveResult.textContent = `Cannot read the rules: ${e.message}`;
      return;
    }
    this.sel = null;
    this.result = null;
    this.setMode("select");
    this.renderList();
    this.checkNow();
    this.saveResult.textContent = "Edits discarded: these are the rules the server runs.";
  }
}
