// Geometry shared by the list and the editor. Coordinates of rules are
// fractions of the frame (x from the left, y from the top), as in the site
// file; drawing happens in the frame's pixels (the SVG viewBox).

/** Rounds a fraction to 4 decimals, the precision the page writes. */
export function round4(v) {
  return Math.round(v * 1e4) / 1e4;
}

/** Keeps a fraction within 0..1. */
export function clamp01(v) {
  return Math.min(1, Math.max(0, v));
}

/** A point of the frame in pixels, from a point in fractions. */
export function toPx([x, y], w, h) {
  return [x * w, y * h];
}

/**
 * The "in" arrow of a line A→B, in pixels: it starts at the line's middle and
 * points along (-dy, dx) where (dx, dy) = B - A in image coordinates (y down),
 * i.e. to the right of A→B as drawn. Crossing that way counts "in".
 * Computed in pixels so that the arrow looks perpendicular on screen; a
 * positive scaling of the axes keeps the side, so it points to the same side
 * as (-dy, dx) computed in fractions. Returns null for a zero-length line.
 */
export function inArrow(a, b, w, h, len) {
  const [ax, ay] = toPx(a, w, h);
  const [bx, by] = toPx(b, w, h);
  const dx = bx - ax, dy = by - ay;
  const n = Math.hypot(dx, dy);
  if (n === 0) return null;
  const mx = (ax + bx) / 2, my = (ay + by) / 2;
  return { x1: mx, y1: my, x2: mx + (-dy / n) * len, y2: my + (dx / n) * len };
}

/** Twice the signed area of a polygon (shoelace); 0 when degenerate. */
export function area2(pts) {
  let s = 0;
  for (let i = 0; i < pts.length; i++) {
    const [x1, y1] = pts[i], [x2, y2] = pts[(i + 1) % pts.length];
    s += x1 * y2 - x2 * y1;
  }
  return s;
}

/** The mean of the points, to place a label. */
export function centroid(pts) {
  const c = [0, 0];
  for (const [x, y] of pts) { c[0] += x; c[1] += y; }
  return [c[0] / pts.length, c[1] / pts.length];
}

/** The points of a rule: a line's A and B, or a zone's corners. */
export function pointsOf(rule) {
  return rule.zone || rule.line || [];
}

/** Whether a rule is a zone (else a line). */
export function isZone(rule) {
  return Array.isArray(rule.zone);
}
