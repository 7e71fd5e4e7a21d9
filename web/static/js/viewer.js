// The results map: a quantity drawn over the reference or the deformed
// image, its colour bar, the hover read-out, the profile line and the
// displacement vectors. Everything is computed here from field.json.

import * as cmap from './colormap.js';
import { fmt, linePlot, niceTicks } from './plot.js';
import { isStrain } from './field.js';


export class MapView {
  constructor(els) {
    this.el = els; // {canvas, colorbar, readout, where, profile, profileText, onLine, onChange}
    this.canvas = els.canvas; this.ctx = this.canvas.getContext('2d');
    this.field = null; this.images = {}; this.W = 0; this.H = 0;
    this.opts = { quantity: '', on: 'reference', cmap: 'auto', lo: NaN, hi: NaN, opacity: 0.8, vectors: false, vecScale: 1, tool: 'read', smooth: false };
    this.line = null; this.lineRef = null; this.drag = null; this.hover = -1;
    this.tables = {};
    const c = this.canvas;
    c.addEventListener('pointermove', e => this.pointerMove(e));
    c.addEventListener('pointerdown', e => this.pointerDown(e));
    c.addEventListener('pointerup', e => this.pointerUp(e));
    c.addEventListener('pointerleave', () => { if (!this.drag) this.setHover(-1); });
    c.addEventListener('keydown', e => this.key(e));
  }

  /** show replaces the field and background images and redraws. */
  show(field, images, width, height) {
    this.field = field; this.images = images || {};
    const f = field;
    this.W = width || Math.ceil(f.xs[f.nx - 1] + f.dx);
    this.H = height || Math.ceil(f.ys[f.ny - 1] + f.dy);
    if (!f.q.has(this.opts.quantity)) this.opts.quantity = f.q.has('E11') ? 'E11' : f.names()[0];
    this.autoRange();
    this.fit();
    this.setHover(-1);
    if (this.lineRef) this.profile(); else this.render();
  }

  fit() {
    const avail = Math.max(240, (this.canvas.parentElement.clientWidth || 800) - 90);
    // Tall enough to be large, short enough that map and controls fit the window together.
    const maxH = Math.max(240, Math.min(760, (window.innerHeight || 800) - 90));
    this.s = Math.min(avail / this.W, maxH / this.H, 6);
    this.canvas.width = Math.round(this.W * this.s);
    this.canvas.height = Math.round(this.H * this.s);
    this.el.colorbar.height = Math.max(240, this.canvas.height);
  }

  set(opts) {
    const q = this.opts.quantity;
    Object.assign(this.opts, opts);
    if (opts.quantity && opts.quantity !== q) this.autoRange();
    if (opts.cmap) this.autoRange();
    if (this.lineRef && (opts.quantity || opts.on)) this.profile(); else this.render();
  }

  /** mapName is the colour map used for the current quantity. */
  mapName() {
    if (this.opts.cmap !== 'auto') return this.opts.cmap;
    return cmap.forQuantity(this.opts.quantity);
  }

  autoRange() {
    if (!this.field) return;
    const st = this.field.stats(this.opts.quantity);
    let lo = st.lo, hi = st.hi;
    if (cmap.diverging(this.mapName())) { const m = Math.max(Math.abs(lo), Math.abs(hi)); lo = -m; hi = m; }
    if (!(hi > lo)) { const d = Math.abs(lo) * 0.01 || 1e-6; lo -= d; hi += d; }
    this.opts.lo = lo; this.opts.hi = hi;
    if (this.el.onRange) this.el.onRange(lo, hi);
  }

  /** div reports whether the current map is diverging. */
  div() { return cmap.diverging(this.mapName()); }

  table() {
    const n = this.mapName();
    return this.tables[n] || (this.tables[n] = cmap.table(n));
  }

  /** toImage converts a pointer event to image coordinates. */
  toImage(e) {
    const r = this.canvas.getBoundingClientRect();
    return [(e.clientX - r.left) * (this.canvas.width / r.width) / this.s - 0.5, (e.clientY - r.top) * (this.canvas.height / r.height) / this.s - 0.5];
  }

  /** toClient converts image coordinates to client (viewport) coordinates. */
  toClient(x, y) {
    const r = this.canvas.getBoundingClientRect();
    return [r.left + (x + 0.5) * this.s * r.width / this.canvas.width, r.top + (y + 0.5) * this.s * r.height / this.canvas.height];
  }

