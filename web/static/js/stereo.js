// Stereo measurement in the preview: send a rig file and a left and right
// reference (and deformed) image to POST /v1/stereo, or the reference pair
// and later pairs to POST /v1/stereo/series, then draw the shape
// (z) and the out-of-plane displacement (w) as maps over the left
// reference grid, and the measured surface in 3D on a canvas that turns
// with the sliders or by dragging.

import { describe, getJSON, request } from './api.js';
import { fmt, linePlot } from './plot.js';
import { rgb } from './colormap.js';

const $ = id => document.getElementById(id);

/** grid turns a field.json document into arrays over its grid. */
export function grid(doc) {
  const g = doc.grid, q = doc.quantities;
  const xs = [...new Set(g.x)].sort((a, b) => a - b), ys = [...new Set(g.y)].sort((a, b) => a - b);
  const nx = xs.length, ny = ys.length;
  const at = new Int32Array(nx * ny).fill(-1);
  const ix = new Map(xs.map((v, i) => [v, i])), iy = new Map(ys.map((v, i) => [v, i]));
  for (let k = 0; k < g.x.length; k++) at[iy.get(g.y[k]) * nx + ix.get(g.x[k])] = k;
  const get = name => (q[name] || []).map(v => (v === null ? NaN : v));
  return { nx, ny, xs, ys, at, get, n: g.x.length };
}

/** range returns the smallest and largest finite value of a. */
export function range(a) {
  let lo = Infinity, hi = -Infinity;
  for (const v of a) if (Number.isFinite(v)) { lo = Math.min(lo, v); hi = Math.max(hi, v); }
  return lo <= hi ? [lo, hi] : [0, 0];
}

/** mean returns the mean of the finite values of a. */
export function mean(a) {
  let s = 0, n = 0;
  for (const v of a) if (Number.isFinite(v)) { s += v; n++; }
  return n ? s / n : NaN;
}

/** drawMap draws quantity values over the grid cells on canvas, with
 * colour map cmap over [lo, hi]; it returns the number of cells drawn. */
export function drawMap(canvas, gr, values, cmap, title, unit) {
  const ctx = canvas.getContext('2d');
  const W = canvas.width, H = canvas.height, m = 10, bar = 34;
  ctx.fillStyle = '#fff'; ctx.fillRect(0, 0, W, H);
  const [lo, hi] = range(values);
  const s = Math.min((W - 2 * m) / gr.nx, (H - 2 * m - bar) / gr.ny);
  let n = 0;
  for (let j = 0; j < gr.ny; j++) {
    for (let i = 0; i < gr.nx; i++) {
      const k = gr.at[j * gr.nx + i];
      const v = k >= 0 ? values[k] : NaN;
      if (!Number.isFinite(v)) continue;
      const c = rgb(cmap, hi > lo ? (v - lo) / (hi - lo) : 0.5);
      ctx.fillStyle = `rgb(${c[0]},${c[1]},${c[2]})`;
      ctx.fillRect(m + i * s, m + j * s, Math.ceil(s), Math.ceil(s));
      n++;
    }
  }
  const y0 = H - bar + 4, bw = Math.min(240, W - 2 * m);
  for (let x = 0; x < bw; x++) {
    const c = rgb(cmap, x / (bw - 1));
    ctx.fillStyle = `rgb(${c[0]},${c[1]},${c[2]})`;
    ctx.fillRect(m + x, y0, 1, 10);
  }
  ctx.fillStyle = '#1b2229'; ctx.font = '12px system-ui, sans-serif';
  ctx.fillText(`${title}: ${fmt(lo)} … ${fmt(hi)} ${unit}`, m, H - 6);
  return n;
}

/**
 * View3D draws the measured surface: the quads between neighbouring grid
 * points with a position, turned by yaw (about the specimen's y axis) and
 * pitch (about the screen's x axis), projected orthographically, far
 * quads first (painter's algorithm), coloured by a quantity.
 */
