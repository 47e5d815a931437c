// The server's API (relative URLs, so the page works under any prefix; the
// login cookie goes along with same-origin requests). See the README, "The
// page".

/** The URL of a source's resource, e.g. sourceURL("walkway", "snapshot.jpg"). */
export function sourceURL(id, rest) {
  return `api/sources/${encodeURIComponent(id)}/${rest}`;
}

/**
 * Sends a request and decodes its JSON answer. Resolves to {status, body};
 * body is null when the answer is not JSON. Rejects only when the server
 * cannot be reached.
 */
export async function request(url, init = {}) {
  const res = await fetch(url, { credentials: "same-origin", ...init });
  let body = null;
  try {
    body = await res.json();
  } catch {
    body = null;
  }
  return { status: res.status, body };
}

/** GET /api/sources; throws with a readable message on failure. */
export async function getSources() {
  const { status, body } = await request("api/sources", { cache: "no-store" });
  if (status !== 200 || !body) {
    const login = status === 401 ? " (open this page once as /?token=… to sign in)" : "";
    throw new Error(`GET api/sources: HTTP ${status}${body && body.error ? ": " + body.error : ""}${login}`);
  }
  return body;
}

/** POSTs a source's whole rule list to rules/check or rules/save. */
export function postRules(id, action, rules, signal) {
  return request(sourceURL(id, `rules/${action}`), {
    method: "POST",
    headers: { "Content-Type": "application/json" },
    body: JSON.stringify({ rules }),
    signal,
  });
}