  render() {
    const ctx = this.ctx, f = this.field, s = this.s, o = this.opts;
    ctx.setTransform(1, 0, 0, 1, 0, 0);
    ctx.fillStyle = '#2a3036'; ctx.fillRect(0, 0, this.canvas.width, this.canvas.height);
    if (!f) return;
    // Image pixel (x, y) covers [x − ½, x + ½]: shift by half a pixel.
    ctx.setTransform(s, 0, 0, s, 0.5 * s, 0.5 * s);
    const bg = this.images[o.on];
    if (bg) { ctx.imageSmoothingEnabled = s < 1; ctx.drawImage(bg, -0.5, -0.5, this.W, this.H); }
    const lut = this.table();
    const a = f.q.get(o.quantity);
    ctx.globalAlpha = o.opacity;
    if (a && o.on === 'reference' && o.smooth) {
      // Bilinear between measured grid points only: r×r samples per cell.
      const r = Math.max(1, Math.min(8, Math.floor(1024 / Math.max(f.nx, f.ny))));
      const W = f.nx * r, H = f.ny * r;
      const img = new ImageData(W, H);
      for (let y = 0; y < H; y++) {
        const Y = f.y0 - f.dy / 2 + (y + 0.5) * f.dy / r;
        for (let x = 0; x < W; x++) {
          const v = f.sample(o.quantity, f.x0 - f.dx / 2 + (x + 0.5) * f.dx / r, Y);
          if (!Number.isFinite(v)) continue;
          const c = cmap.index(v, o.lo, o.hi, this.div()), p = 4 * (y * W + x);
          img.data[p] = lut[3 * c]; img.data[p + 1] = lut[3 * c + 1]; img.data[p + 2] = lut[3 * c + 2]; img.data[p + 3] = 255;
        }
      }
      const off = new OffscreenCanvas(W, H);
      off.getContext('2d').putImageData(img, 0, 0);
      ctx.imageSmoothingEnabled = false;
      ctx.drawImage(off, f.x0 - f.dx / 2, f.y0 - f.dy / 2, f.nx * f.dx, f.ny * f.dy);
    } else if (a && o.on === 'reference') {
      const img = new ImageData(f.nx, f.ny);
      for (let j = 0; j < f.ny; j++) for (let i = 0; i < f.nx; i++) {
        const k = f.at(i, j), p = 4 * (j * f.nx + i);
        if (k < 0 || !f.ok[k] || !Number.isFinite(a[k])) continue;
        const c = cmap.index(a[k], o.lo, o.hi, this.div());
        img.data[p] = lut[3 * c]; img.data[p + 1] = lut[3 * c + 1]; img.data[p + 2] = lut[3 * c + 2]; img.data[p + 3] = 255;
      }
      const off = new OffscreenCanvas(f.nx, f.ny);
      off.getContext('2d').putImageData(img, 0, 0);
      ctx.imageSmoothingEnabled = false;
      ctx.drawImage(off, f.x0 - f.dx / 2, f.y0 - f.dy / 2, f.nx * f.dx, f.ny * f.dy);
    } else if (a) {
      // Deformed: each cell mapped by x = X + u + F·(dX), its local gradient.
      const F = ['F11', 'F12', 'F21', 'F22'].map(n => f.q.get(n));
      const hx = f.dx / 2, hy = f.dy / 2;
      for (let k = 0; k < f.n; k++) {
        if (!f.ok[k] || !Number.isFinite(a[k])) continue;
        const [u, v] = f.displacementPx(k);
        if (!Number.isFinite(u) || !Number.isFinite(v)) continue;
        let f11 = 1, f12 = 0, f21 = 0, f22 = 1;
        if (F[0] && Number.isFinite(F[0][k])) { f11 = F[0][k]; f12 = F[1][k]; f21 = F[2][k]; f22 = F[3][k]; }
        const cx = f.X[k] + u, cy = f.Y[k] + v;
        const c = cmap.index(a[k], o.lo, o.hi, this.div());
        ctx.fillStyle = `rgb(${lut[3 * c]},${lut[3 * c + 1]},${lut[3 * c + 2]})`;
        ctx.beginPath();
        for (const [sx, sy] of [[-1, -1], [1, -1], [1, 1], [-1, 1]]) {
          ctx.lineTo(cx + f11 * sx * hx + f12 * sy * hy, cy + f21 * sx * hx + f22 * sy * hy);
        }
        ctx.closePath(); ctx.fill();
      }
    }
    ctx.globalAlpha = 1;
    if (o.vectors) this.drawVectors();
    if (this.hover >= 0) this.drawHover();
    const ln = this.drag || this.line;
    if (ln) {
      ctx.lineCap = 'round';
      for (const [col, w] of [['#ffffff', 5], ['#c26a00', 2.5]]) {
        ctx.strokeStyle = col; ctx.lineWidth = w / s;
        ctx.beginPath(); ctx.moveTo(ln.x0, ln.y0); ctx.lineTo(ln.x1, ln.y1); ctx.stroke();
      }
      ctx.fillStyle = '#c26a00';
      ctx.beginPath(); ctx.arc(ln.x0, ln.y0, 4 / s, 0, 2 * Math.PI); ctx.fill();
    }
    this.drawColorbar();
  }

