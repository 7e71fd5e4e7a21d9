// Region-of-interest editor on the reference image: a rectangle, a polygon
// and holes (all in reference-image pixels), plus seed points. The region
// is the rectangle intersected with the polygon, minus the holes, as in
// the analysis parameters (roi.Spec).
//
// Pointer: drag for a rectangle; click corners of a polygon or hole and
// close it with Enter or a double-click. Keyboard: arrow keys move a
// cursor (Shift for 10 px), Space sets a corner or a seed, Enter closes a
// polygon, Backspace drops the last corner, Escape drops the shape.

export class RoiEditor {
  constructor(canvas, onChange) {
    this.canvas = canvas;
    this.ctx = canvas.getContext('2d');
    this.onChange = onChange;
    this.img = null; this.w = 0; this.h = 0; this.s = 1;
    this.spec = {}; this.seeds = [];
    this.open = null;        // polygon being drawn: {kind, pts}
    this.drag = null;        // rectangle being dragged: {x0, y0, x1, y1}
    this.cursor = null;      // keyboard cursor [x, y]
    this.mode = 'rect';
    canvas.addEventListener('pointerdown', e => this.down(e));
    canvas.addEventListener('pointermove', e => this.move(e));
    canvas.addEventListener('pointerup', e => this.up(e));
    canvas.addEventListener('dblclick', e => { e.preventDefault(); this.close(); });
    canvas.addEventListener('keydown', e => this.key(e));
  }

  /** setImage shows source (an image or canvas) of size w×h, scaled to fit maxWidth. */
  setImage(source, w, h, maxWidth) {
    this.img = source; this.w = w; this.h = h;
    this.s = Math.min(4, maxWidth / w, 560 / h);
    this.canvas.width = Math.round(w * this.s);
    this.canvas.height = Math.round(h * this.s);
    this.cursor = [w >> 1, h >> 1];
    this.draw();
  }

  setMode(m) { this.mode = m; this.open = null; this.draw(); }

  clear() { this.spec = {}; this.seeds = []; this.open = null; this.changed(); }

  /** value returns {roi, seeds}: the roi.Spec (or null for the whole image) and the seed list. */
  value() {
    const roi = {};
    if (this.spec.rect) roi.rect = this.spec.rect.slice();
    if (this.spec.polygon) roi.polygon = this.spec.polygon.map(p => p.slice());
    if (this.spec.holes && this.spec.holes.length) roi.holes = this.spec.holes.map(h => h.map(p => p.slice()));
    return { roi: Object.keys(roi).length ? roi : null, seeds: this.seeds.map(p => p.slice()) };
  }

  /** setValue replaces the region and seeds from a {roi, seeds} value, throwing on a malformed one. */
  setValue(v) {
    const roi = v.roi || {};
    const num = x => typeof x === 'number' && Number.isFinite(x);
    const pt = p => Array.isArray(p) && p.length === 2 && num(p[0]) && num(p[1]);
    if (roi.rect !== undefined && !(Array.isArray(roi.rect) && roi.rect.length === 4 && roi.rect.every(Number.isInteger))) throw new Error('rect must be four whole numbers [x0, y0, x1, y1]');
    if (roi.polygon !== undefined && !(Array.isArray(roi.polygon) && roi.polygon.length >= 3 && roi.polygon.every(pt))) throw new Error('polygon must be a list of at least three [x, y] points');
    if (roi.holes !== undefined && !(Array.isArray(roi.holes) && roi.holes.every(h => Array.isArray(h) && h.length >= 3 && h.every(pt)))) throw new Error('holes must be a list of polygons, each at least three [x, y] points');
    const seeds = v.seeds || [];
    if (!(Array.isArray(seeds) && seeds.every(p => pt(p) && p.every(Number.isInteger)))) throw new Error('seeds must be a list of whole-number [x, y] points');
    this.spec = {};
    if (roi.rect) this.spec.rect = roi.rect.slice();
    if (roi.polygon) this.spec.polygon = roi.polygon.map(p => p.slice());
    if (roi.holes) this.spec.holes = roi.holes.map(h => h.map(p => p.slice()));
    this.seeds = seeds.map(p => p.slice());
    this.draw();
  }

  changed() { this.draw(); if (this.onChange) this.onChange(this.value()); }

