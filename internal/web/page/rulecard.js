// The list of rules beside the editor's picture.
import { el } from "./dom.js";
import { isZone, pointsOf } from "./geom.js";

function fmt(p) {
  return `(${p[0]}, ${p[1]})`;
}

/** The card of rule i in the list beside the picture: name, coordinates, dwell, buttons, errors. */
export function ruleCard(ed, r, i) {
  const zone = isZone(r);
  const sel = ed.sel && ed.sel.rule === i;
  const name = el("input", { class: "name", type: "text", value: r.name, autocomplete: "off", spellcheck: "false" });
  name.value = r.name;
  name.addEventListener("input", () => {
    r.name = name.value;
    ed.renderFrame();
    ed.edited();
  });
  const extra = [];
  if (zone) {
    const dwell = el("input", { class: "dwell", type: "text", placeholder: "e.g. 10s", autocomplete: "off" });
    dwell.value = r.dwell || "";
    dwell.addEventListener("input", () => {
      if (dwell.value.trim()) r.dwell = dwell.value.trim();
      else delete r.dwell;
      ed.edited();
    });
    extra.push(el("label", {}, "Dwell alert after ", dwell));
  }
  const facts = [];
  if (r.classes && r.classes.length) facts.push(`classes: ${r.classes.join(", ")}`);
  if (r.anchor) facts.push(`anchor: ${r.anchor}`);
  return el("li", {
    class: `rule-card${sel ? " selected" : ""}`, "data-rule-index": i,
    onclick: (e) => { if (e.target.tagName !== "INPUT" && e.target.tagName !== "BUTTON") ed.select(i, -1); },
  },
    el("div", { class: "rule-head" }, el("label", {}, "Name ", name), el("span", { class: `kind kind-${zone ? "zone" : "line"}` }, zone ? "zone" : "line")),
    el("p", { class: "coords" }, coordsText(r)),
    ...extra,
    facts.length ? el("p", { class: "facts" }, facts.join(" · ")) : null,
    el("div", { class: "actions" },
      zone ? null : el("button", { type: "button", class: "flip", onclick: () => ed.flip(i) }, "Flip direction"),
      el("button", { type: "button", class: "delete", onclick: () => ed.deleteRule(i) }, "Delete rule")),
    el("ul", { class: "errors", "aria-live": "polite" }));
}

/** A rule's points as text: "A (x, y) → B (x, y)" or the corners. */
export function coordsText(r) {
  const pts = pointsOf(r);
  if (!isZone(r) && pts.length === 2) return `A ${fmt(pts[0])} → B ${fmt(pts[1])}`;
  return pts.map(fmt).join(" ");
}
