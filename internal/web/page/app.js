// The operator's page: "#/" lists the sources with a preview and the counts
// per rule; "#/source/<id>" opens the rule editor of one source.
import { getSources, sourceURL } from "./api.js";
import { el } from "./dom.js";
import { openEditor } from "./editor.js";

const REFRESH_MS = 2000; // the list re-reads counts and previews this often

// State readable from the console and by the browser test.
window.tallyd = { editor: null };

const main = document.getElementById("main");
const siteName = document.getElementById("site");
let stopView = null;

function route() {
  if (stopView) stopView();
  window.tallyd.editor = null;
  main.replaceChildren();
  const m = location.hash.match(/^#\/source\/(.+)$/);
  stopView = m ? openEditor(main, decodeURIComponent(m[1]), setSite) : showList(main);
  main.focus({ preventScroll: true });
}

function setSite(site) {
  siteName.textContent = site ? `· ${site}` : "";
  document.title = site ? `tallyd · ${site}` : "tallyd";
}

/** The counts of one rule as text, from the totals of GET /api/sources. */
function countsText(t, occupancy) {
  if (!t) return "no counts yet";
  if (t.kind === "zone") {
    const parts = [`enter ${t.enter ?? 0}`, `exit ${t.exit ?? 0}`, `dwell alerts ${t.dwell ?? 0}`];
    if (occupancy !== undefined) parts.push(`inside now ${occupancy}`);
    parts.push(`most at once ${t.max_occupancy ?? 0}`);
    return parts.join(" · ");
  }
  return `in ${t.in ?? 0} · out ${t.out ?? 0}`;
}

function showList(root) {
  let timer = 0;
  let stopped = false;
  const cards = new Map();
  const status = el("p", { class: "status", role: "status" }, "Loading sources…");
  const grid = el("div", { class: "sources" });
  root.append(el("h2", {}, "Sources"), status, grid);

  function card(s) {
    const img = el("img", { class: "preview", alt: `Newest frame of ${s.id} with its rules drawn` });
    const noFrame = el("p", { class: "no-frame", hidden: true }, "No frame yet.");
    const state = el("span", { class: "state" });
    const counts = el("tbody");
    const c = {
      node: el("article", { class: "source-card", "data-source": s.id },
        el("h3", {}, s.id, " ", state),
        el("div", { class: "preview-box" }, img, noFrame),
        el("table", { class: "counts" },
          el("caption", {}, "Counts so far"),
          el("thead", {}, el("tr", {}, el("th", { scope: "col" }, "Rule"), el("th", { scope: "col" }, "Kind"), el("th", { scope: "col" }, "Counts"))),
          counts),
        el("p", { class: "links" },
          el("a", { class: "edit button", href: `#/source/${encodeURIComponent(s.id)}` }, "Edit rules"),
          " ",
          el("a", { href: sourceURL(s.id, "preview.mjpg"), target: "_blank", rel: "noopener" }, "Live preview (Motion-JPEG)"))),
      img, noFrame, state, counts, loading: false,
    };
    cards.set(s.id, c);
    grid.append(c.node);
    return c;
  }

  // Loads the next snapshot off-screen and swaps it in, so the preview never
  // flickers; one load at a time per source.
  function refreshPreview(id, c) {
    if (c.loading) return;
    c.loading = true;
    const next = new Image();
    next.className = "preview";
    next.alt = c.img.alt;
    next.onload = () => {
      c.loading = false;
      if (stopped) return;
      c.img.replaceWith(next);
      c.img = next;
      c.img.hidden = false;
      c.noFrame.hidden = true;
    };
    next.onerror = () => {
      c.loading = false;
      c.img.hidden = true;
      c.noFrame.hidden = false;
    };
    next.src = `${sourceURL(id, "snapshot.jpg")}?t=${Date.now()}`;
  }

  function update(s) {
    const c = cards.get(s.id) || card(s);
    c.state.textContent = s.state || "unknown";
    c.state.className = `state state-${s.state || "unknown"}`;
    const rows = (s.rules || []).map((r) => {
      const kind = r.zone ? "zone" : "line";
      return el("tr", { "data-rule": r.name },
        el("td", {}, r.name), el("td", {}, kind),
        el("td", { class: "count" }, countsText((s.totals || {})[r.name], (s.occupancy || {})[r.name])));
    });
    if (rows.length === 0) rows.push(el("tr", {}, el("td", { colspan: 3 }, "No rules yet.")));
    c.counts.replaceChildren(...rows);
    refreshPreview(s.id, c);
  }

  async function refresh() {
    try {
      const data = await getSources();
      if (stopped) return;
      setSite(data.site);
      status.textContent = data.sources.length ? "" : "The site file has no sources.";
      const seen = new Set();
      for (const s of data.sources) {
        seen.add(s.id);
        update(s);
      }
      for (const [id, c] of cards) {
        if (!seen.has(id)) {
          c.node.remove();
          cards.delete(id);
        }
      }
    } catch (e) {
      if (!stopped) status.textContent = `Cannot read the sources: ${e.message}`;
    }
    if (!stopped && document.visibilityState !== "hidden") timer = setTimeout(refresh, REFRESH_MS);
    else if (!stopped) timer = setTimeout(refresh, REFRESH_MS * 5);
  }
  refresh();
  return () => {
    stopped = true;
    clearTimeout(timer);
  };
}

window.addEventListener("hashchange", route);
route();