  pos(e) {
    const r = this.canvas.getBoundingClientRect();
    const x = (e.clientX - r.left) * (this.canvas.width / r.width) / this.s;
    const y = (e.clientY - r.top) * (this.canvas.height / r.height) / this.s;
    return [Math.max(0, Math.min(this.w, x)), Math.max(0, Math.min(this.h, y))];
  }

  down(e) {
    if (!this.img || e.button !== 0) return;
    this.canvas.focus();
    const [x, y] = this.pos(e);
    this.cursor = [x, y];
    if (this.mode === 'rect') {
      this.drag = { x0: x, y0: y, x1: x, y1: y };
      this.canvas.setPointerCapture(e.pointerId);
    } else if (this.mode === 'seed') {
      this.addSeed(x, y);
    } else {
      this.addCorner(x, y);
    }
  }

  move(e) {
    if (!this.drag) return;
    [this.drag.x1, this.drag.y1] = this.pos(e);
    this.draw();
  }

  up() {
    if (!this.drag) return;
    const d = this.drag; this.drag = null;
    this.setRect(d.x0, d.y0, d.x1, d.y1);
  }

  setRect(ax, ay, bx, by) {
    const x0 = Math.round(Math.min(ax, bx)), x1 = Math.round(Math.max(ax, bx));
    const y0 = Math.round(Math.min(ay, by)), y1 = Math.round(Math.max(ay, by));
    if (x1 - x0 >= 2 && y1 - y0 >= 2) this.spec.rect = [x0, y0, x1, y1];
    this.changed();
  }

  addSeed(x, y) {
    this.seeds.push([Math.round(x), Math.round(y)]);
    this.changed();
  }

  addCorner(x, y) {
    const kind = this.mode === 'hole' ? 'hole' : 'polygon';
    if (!this.open || this.open.kind !== kind) this.open = { kind, pts: [] };
    const pts = this.open.pts;
    // Clicking near the first corner closes the shape.
    if (pts.length >= 3 && Math.hypot(pts[0][0] - x, pts[0][1] - y) * this.s < 8) { this.close(); return; }
    const last = pts[pts.length - 1];
    if (!last || Math.hypot(last[0] - x, last[1] - y) > 0.5) pts.push([round1(x), round1(y)]);
    this.draw();
  }

  close() {
    const o = this.open;
    if (!o) return;
    this.open = null;
    // A double-click adds the same corner twice; drop duplicates.
    const pts = o.pts.filter((p, i, a) => i === 0 || Math.hypot(p[0] - a[i - 1][0], p[1] - a[i - 1][1]) > 0.5);
    if (pts.length < 3) { this.draw(); return; }
    if (o.kind === 'hole') (this.spec.holes = this.spec.holes || []).push(pts);
    else this.spec.polygon = pts;
    this.changed();
  }

  key(e) {
    if (!this.img) return;
    const d = e.shiftKey ? 10 : 1;
    const c = this.cursor;
    const moves = { ArrowLeft: [-d, 0], ArrowRight: [d, 0], ArrowUp: [0, -d], ArrowDown: [0, d] };
    if (moves[e.key]) {
      c[0] = Math.max(0, Math.min(this.w, c[0] + moves[e.key][0]));
      c[1] = Math.max(0, Math.min(this.h, c[1] + moves[e.key][1]));
      if (this.kbRect) { this.drag = { x0: this.kbRect[0], y0: this.kbRect[1], x1: c[0], y1: c[1] }; }
      this.draw();
    } else if (e.key === ' ') {
      if (this.mode === 'seed') this.addSeed(c[0], c[1]);
      else if (this.mode === 'rect') {
        if (!this.kbRect) { this.kbRect = c.slice(); this.drag = { x0: c[0], y0: c[1], x1: c[0], y1: c[1] }; this.draw(); }
        else { const a = this.kbRect; this.kbRect = null; this.drag = null; this.setRect(a[0], a[1], c[0], c[1]); }
      } else this.addCorner(c[0], c[1]);
    } else if (e.key === 'Enter') {
      this.close();
    } else if (e.key === 'Backspace') {
      if (this.open && this.open.pts.length) this.open.pts.pop(); else return;
      this.draw();
    } else if (e.key === 'Escape') {
      this.open = null; this.drag = null; this.kbRect = null; this.draw();
    } else return;
    e.preventDefault();
  }