export class View3D {
  constructor(canvas) { this.canvas = canvas; this.yaw = -30; this.pitch = 25; this.exaggerate = 1; }

  /** set gives the surface: positions x, y, z (mm) and colour values c. */
  set(gr, x, y, z, c, cmap) {
    Object.assign(this, { gr, x, y, z, c, cmap });
    const [x0, x1] = range(x), [y0, y1] = range(y), [z0, z1] = range(z);
    this.centre = [(x0 + x1) / 2, (y0 + y1) / 2, (z0 + z1) / 2];
    this.size = Math.max(x1 - x0, y1 - y0, 1e-9);
  }

  /** rotate returns the point (x, y, z) of the specimen frame in view
   * coordinates: screen right, screen up and toward the viewer, mm. */
  rotate(x, y, z) {
    const a = this.yaw * Math.PI / 180, b = this.pitch * Math.PI / 180;
    const [cx, cy, cz] = this.centre;
    const px = x - cx, py = y - cy, pz = (z - cz) * this.exaggerate;
    const x1 = Math.cos(a) * px + Math.sin(a) * pz, z1 = -Math.sin(a) * px + Math.cos(a) * pz;
    const y2 = Math.cos(b) * py - Math.sin(b) * z1, z2 = Math.sin(b) * py + Math.cos(b) * z1;
    return [x1, y2, z2];
  }

  /** project returns the canvas pixel of the point (x, y, z), mm. */
  project(x, y, z) {
    const [u, v] = this.rotate(x, y, z);
    const W = this.canvas.width, H = this.canvas.height, s = 0.8 * Math.min(W, H - 30) / this.size;
    return [W / 2 + s * u, (H - 30) / 2 - s * v];
  }

  /** draw draws the surface; it returns the number of quads drawn. */
  draw() {
    const ctx = this.canvas.getContext('2d'), W = this.canvas.width, H = this.canvas.height;
    ctx.fillStyle = '#fff'; ctx.fillRect(0, 0, W, H);
    if (!this.gr) return 0;
    const { gr, x, y, z, c } = this;
    const [lo, hi] = range(c);
    const quads = [];
    for (let j = 0; j + 1 < gr.ny; j++) {
      for (let i = 0; i + 1 < gr.nx; i++) {
        const ks = [gr.at[j * gr.nx + i], gr.at[j * gr.nx + i + 1], gr.at[(j + 1) * gr.nx + i + 1], gr.at[(j + 1) * gr.nx + i]];
        if (ks.some(k => k < 0 || !Number.isFinite(z[k]) || !Number.isFinite(x[k]) || !Number.isFinite(y[k]))) continue;
        let depth = 0, val = 0, nv = 0;
        for (const k of ks) {
          depth += this.rotate(x[k], y[k], z[k])[2];
          if (Number.isFinite(c[k])) { val += c[k]; nv++; }
        }
        quads.push({ ks, depth, val: nv ? val / nv : NaN });
      }
    }
    quads.sort((a, b) => a.depth - b.depth);
    for (const q of quads) {
      const col = Number.isFinite(q.val) ? rgb(this.cmap, hi > lo ? (q.val - lo) / (hi - lo) : 0.5) : [200, 200, 200];
      ctx.fillStyle = `rgb(${col[0]},${col[1]},${col[2]})`;
      ctx.strokeStyle = 'rgba(27,34,41,0.25)';
      ctx.beginPath();
      q.ks.forEach((k, n) => {
        const [sx, sy] = this.project(x[k], y[k], z[k]);
        if (n === 0) ctx.moveTo(sx, sy); else ctx.lineTo(sx, sy);
      });
      ctx.closePath(); ctx.fill(); ctx.stroke();
    }
    ctx.fillStyle = '#1b2229'; ctx.font = '12px system-ui, sans-serif';
    ctx.fillText(`turned ${fmt(this.yaw)}° and tilted ${fmt(this.pitch)}°; depth drawn ${this.exaggerate}×; colour ${this.label}: ${fmt(lo)} … ${fmt(hi)}`, 10, H - 8);
    return quads.length;
  }
}

