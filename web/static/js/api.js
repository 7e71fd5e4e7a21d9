// Talking to the Mottle HTTP API (/v1). Errors come back as RFC 9457
// problem documents; ApiError keeps them so the page can show the title,
// the detail and every field-level message.

/** ApiError is a failed request, with the problem document when there was one. */
export class ApiError extends Error {
  constructor(status, problem, url) {
    super(problem.title || `request failed (HTTP ${status})`);
    this.status = status;
    this.problem = problem;
    this.url = url;
  }
}

const tokenKey = 'mottle-token';

/** token returns the bearer token the user entered for this tab ('' for none). */
export function token() {
  try { return sessionStorage.getItem(tokenKey) || ''; } catch { return ''; }
}

/** setToken keeps t for the rest of the tab's session ('' removes it). */
export function setToken(t) {
  try { if (t) sessionStorage.setItem(tokenKey, t); else sessionStorage.removeItem(tokenKey); } catch { /* storage off */ }
}

const projectKey = 'mottle-project';

/** project returns the project chosen for this tab ('' for the token's default; lists then show every project). */
export function project() {
  try { return sessionStorage.getItem(projectKey) || ''; } catch { return ''; }
}

/** setProject keeps the chosen project for the rest of the tab's session. */
export function setProject(p) {
  try { if (p) sessionStorage.setItem(projectKey, p); else sessionStorage.removeItem(projectKey); } catch { /* storage off */ }
}

/** withAuth adds the bearer token and the chosen project, if any, to fetch options. */
export function withAuth(opts = {}) {
  const t = token(), p = project();
  if (!t && !p) return opts;
  const headers = new Headers(opts.headers || {});
  if (t) headers.set('Authorization', `Bearer ${t}`);
  if (p) headers.set('X-Mottle-Project', p);
  return { ...opts, headers };
}

// ---- who is signed in --------------------------------------------------------

/** roleRank orders the roles as the service does: each includes the ones before. */
export const roleRank = { none: 0, read: 1, submit: 2, manage: 3 };

let who = null;

/** principal is the answer of GET /v1/principal last read (null before, or when the token is refused). */
export function principal() { return who; }

/** loadPrincipal asks the service who the token is; it throws ApiError (401 for a refused token). */
export async function loadPrincipal() {
  who = null;
  who = await getJSON('/v1/principal');
  return who;
}

/** roleIn returns the caller's role in project p ('' = where new work goes), as a name. */
export function roleIn(p) {
  if (!who) return 'none';
  const proj = p || project() || who.default_project;
  let best = 0;
  for (const g of who.grants || []) if (g.project === proj || g.project === '*') best = Math.max(best, roleRank[g.role] || 0);
  return Object.keys(roleRank).find(k => roleRank[k] === best);
}

/** can reports whether the caller has at least role in project p. */
export function can(role, p) { return roleRank[roleIn(p)] >= roleRank[role]; }

/**
 * openEvents opens an EventSource on url. An EventSource cannot send a
 * header, so with a token it first trades the token for a single-use
 * stream ticket (POST /v1/stream-tickets) and puts the ticket, never the
 * token, in the URL. A ticket opens one stream: when the stream breaks,
 * the browser's reconnection is refused and the caller falls back to
 * polling or opens a new one.
 */
export async function openEvents(url) {
  if (!token()) return new EventSource(url);
  const t = await getJSON('/v1/stream-tickets', { method: 'POST' });
  return new EventSource(`${url}${url.includes('?') ? '&' : '?'}ticket=${encodeURIComponent(t.ticket)}`);
}

/** request fetches url and throws ApiError for any status outside 2xx. */
export async function request(url, opts = {}) {
  let resp;
  try {
    resp = await fetch(url, withAuth(opts));
  } catch (err) {
    throw new ApiError(0, {
      title: 'The service did not answer',
      detail: `${opts.method || 'GET'} ${url}: ${err.message}. Is "mottle serve" still running?`,
    }, url);
  }
  if (!resp.ok) throw new ApiError(resp.status, await readProblem(resp), url);
  return resp;
}

/** getJSON fetches url and parses the JSON body. */
export async function getJSON(url, opts) {
  const resp = await request(url, opts);
  return resp.json();
}

async function readProblem(resp) {
  const text = await resp.text().catch(() => '');
  let body = null;
  try { body = JSON.parse(text); } catch { /* not JSON */ }
  if (body && typeof body === 'object') {
    if (!body.title) body.title = resp.statusText || `HTTP ${resp.status}`;
    return body;
  }
  return { title: resp.statusText || `HTTP ${resp.status}`, detail: text.trim().slice(0, 500), status: resp.status };
}

/**
 * describe turns an error into {title, detail, items: [{field, message}]}
 * for display. It accepts ApiError, plain Error and problem-like objects,
 * and knows the common spellings of field-level lists (errors,
 * invalid_params, invalid-params) and of their members.
 */
export function describe(err) {
  const p = err instanceof ApiError ? err.problem : (err && err.problem) || null;
  if (!p) return { title: 'Something went wrong', detail: String(err && err.message || err), items: [] };
  const list = p.errors || p.invalid_params || p['invalid-params'] || p.problems || [];
  const items = [];
  if (Array.isArray(list)) {
    for (const e of list) {
      if (typeof e === 'string') { items.push({ field: '', message: e }); continue; }
      if (!e || typeof e !== 'object') continue;
      items.push({
        field: e.field || e.name || e.pointer || e.parameter || e.param || '',
        message: e.message || e.detail || e.reason || e.title || JSON.stringify(e),
      });
    }
  }
  if (err instanceof ApiError && err.status === 401 && !p.detail) p.detail = 'This server asks for an access token.';
  if (err instanceof ApiError && err.status === 401) items.push({ field: 'token', message: 'sign in with your access token under “Connection” at the top of the page' });
  let title = p.title || 'Request failed';
  if (err instanceof ApiError && err.status) title += ` (HTTP ${err.status})`;
  return { title, detail: p.detail || '', items };
}

/** absolute resolves a Location header value against the page. */
export function absolute(loc) {
  return new URL(loc, window.location.href).pathname;
}