  drawVectors() {
    const f = this.field, ctx = this.ctx, s = this.s;
    const stride = Math.max(1, Math.ceil(28 / (f.dx * s)));
    // Optionally relative to the mean displacement, which removes the rigid
    // translation and shows the deformation.
    let mu = 0, mv = 0, cnt = 0;
    if (this.opts.vecRelative) {
      for (let k = 0; k < f.n; k++) if (f.ok[k]) { const [u, v] = f.displacementPx(k); if (Number.isFinite(u) && Number.isFinite(v)) { mu += u; mv += v; cnt++; } }
      if (cnt) { mu /= cnt; mv /= cnt; }
    }
    const disp = k => { const [u, v] = f.displacementPx(k); return [u - mu, v - mv]; };
    const mags = [];
    for (let k = 0; k < f.n; k++) if (f.ok[k]) { const [u, v] = disp(k); if (Number.isFinite(u)) mags.push(Math.hypot(u, v)); }
    if (!mags.length) return;
    mags.sort((p, q) => p - q);
    const big = mags[Math.floor(0.98 * (mags.length - 1))] || 1e-9;
    const k0 = (stride * f.dx * 0.9) / big * this.opts.vecScale;
    this.vectorScale = k0;
    if (this.el.onVectors) this.el.onVectors(k0, cnt ? [mu, mv] : null);
    ctx.lineCap = 'round';
    for (const [col, w] of [['rgba(255,255,255,0.9)', 3.5], ['#111417', 1.5]]) {
      ctx.strokeStyle = col; ctx.lineWidth = w / s;
      ctx.beginPath();
      for (let j = 0; j < f.ny; j += stride) for (let i = 0; i < f.nx; i += stride) {
        const k = f.at(i, j);
        if (k < 0 || !f.ok[k]) continue;
        const [u, v] = disp(k);
        if (!Number.isFinite(u) || !Number.isFinite(v)) continue;
        let x = f.X[k], y = f.Y[k];
        if (this.opts.on === 'deformed') { const [du, dv] = f.displacementPx(k); x += du; y += dv; }
        const ex = x + u * k0, ey = y + v * k0;
        const L = Math.hypot(ex - x, ey - y);
        ctx.moveTo(x, y); ctx.lineTo(ex, ey);
        if (L > 3 / s) {
          const h = Math.min(L * 0.35, 6 / s), ang = Math.atan2(ey - y, ex - x);
          for (const d of [2.6, -2.6]) { ctx.moveTo(ex, ey); ctx.lineTo(ex + h * Math.cos(ang + d), ey + h * Math.sin(ang + d)); }
        }
      }
      ctx.stroke();
    }
  }

  drawHover() {
    const f = this.field, k = this.hover, ctx = this.ctx, s = this.s;
    let x = f.X[k], y = f.Y[k];
    if (this.opts.on === 'deformed' && f.ok[k]) { const [u, v] = f.displacementPx(k); x += u; y += v; }
    for (const [col, w] of [['#fff', 4], ['#111417', 1.5]]) {
      ctx.strokeStyle = col; ctx.lineWidth = w / s;
      ctx.strokeRect(x - f.dx / 2, y - f.dy / 2, f.dx, f.dy);
    }
  }

