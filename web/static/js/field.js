// The result field as the page uses it: grid points with reference
// coordinates X, Y (pixels), quantities by name (NaN where a point is not
// valid), units, and lookups by position: nearest grid point and bilinear
// samples along a line.

/** Field is a normalised result grid. */
export class Field {
  constructor({ X, Y, quantities, units, mmPerPx, meta }) {
    this.X = X; this.Y = Y; this.n = X.length;
    this.q = quantities; // Map name -> Float64Array
    this.units = units;
    this.mmPerPx = mmPerPx || 0;
    this.meta = meta || {};
    this.buildGrid();
  }

  /** names lists the quantities, in the document's order. */
  names() { return [...this.q.keys()]; }

  /** unit returns the unit of quantity name ('' when dimensionless). */
  unit(name) {
    if (this.units[name] !== undefined) return this.units[name];
    return defaultUnit(name, this.mmPerPx);
  }

  /** value returns quantity name at point k, NaN when not valid. */
  value(name, k) {
    const a = this.q.get(name);
    return a && k >= 0 && k < a.length ? a[k] : NaN;
  }

  buildGrid() {
    const xs = uniq(this.X), ys = uniq(this.Y);
    this.xs = xs; this.ys = ys;
    this.nx = xs.length; this.ny = ys.length;
    this.dx = this.nx > 1 ? (xs[this.nx - 1] - xs[0]) / (this.nx - 1) : 1;
    this.dy = this.ny > 1 ? (ys[this.ny - 1] - ys[0]) / (this.ny - 1) : this.dx;
    if (this.nx === 1) this.dx = this.dy;
    this.x0 = xs[0]; this.y0 = ys[0];
    this.idx = new Int32Array(this.nx * this.ny).fill(-1);
    for (let k = 0; k < this.n; k++) {
      const i = Math.round((this.X[k] - this.x0) / this.dx);
      const j = Math.round((this.Y[k] - this.y0) / this.dy);
      if (i >= 0 && i < this.nx && j >= 0 && j < this.ny) this.idx[j * this.nx + i] = k;
    }
    // Validity: a point is valid when "valid" says so, else when u is finite.
    const valid = this.q.get('valid'), u = this.q.get('u');
    this.ok = new Uint8Array(this.n);
    for (let k = 0; k < this.n; k++) {
      this.ok[k] = valid ? (valid[k] > 0 ? 1 : 0) : (u ? (Number.isFinite(u[k]) ? 1 : 0) : 1);
    }
  }

  /** at returns the point index at grid cell (i, j), or -1. */
  at(i, j) {
    if (i < 0 || j < 0 || i >= this.nx || j >= this.ny) return -1;
    return this.idx[j * this.nx + i];
  }

  /** cell returns the grid cell (i, j) of point k. */
  cell(k) {
    return [Math.round((this.X[k] - this.x0) / this.dx), Math.round((this.Y[k] - this.y0) / this.dy)];
  }

  /** displacementPx returns the displacement of point k in pixels. */
  displacementPx(k) {
    let u = this.value('u', k), v = this.value('v', k);
    if (this.mmPerPx > 0 && this.unit('u') === 'mm') { u /= this.mmPerPx; v /= this.mmPerPx; }
    return [u, v];
  }

  /**
   * nearest returns the point whose position is closest to image point
   * (x, y): its reference position, or its deformed position X + u when
   * onDeformed is true. It returns -1 when (x, y) is more than a grid step
   * away from every point.
   */
  nearest(x, y, onDeformed) {
    let rx = x, ry = y;
    if (onDeformed) {
      // Undo the displacement of the point found at the guess, twice.
      for (let it = 0; it < 2; it++) {
        const k = this.nearestRef(rx, ry, 3);
        if (k < 0 || !this.ok[k]) break;
        const [u, v] = this.displacementPx(k);
        rx = x - u; ry = y - v;
      }
    }
    const ci = Math.round((rx - this.x0) / this.dx), cj = Math.round((ry - this.y0) / this.dy);
    let best = -1, bestD = Infinity;
    for (let j = cj - 2; j <= cj + 2; j++) {
      for (let i = ci - 2; i <= ci + 2; i++) {
        const k = this.at(i, j);
        if (k < 0) continue;
        let px = this.X[k], py = this.Y[k];
        if (onDeformed) {
          if (!this.ok[k]) continue;
          const [u, v] = this.displacementPx(k);
          px += u; py += v;
        }
        const d = (px - x) ** 2 + (py - y) ** 2;
        if (d < bestD) { bestD = d; best = k; }
      }
    }
    const lim = Math.max(this.dx, this.dy);
    return bestD <= lim * lim ? best : -1;
  }

