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

/** withAuth adds the bearer token, if any, to fetch options. */
export function withAuth(opts = {}) {
  const t = token();
  if (!t) return opts;
  const headers = new Headers(opts.headers || {});
  headers.set('Authorization', `Bearer ${t}`);
  return { ...opts, headers };
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
  if (err instanceof ApiError && err.status === 401) items.push({ field: 'token', message: 'enter the access token under “Connection” at the top of the page' });
  let title = p.title || 'Request failed';
  if (err instanceof ApiError && err.status) title += ` (HTTP ${err.status})`;
  return { title, detail: p.detail || '', items };
}

/** absolute resolves a Location header value against the page. */
export function absolute(loc) {
  return new URL(loc, window.location.href).pathname;
}
