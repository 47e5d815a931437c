// Small helpers to build elements without innerHTML (names from the site
// file are shown as text, never parsed as markup).

const SVG_NS = "http://www.w3.org/2000/svg";

function fill(node, attrs, children) {
  for (const [k, v] of Object.entries(attrs || {})) {
    if (v === undefined || v === null || v === false) continue;
    if (k.startsWith("on")) node.addEventListener(k.slice(2), v);
    else node.setAttribute(k, v === true ? "" : String(v));
  }
  for (const c of children.flat()) {
    if (c === undefined || c === null || c === false) continue;
    node.append(c instanceof Node ? c : String(c));
  }
  return node;
}

/** An HTML element: el("button", {class: "x", onclick: f}, "Label"). */
export function el(tag, attrs, ...children) {
  return fill(document.createElement(tag), attrs, children);
}

/** An SVG element, same arguments as el. */
export function svgEl(tag, attrs, ...children) {
  return fill(document.createElementNS(SVG_NS, tag), attrs, children);
}
