// Pointer and keyboard input of the editor's picture: drawing a line (press
// and drag, or two clicks), a zone (clicks), dragging points and whole
// shapes, and the keys on a focused point.
import { clamp01, isZone, pointsOf, round4 } from "./geom.js";

const CLOSE_PX = 12; // a click this close to a zone's first corner closes it
const CLICK_PX = 4; // a press and release closer than this is a click
const NUDGE = 0.001; // arrow keys move a point this much (ten times with Shift)

function copy(v) {
  return JSON.parse(JSON.stringify(v));
}

/** Pointer pressed on the picture. */
export function onDown(ed, e) {
  if (e.button !== 0 || !ed.w) return;
  e.preventDefault();
  const p = ed.frac(e);
  if (ed.mode === "line") {
    ed.svg.setPointerCapture(e.pointerId);
    if (ed.draft && !ed.draft.pressed) ed.draft = { ...ed.draft, b: p, pressed: true };
    else ed.draft = { a: p, b: null, pressed: true };
    ed.renderFrame();
    return;
  }
  if (ed.mode === "zone") {
    const d = ed.draft || (ed.draft = { pts: [], hover: null });
    if (d.pts.length >= 3 && ed.screenDist(p, d.pts[0]) <= CLOSE_PX) ed.closeZone();
    else {
      d.pts.push(p);
      ed.renderFrame();
    }
    return;
  }
  const t = e.target;
  const rule = t.dataset && t.dataset.rule !== undefined ? +t.dataset.rule : null;
  if (rule === null) {
    ed.select(null);
    return;
  }
  const point = t.classList.contains("handle") ? +t.dataset.point : -1;
  ed.svg.setPointerCapture(e.pointerId);
  ed.drag = { rule, point, start: p, orig: copy(pointsOf(ed.rules[rule])) };
  ed.select(rule, point);
  if (point >= 0) ed.focusHandle(rule, point);
}

/** Pointer moved over the picture (or captured by it). */
export function onMove(ed, e) {
  if (!ed.w) return;
  const d = ed.draft;
  if (ed.mode === "line" && d && d.pressed) {
    d.b = ed.frac(e);
    ed.renderFrame();
    return;
  }
  if (ed.mode === "zone" && d) {
    d.hover = ed.frac(e);
    ed.renderFrame();
    return;
  }
  const g = ed.drag;
  if (!g) return;
  const p = ed.frac(e);
  if (g.point >= 0) {
    ed.movePoint(g.rule, g.point, p);
    return;
  }
  // Move the whole rule, keeping every point inside the frame.
  let dx = p[0] - g.start[0], dy = p[1] - g.start[1];
  const xs = g.orig.map((q) => q[0]), ys = g.orig.map((q) => q[1]);
  dx = Math.min(1 - Math.max(...xs), Math.max(-Math.min(...xs), dx));
  dy = Math.min(1 - Math.max(...ys), Math.max(-Math.min(...ys), dy));
  const moved = g.orig.map(([x, y]) => [round4(x + dx), round4(y + dy)]);
  const r = ed.rules[g.rule];
  if (isZone(r)) r.zone = moved;
  else r.line = moved;
  ed.renderFrame();
  ed.updateCoords(g.rule);
  ed.edited();
}

/** Pointer released (or the browser cancelled it). */
export function onUp(ed, e) {
  const d = ed.draft;
  if (ed.mode === "line" && d && d.pressed) {
    d.pressed = false;
    const b = ed.frac(e);
    if (ed.screenDist(d.a, b) < CLICK_PX) {
      // A click: A is set, the next click sets B.
      d.b = null;
      ed.hint.textContent = "A is set; click where the line ends (B).";
      ed.renderFrame();
      return;
    }
    ed.addRule({ name: ed.uniqueName("line"), line: [d.a, b] });
    return;
  }
  if (ed.drag) {
    ed.drag = null;
    ed.edited();
  }
}

/** Keys in the editor: Escape, Enter (close a zone), arrows and Delete on a point. */
export function onKey(ed, e) {
  if (e.target.tagName === "INPUT") return;
  if (e.key === "Escape" && ed.mode !== "select") {
    ed.setMode("select");
    e.preventDefault();
    return;
  }
  if (e.key === "Enter" && ed.mode === "zone") {
    ed.closeZone();
    e.preventDefault();
    return;
  }
  const t = e.target;
  if (!t.classList || !t.classList.contains("handle") || t.dataset.rule === undefined) return;
  const i = +t.dataset.rule, j = +t.dataset.point;
  const step = e.shiftKey ? NUDGE * 10 : NUDGE;
  const move = { ArrowLeft: [-step, 0], ArrowRight: [step, 0], ArrowUp: [0, -step], ArrowDown: [0, step] }[e.key];
  if (move) {
    const p = pointsOf(ed.rules[i])[j];
    ed.movePoint(i, j, [round4(clamp01(p[0] + move[0])), round4(clamp01(p[1] + move[1]))]);
    e.preventDefault();
  } else if (e.key === "Delete" || e.key === "Backspace") {
    ed.deletePoint(i, j);
    e.preventDefault();
  }
}