  drawColorbar() {
    const cb = this.el.colorbar, ctx = cb.getContext('2d');
    const W = cb.width, H = cb.height, o = this.opts;
    ctx.setTransform(1, 0, 0, 1, 0, 0);
    ctx.fillStyle = '#fff'; ctx.fillRect(0, 0, W, H);
    if (!this.field) return;
    const top = 34, bot = H - 14, x = 8, w = 18;
    const lut = this.table();
    for (let y = top; y < bot; y++) {
      const c = cmap.index(o.hi - (y - top + 0.5) / (bot - top) * (o.hi - o.lo), o.lo, o.hi, this.div());
      ctx.fillStyle = `rgb(${lut[3 * c]},${lut[3 * c + 1]},${lut[3 * c + 2]})`;
      ctx.fillRect(x, y, w, 1);
    }
    ctx.strokeStyle = '#1b2229'; ctx.strokeRect(x + 0.5, top + 0.5, w, bot - top - 1);
    ctx.fillStyle = '#1b2229'; ctx.font = '11px system-ui, sans-serif';
    ctx.textBaseline = 'middle'; ctx.textAlign = 'left';
    const py = v => bot - 1 - (v - o.lo) / (o.hi - o.lo) * (bot - 1 - top);
    for (const t of niceTicks(o.lo, o.hi, 6)) {
      if (t < o.lo || t > o.hi) continue;
      ctx.beginPath(); ctx.moveTo(x + w, py(t)); ctx.lineTo(x + w + 4, py(t)); ctx.stroke();
      ctx.fillText(fmt(t), x + w + 6, py(t));
    }
    ctx.textBaseline = 'top'; ctx.font = '600 12px system-ui, sans-serif';
    ctx.fillText(o.quantity, 4, 2);
    ctx.font = '11px system-ui, sans-serif';
    const unit = this.field.unit(o.quantity);
    ctx.fillText(unit && unit !== '–' ? `unit: ${unit}` : 'dimensionless', 4, 17);
  }

  setHover(k) {
    this.hover = k;
    const f = this.field, tb = this.el.readout.tBodies[0];
    tb.textContent = '';
    if (!f || k < 0) {
      this.el.where.textContent = f ? 'No grid point under the pointer.' : 'Point at the map.';
      this.render();
      return;
    }
    const lu = 'px';
    const [i, j] = f.cell(k);
    this.el.where.textContent = `Grid point ${i}, ${j} at X = ${fmt(f.X[k])}, Y = ${fmt(f.Y[k])} ${lu}${f.ok[k] ? '' : ' — not measured'}${f.status && f.status[k] && f.status[k] !== 'ok' ? ` (status: ${f.status[k].replace(/_/g, ' ')})` : ''}`;
    this.el.where.dataset.k = String(k);
    for (const name of f.names()) {
      const tr = tb.insertRow();
      tr.dataset.q = name;
      if (name === this.opts.quantity) tr.className = 'current';
      const th = document.createElement('th'); th.scope = 'row'; th.textContent = name; tr.appendChild(th);
      if (f.descriptions && f.descriptions[name]) th.title = f.descriptions[name];
      const v = f.value(name, k);
      const td = tr.insertCell(); td.textContent = fmt(v); td.dataset.value = Number.isFinite(v) ? String(v) : '';
      tr.insertCell().textContent = f.unit(name);
    }
    this.render();
  }

  pointerMove(e) {
    if (!this.field) return;
    const [x, y] = this.toImage(e);
    if (this.drag) { this.drag.x1 = x; this.drag.y1 = y; this.render(); return; }
    if (this.opts.tool === 'read' || !this.drag) this.setHover(this.field.nearest(x, y, this.opts.on === 'deformed'));
  }

  pointerDown(e) {
    if (!this.field || e.button !== 0) return;
    this.canvas.focus();
    if (this.opts.tool !== 'line') return;
    const [x, y] = this.toImage(e);
    this.drag = { x0: x, y0: y, x1: x, y1: y };
    this.canvas.setPointerCapture(e.pointerId);
  }

  pointerUp() {
    if (!this.drag) return;
    const d = this.drag; this.drag = null;
    if (Math.hypot(d.x1 - d.x0, d.y1 - d.y0) * this.s < 4) { this.render(); return; }
    this.setLine(d);
  }