  nearestRef(x, y, r) {
    const ci = Math.round((x - this.x0) / this.dx), cj = Math.round((y - this.y0) / this.dy);
    for (let d = 0; d <= r; d++) {
      for (let j = cj - d; j <= cj + d; j++) {
        for (let i = ci - d; i <= ci + d; i++) {
          if (Math.max(Math.abs(i - ci), Math.abs(j - cj)) !== d) continue;
          const k = this.at(i, j);
          if (k >= 0 && this.ok[k]) return k;
        }
      }
    }
    return -1;
  }

  /**
   * sample returns quantity name at reference point (x, y) by bilinear
   * interpolation between the four surrounding grid points, NaN when one
   * of them that carries weight is missing or invalid.
   */
  sample(name, x, y) {
    const a = this.q.get(name);
    if (!a) return NaN;
    const fx = (x - this.x0) / this.dx, fy = (y - this.y0) / this.dy;
    const i0 = Math.floor(fx), j0 = Math.floor(fy);
    const tx = fx - i0, ty = fy - j0;
    let sum = 0;
    for (const [di, dj, w] of [[0, 0, (1 - tx) * (1 - ty)], [1, 0, tx * (1 - ty)], [0, 1, (1 - tx) * ty], [1, 1, tx * ty]]) {
      if (w < 1e-9) continue;
      const k = this.at(i0 + di, j0 + dj);
      if (k < 0 || !this.ok[k] || !Number.isFinite(a[k])) return NaN;
      sum += w * a[k];
    }
    return sum;
  }

  /** stats returns {min, max, lo, hi} of the finite values of name, lo/hi being the 2nd and 98th percentiles. */
  stats(name) {
    const a = this.q.get(name) || [];
    const v = [];
    for (let k = 0; k < a.length; k++) if (this.ok[k] && Number.isFinite(a[k])) v.push(a[k]);
    if (!v.length) return { min: NaN, max: NaN, lo: NaN, hi: NaN, count: 0 };
    v.sort((p, q) => p - q);
    const pick = f => v[Math.min(v.length - 1, Math.max(0, Math.round(f * (v.length - 1))))];
    return { min: v[0], max: v[v.length - 1], lo: pick(0.02), hi: pick(0.98), count: v.length };
  }
}

function uniq(a) {
  const s = Float64Array.from(a).sort();
  const out = [];
  const span = s.length ? s[s.length - 1] - s[0] : 0;
  const tol = Math.max(1e-6, span * 1e-9);
  for (const x of s) if (!out.length || x - out[out.length - 1] > tol) out.push(x);
  return out;
}

const strainLike = /^(E|H|A)(11|22|12)$|^eps(11|22|12)$|^e[12]$|^von_mises$|^std_E/;

/** defaultUnit is the unit of a quantity when the document gives none. */
export function defaultUnit(name, mmPerPx) {
  if (/^(u|v|std_u|std_v)$/.test(name)) return mmPerPx > 0 ? 'mm' : 'px';
  if (/_deg$/.test(name)) return '°';
  if (strainLike.test(name)) return '–';
  if (/^(X|Y|x|y)$/.test(name)) return mmPerPx > 0 ? 'mm' : 'px';
  return '';
}

/** isStrain reports whether name is a strain measure. */
export function isStrain(name) { return strainLike.test(name); }

function toArray(v) {
  if (Array.isArray(v)) return v;
  if (ArrayBuffer.isView(v)) return Array.from(v);
  if (v && typeof v === 'object') return toArray(v.values || v.data || v.value);
  return null;
}