function show(doc) {
  const gr = grid(doc);
  const st = window.mottleStereo;
  st.doc = doc; st.grid = gr;
  $('st-body').hidden = false;
  const z = gr.get('z_mm'), w = gr.get('w');
  const hasW = (doc.quantities.w || []).length > 0;
  // Points with a position (and, in a deformed state, a displacement);
  // those at the edge of the grid have no surface strain (too few
  // neighbours in the strain window) but are measured in 3D all the same.
  st.measured = (hasW ? w : z).filter(Number.isFinite).length;
  st.ok = (doc.status || []).filter(s => s === 'ok').length;
  const edge = (doc.status || []).filter(s => s === 'too_few_neighbours').length;
  st.meanW = hasW ? mean(w) : NaN;
  $('st-summary').textContent = `${st.measured} of ${gr.n} points measured in 3D` +
    (edge ? ` (${edge} at the edge of the grid without a surface strain: too few neighbours in the strain window)` : '') +
    `; shape z ${fmt(range(z)[0])} … ${fmt(range(z)[1])} mm` +
    (hasW ? `; mean out-of-plane displacement w ${fmt(st.meanW)} mm` : '; give a deformed pair for the displacement and the surface strain');
  st.cells = drawMap($('st-shape'), gr, z, 'viridis', 'shape z', 'mm');
  const wc = $('st-w');
  wc.hidden = !hasW;
  if (hasW) drawMap(wc, gr, w, 'coolwarm', 'out-of-plane displacement w', 'mm');
  st.view.set(gr, gr.get('x_mm'), gr.get('y_mm'), z, hasW ? w : z, hasW ? 'coolwarm' : 'viridis');
  st.view.label = hasW ? 'w, mm' : 'z, mm';
  st.quads = st.view.draw();
}

function fail(err) {
  const d = describe(err);
  const box = $('st-error');
  box.hidden = false;
  box.textContent = [d.title, d.detail, ...d.items.map(i => (i.field ? i.field + ': ' : '') + i.message)].filter(Boolean).join('\n');
}

async function measure() {
  $('st-error').hidden = true;
  const fd = new FormData();
  const parts = [['rig', 'st-rig'], ['left_reference', 'st-lref'], ['right_reference', 'st-rref'], ['left_deformed', 'st-ldef'], ['right_deformed', 'st-rdef']];
  for (const [name, id] of parts) {
    const f = $(id).files[0];
    if (f) fd.append(name, f, f.name);
  }
  const step = +$('st-step').value;
  if (step > 0) fd.append('params', new Blob([JSON.stringify({ step })], { type: 'application/json' }));
  $('st-status').textContent = 'measuring…';
  try {
    // A stereo measurement is a stored job; wait for it and draw its field.
    const resp = await request('/v1/stereo?wait=true', { method: 'POST', body: fd });
    const job = await resp.json();
    if (!job.field) throw new Error(`the stereo job ${job.id} is ${job.state}; its results will be at /v1/analyses/${job.id}`);
    show(job.field);
    $('st-status').textContent = 'done';
  } catch (err) {
    $('st-status').textContent = 'failed';
    fail(err);
  }
}

// A stereo series in the page: the reference pair above and later pairs
// (the k-th left image with the k-th right, in file-name order) go to
// POST /v1/stereo/series?wait=true, which stores the series and measures
// every pair; the page plots the mean out-of-plane displacement w of each
// state and shows the state chosen in the list with the maps and the 3D
// view of a single state, from the frame's stored field.json.
function byName(files) { return [...files].sort((a, b) => a.name.localeCompare(b.name)); }