  key(e) {
    const f = this.field;
    if (!f) return;
    const moves = { ArrowLeft: [-1, 0], ArrowRight: [1, 0], ArrowUp: [0, -1], ArrowDown: [0, 1] };
    const m = moves[e.key];
    if (!m) return;
    e.preventDefault();
    let [i, j] = this.hover >= 0 ? f.cell(this.hover) : [f.nx >> 1, f.ny >> 1];
    const step = e.shiftKey ? 5 : 1;
    if (this.hover >= 0) { i += m[0] * step; j += m[1] * step; }
    i = Math.max(0, Math.min(f.nx - 1, i)); j = Math.max(0, Math.min(f.ny - 1, j));
    const k = f.at(i, j);
    if (k < 0) return;
    this.setHover(k);
    // Tell screen-reader users where they are and what the map shows there.
    if (this.el.announce) {
      const q = this.opts.quantity, u = f.unit(q);
      this.el.announce.textContent = `${this.el.where.textContent}. ${q} = ${fmt(f.value(q, k))}${u && u !== '–' ? ' ' + u : ''}`;
    }
  }

  /** setLine sets the profile line in image coordinates of the current view and plots it. */
  setLine(ln) {
    this.line = { ...ln };
    // Profiles are taken in reference coordinates.
    const toRef = (x, y) => {
      if (this.opts.on !== 'deformed') return [x, y];
      const k = this.field.nearest(x, y, true);
      if (k < 0) return [x, y];
      const [u, v] = this.field.displacementPx(k);
      return [x - u, y - v];
    };
    const [a, b] = toRef(ln.x0, ln.y0), [c, d] = toRef(ln.x1, ln.y1);
    this.lineRef = { x0: a, y0: b, x1: c, y1: d };
    if (this.el.onLine) this.el.onLine(this.lineRef);
    this.profile();
  }

  /** profile samples the current quantity along the line and plots it; it returns the samples. */
  profile() {
    const f = this.field, L = this.lineRef;
    if (!f || !L) return null;
    if (this.opts.on === 'deformed') {
      // Show the line where the reference line went.
      const mv = (x, y) => { const k = f.nearest(x, y, false); if (k < 0 || !f.ok[k]) return [x, y]; const [u, v] = f.displacementPx(k); return [x + u, y + v]; };
      const [a, b] = mv(L.x0, L.y0), [c, d] = mv(L.x1, L.y1);
      this.line = { x0: a, y0: b, x1: c, y1: d };
    } else this.line = { ...L };
    const len = Math.hypot(L.x1 - L.x0, L.y1 - L.y0);
    const n = Math.max(2, Math.min(400, Math.ceil(len * 2) + 1));
    const xs = [], ys = [];
    const sc = f.mmPerPx > 0 ? f.mmPerPx : 1;
    for (let i = 0; i < n; i++) {
      const t = i / (n - 1);
      xs.push(t * len * sc);
      ys.push(f.sample(this.opts.quantity, L.x0 + t * (L.x1 - L.x0), L.y0 + t * (L.y1 - L.y0)));
    }
    const q = this.opts.quantity, unit = f.unit(q);
    const count = linePlot(this.el.profile, xs, ys, { xlabel: `distance along the line (${f.mmPerPx > 0 ? 'mm' : 'px'})`, ylabel: unit ? `${q} (${unit})` : q });
    const fin = ys.filter(Number.isFinite);
    const mean = fin.reduce((p, v) => p + v, 0) / (fin.length || 1);
    this.el.profileText.textContent = count
      ? `${q} from (${fmt(L.x0)}, ${fmt(L.y0)}) to (${fmt(L.x1)}, ${fmt(L.y1)}) px: ${count} of ${n} samples valid, mean ${fmt(mean)}${unit && unit !== '–' ? ' ' + unit : ''}, min ${fmt(Math.min(...fin))}, max ${fmt(Math.max(...fin))}.`
      : `No valid ${q} values along the line from (${fmt(L.x0)}, ${fmt(L.y0)}) to (${fmt(L.x1)}, ${fmt(L.y1)}).`;
    this.el.profileText.dataset.count = String(count);
    this.render();
    return { xs, ys, count };
  }

  /** nonBlank reports how many distinct colours the map canvas holds. */
  distinctColours() {
    const d = this.ctx.getImageData(0, 0, this.canvas.width, this.canvas.height).data;
    const seen = new Set();
    for (let p = 0; p < d.length; p += 4 * 7) seen.add((d[p] << 16) | (d[p + 1] << 8) | d[p + 2]);
    return seen.size;
  }
}

export { isStrain };
