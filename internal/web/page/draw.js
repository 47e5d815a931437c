// Drawing of the editor's SVG overlay, in the frame's pixels (viewBox);
// k is frame pixels per screen pixel, so handles and arrows keep their size.
import { svgEl } from "./dom.js";
import { centroid, inArrow, isZone, pointsOf } from "./geom.js";

const HANDLE_PX = 7; // radius of a point's handle, in screen pixels
const ARROW_PX = 44; // length of the "in" arrow, in screen pixels

/** The SVG group of rule i: its shape, the "in" arrow of a line, its name and point handles. */
export function drawRule(ed, r, i, k, invalid) {
  const sel = ed.sel && ed.sel.rule === i;
  const kind = isZone(r) ? "zone" : "line";
  const g = svgEl("g", { class: `rule ${kind}${sel ? " selected" : ""}${invalid ? " invalid" : ""}`, "data-index": i });
  const pts = pointsOf(r);
  const font = 14 * k;
  if (kind === "line" && pts.length === 2) {
    const [a, b] = pts.map((p) => ed.px(p));
    const seg = { x1: a[0], y1: a[1], x2: b[0], y2: b[1] };
    g.append(svgEl("line", { class: "hit", ...seg, "data-rule": i }), svgEl("line", { class: "body", ...seg, "data-rule": i }));
    g.append(...arrow(ed, pts[0], pts[1], k));
    g.append(svgEl("text", { class: "end-label", x: a[0] + 9 * k, y: a[1] - 9 * k, "font-size": font }, "A"));
    g.append(svgEl("text", { class: "end-label", x: b[0] + 9 * k, y: b[1] - 9 * k, "font-size": font }, "B"));
    const m = [(a[0] + b[0]) / 2, (a[1] + b[1]) / 2];
    g.append(svgEl("text", { class: "name", x: m[0], y: m[1] - 10 * k, "font-size": font, "text-anchor": "middle" }, r.name));
  } else if (pts.length > 0) {
    const px = pts.map((p) => ed.px(p));
    g.append(svgEl("polygon", { class: "body", points: px.map((p) => p.join(",")).join(" "), "data-rule": i }));
    const c = ed.px(centroid(pts));
    g.append(svgEl("text", { class: "name", x: c[0], y: c[1], "font-size": font, "text-anchor": "middle" }, r.name));
  }
  pts.forEach((p, j) => g.append(handle(ed, r, i, j, p, k, kind)));
  return g;
}

function handle(ed, r, i, j, p, k, kind) {
  const label = kind === "line" ? (j === 0 ? "A" : "B") : `corner ${j + 1}`;
  const [x, y] = ed.px(p);
  const sel = ed.sel && ed.sel.rule === i && ed.sel.point === j;
  return svgEl("circle", {
    class: `handle${sel ? " selected" : ""}`, cx: x, cy: y, r: HANDLE_PX * k,
    tabindex: 0, role: "button", "data-rule": i, "data-point": j, "data-x": p[0], "data-y": p[1],
    "aria-label": `${r.name || "unnamed rule"}, ${label} at x ${p[0]}, y ${p[1]}`,
    onfocus: () => ed.select(i, j),
  });
}

// The "in" arrow of a line A→B: shaft from the middle, head, and a label.
function arrow(ed, a, b, k) {
  const ar = inArrow(a, b, ed.w, ed.h, ARROW_PX * k);
  if (!ar) return [];
  const ux = (ar.x2 - ar.x1) / (ARROW_PX * k), uy = (ar.y2 - ar.y1) / (ARROW_PX * k);
  const hl = 10 * k, hw = 6 * k;
  const base = [ar.x2 - ux * hl, ar.y2 - uy * hl];
  const head = [[ar.x2, ar.y2], [base[0] - uy * hw, base[1] + ux * hw], [base[0] + uy * hw, base[1] - ux * hw]];
  return [
    svgEl("line", { class: "in-arrow", x1: ar.x1, y1: ar.y1, x2: base[0], y2: base[1], "data-x2": ar.x2, "data-y2": ar.y2 }),
    svgEl("polygon", { class: "in-head", points: head.map((p) => p.join(",")).join(" ") }),
    svgEl("text", { class: "in-label", x: ar.x2 + ux * 12 * k, y: ar.y2 + uy * 12 * k + 5 * k, "font-size": 13 * k, "text-anchor": "middle" }, "in"),
  ];
}

/** The shape being drawn (a line from A, or a zone's corners so far). */
export function drawDraft(ed, k) {
  const d = ed.draft;
  if (!d) return [];
  if (ed.mode === "line") {
    const [a, b] = [ed.px(d.a), ed.px(d.b || d.a)];
    const out = [svgEl("line", { class: "body", x1: a[0], y1: a[1], x2: b[0], y2: b[1] })];
    if (d.b) out.push(...arrow(ed, d.a, d.b, k));
    out.push(svgEl("circle", { class: "handle", cx: a[0], cy: a[1], r: HANDLE_PX * k }));
    return out;
  }
  const px = d.pts.map((p) => ed.px(p));
  if (d.hover) px.push(ed.px(d.hover));
  const out = [svgEl("polyline", { class: "body", points: px.map((p) => p.join(",")).join(" ") })];
  d.pts.forEach((p, j) => {
    const [x, y] = ed.px(p);
    out.push(svgEl("circle", { class: `handle${j === 0 && d.pts.length >= 3 ? " closer" : ""}`, cx: x, cy: y, r: HANDLE_PX * k, "data-draft-point": j }));
  });
  return out;
}