async function measureSeries() {
  $('st-error').hidden = true;
  const rig = $('st-rig').files[0], l0 = $('st-lref').files[0], r0 = $('st-rref').files[0];
  const ls = byName($('st-sleft').files), rs = byName($('st-sright').files);
  const st = window.mottleStereo;
  if (!rig || !l0 || !r0 || !ls.length || ls.length !== rs.length) {
    $('st-sstatus').textContent = 'failed';
    fail(new Error(`give the rig, the reference pair and as many later left images as later right images (${ls.length} left, ${rs.length} right)`));
    return;
  }
  const fd = new FormData();
  fd.append('rig', rig, rig.name);
  for (const [l, r] of [[l0, r0], ...ls.map((l, k) => [l, rs[k]])]) {
    fd.append('left', l, l.name);
    fd.append('right', r, r.name);
  }
  const step = +$('st-step').value;
  if (step > 0) fd.append('params', new Blob([JSON.stringify({ step })], { type: 'application/json' }));
  $('st-sstatus').textContent = 'measuring…';
  try {
    const resp = await request('/v1/stereo/series?wait=true', { method: 'POST', body: fd });
    const res = await resp.json();
    if (!res.curve) throw new Error(`the series ${res.id} is still being measured; its results will be at /v1/series/${res.id}`);
    const rows = res.curve.rows;
    st.series = { id: res.series, meanW: rows.map(r => (r.mean && Number.isFinite(r.mean.w) ? r.mean.w : NaN)) };
    $('st-sbody').hidden = false;
    $('st-ssummary').textContent = `series ${res.series}: ${res.matched} of ${res.points} points matched in the reference pair; ${rows.length - 1} later states. ${res.cautions.join('; ')}.`;
    st.curvePoints = linePlot($('st-curve'), rows.map((r, k) => k), st.series.meanW, { xlabel: 'state (0 = reference)', ylabel: 'mean w, mm', points: true });
    const sel = $('st-state');
    sel.replaceChildren(...rows.slice(1).map((r, k) => new Option(`${k + 1}: ${r.name}`, String(k))));
    await showState(0);
    $('st-sstatus').textContent = 'done';
  } catch (err) {
    $('st-sstatus').textContent = 'failed';
    fail(err);
  }
}

/** showState shows frame n of the series (state n + 1) from its field.json. */
async function showState(n) {
  const st = window.mottleStereo;
  const doc = await getJSON(`/v1/series/${st.series.id}/frames/${n}/field.json`);
  show(doc);
  st.series.shown = n;
}

function turn() {
  const v = window.mottleStereo.view;
  v.yaw = +$('st-yaw').value; v.pitch = +$('st-pitch').value; v.exaggerate = +$('st-exag').value;
  window.mottleStereo.quads = v.draw();
}

function init() {
  const canvas = $('st-3d');
  // For tests and the console: the view and the last answer.
  window.mottleStereo = { view: canvas ? new View3D(canvas) : null, doc: null, grid, mean, range };
  if (!$('st-run')) return;
  $('st-run').addEventListener('click', measure);
  $('st-srun').addEventListener('click', measureSeries);
  $('st-state').addEventListener('change', () => {
    showState(+$('st-state').value).catch(fail);
  });
  for (const id of ['st-yaw', 'st-pitch', 'st-exag']) $(id).addEventListener('input', turn);
  let drag = null;
  canvas.addEventListener('pointerdown', e => { drag = [e.clientX, e.clientY, +$('st-yaw').value, +$('st-pitch').value]; canvas.setPointerCapture(e.pointerId); });
  canvas.addEventListener('pointerup', () => { drag = null; });
  canvas.addEventListener('pointermove', e => {
    if (!drag) return;
    const clamp = (v, lo, hi) => Math.min(hi, Math.max(lo, v));
    $('st-yaw').value = clamp(drag[2] + (e.clientX - drag[0]) / 2, -90, 90);
    $('st-pitch').value = clamp(drag[3] + (e.clientY - drag[1]) / 2, -90, 90);
    turn();
  });
}

init();