  draw() {
    const ctx = this.ctx, s = this.s;
    ctx.setTransform(1, 0, 0, 1, 0, 0);
    ctx.clearRect(0, 0, this.canvas.width, this.canvas.height);
    if (!this.img) return;
    ctx.imageSmoothingEnabled = s < 1;
    ctx.drawImage(this.img, 0, 0, this.canvas.width, this.canvas.height);
    ctx.setTransform(s, 0, 0, s, 0, 0);
    const sp = this.spec;
    const hasRegion = sp.rect || sp.polygon || (sp.holes && sp.holes.length);
    if (hasRegion) {
      // Shade everything outside the region.
      ctx.save();
      ctx.beginPath();
      ctx.rect(0, 0, this.w, this.h);
      if (sp.rect || sp.polygon) {
        if (sp.rect) { const [x0, y0, x1, y1] = sp.rect; ctx.rect(x0 - 0.5, y0 - 0.5, x1 - x0, y1 - y0); }
        else path(ctx, sp.polygon);
      }
      ctx.fillStyle = 'rgba(20, 24, 30, 0.55)';
      ctx.fill('evenodd');
      if (sp.rect && sp.polygon) { // parts of the polygon outside the rectangle
        ctx.beginPath(); ctx.rect(0, 0, this.w, this.h); path(ctx, sp.polygon); ctx.fill('evenodd');
      }
      for (const h of sp.holes || []) { ctx.beginPath(); path(ctx, h); ctx.fill(); }
      ctx.restore();
    }
    ctx.lineWidth = 2 / s;
    const outline = (draw, colour, dash) => {
      ctx.setLineDash(dash ? [6 / s, 4 / s] : []);
      ctx.strokeStyle = '#ffffff'; ctx.lineWidth = 4 / s; ctx.beginPath(); draw(); ctx.stroke();
      ctx.strokeStyle = colour; ctx.lineWidth = 2 / s; ctx.beginPath(); draw(); ctx.stroke();
    };
    if (sp.rect) { const [x0, y0, x1, y1] = sp.rect; outline(() => ctx.rect(x0 - 0.5, y0 - 0.5, x1 - x0, y1 - y0), '#0b5d66'); }
    if (sp.polygon) outline(() => path(ctx, sp.polygon), '#0b5d66');
    for (const h of sp.holes || []) outline(() => path(ctx, h), '#8f2d12');
    if (this.drag) { const d = this.drag; outline(() => ctx.rect(Math.min(d.x0, d.x1), Math.min(d.y0, d.y1), Math.abs(d.x1 - d.x0), Math.abs(d.y1 - d.y0)), '#c26a00', true); }
    if (this.open && this.open.pts.length) {
      outline(() => { ctx.moveTo(...this.open.pts[0]); for (const p of this.open.pts) ctx.lineTo(...p); }, this.open.kind === 'hole' ? '#8f2d12' : '#c26a00', true);
      for (const p of this.open.pts) { ctx.fillStyle = '#c26a00'; ctx.fillRect(p[0] - 3 / s, p[1] - 3 / s, 6 / s, 6 / s); }
    }
    for (const [x, y] of this.seeds) {
      ctx.setLineDash([]);
      for (const [col, wid] of [['#fff', 5], ['#c26a00', 2.5]]) {
        ctx.strokeStyle = col; ctx.lineWidth = wid / s;
        ctx.beginPath(); ctx.arc(x, y, 7 / s, 0, 2 * Math.PI);
        ctx.moveTo(x - 11 / s, y); ctx.lineTo(x + 11 / s, y); ctx.moveTo(x, y - 11 / s); ctx.lineTo(x, y + 11 / s);
        ctx.stroke();
      }
    }
    if (this.cursor && document.activeElement === this.canvas) {
      const [x, y] = this.cursor;
      ctx.setLineDash([]); ctx.strokeStyle = '#c26a00'; ctx.lineWidth = 1.5 / s;
      ctx.strokeRect(x - 4 / s, y - 4 / s, 8 / s, 8 / s);
    }
  }
}

function path(ctx, pts) {
  ctx.moveTo(pts[0][0], pts[0][1]);
  for (let i = 1; i < pts.length; i++) ctx.lineTo(pts[i][0], pts[i][1]);
  ctx.closePath();
}

function round1(v) { return Math.round(v * 10) / 10; }