const coordNames = { X: ['X', 'x', 'X_px', 'x_px'], Y: ['Y', 'y', 'Y_px', 'y_px'] };

/**
 * parseField turns a field.json document into a Field. It accepts the
 * quantities as an object of arrays (under "quantities", "fields" or at
 * the top level), each array or {unit, values}; or a "points" list of
 * objects. Coordinates are X, Y (or x, y), per point or per grid axis.
 * It throws an Error naming what it could not find.
 */
export function parseField(doc) {
  if (!doc || typeof doc !== 'object') throw new Error('field.json: not a JSON object');
  const units = {};
  for (const [k, u] of Object.entries(doc.units || {})) units[k] = displayUnit(u);
  const meta = doc.metadata || doc.meta || {};
  const params = doc.params || doc.parameters || meta.params || {};
  const mmPerPx = +(doc.mm_per_px || meta.mm_per_px || params.mm_per_px || (doc.scale && doc.scale.mm_per_px) || 0);
  const grid = doc.grid || {};
  const cols = new Map();
  const addCols = obj => {
    if (!obj || typeof obj !== 'object' || Array.isArray(obj)) return;
    for (const [name, val] of Object.entries(obj)) {
      const arr = toArray(val);
      if (!arr || !arr.length || (typeof arr[0] !== 'number' && arr[0] !== null && typeof arr[0] !== 'boolean')) continue;
      cols.set(name, arr);
      if (val && !Array.isArray(val) && typeof val === 'object' && typeof val.unit === 'string') units[name] = displayUnit(val.unit);
    }
  };
  if (Array.isArray(doc.points) && doc.points.length && typeof doc.points[0] === 'object') {
    const keys = Object.keys(doc.points[0]);
    for (const key of keys) cols.set(key, doc.points.map(p => p[key]));
  }
  addCols(doc.quantities || doc.fields || doc.data);
  if (!cols.size) addCols(doc);
  const pick = names => {
    for (const n of names) {
      for (const src of [grid, doc]) { const a = toArray(src[n]); if (a) return a; }
      if (cols.has(n)) return cols.get(n);
    }
    return null;
  };
  let X = pick(coordNames.X), Y = pick(coordNames.Y);
  if (!X || !Y) throw new Error('field.json: no point coordinates (looked for X and Y)');
  for (const n of [...coordNames.X, ...coordNames.Y]) cols.delete(n);
  let n = Math.max(...[...cols.values()].map(a => a.length), 0);
  if (X.length * Y.length === n && X.length !== n) {
    // Axes given: expand row-major (x fastest).
    const ex = new Array(n), ey = new Array(n);
    for (let j = 0; j < Y.length; j++) for (let i = 0; i < X.length; i++) { ex[j * X.length + i] = X[i]; ey[j * X.length + i] = Y[j]; }
    X = ex; Y = ey;
  }
  if (!n) n = X.length;
  if (X.length !== n || Y.length !== n) throw new Error(`field.json: ${X.length} X and ${Y.length} Y coordinates for ${n} points`);
  const quantities = new Map();
  for (const [name, arr] of cols) {
    if (arr.length !== n) continue;
    const f = new Float64Array(n);
    for (let k = 0; k < n; k++) {
      const v = arr[k];
      f[k] = v === null || v === undefined ? NaN : typeof v === 'boolean' ? (v ? 1 : 0) : +v;
    }
    quantities.set(name, f);
  }
  if (!quantities.size) throw new Error('field.json: no quantities found');
  const f = new Field({ X: Float64Array.from(X, Number), Y: Float64Array.from(Y, Number), quantities, units, mmPerPx, meta: Object.assign({}, meta, { params }) });
  f.status = Array.isArray(doc.status) && doc.status.length === n ? doc.status : null;
  f.descriptions = doc.descriptions && typeof doc.descriptions === 'object' ? doc.descriptions : {};
  f.grid = { step: +grid.step || 0, subset: +grid.subset || 0 };
  return f;
}

/** displayUnit turns the unit names of field.json into display text: "1" (dimensionless) becomes "–", "deg" becomes "°". */
export function displayUnit(u) {
  if (u === '1' || u === '') return '–';
  if (u === 'deg') return '°';
  return String(u);
}
