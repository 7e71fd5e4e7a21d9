// Camera calibration in the preview: send target images to
// POST /v1/calibrations (or open a calibration file), then show the
// reprojection error of every view and the lens distortion as a vector
// plot over the image.

import { describe, request } from './api.js';
import { fmt } from './plot.js';

const $ = id => document.getElementById(id);

/**
 * distortion returns the displacement (dx, dy) in px from where a point is
 * seen by an ideal pinhole camera to where the calibrated lens shows it, at
 * the ideal pixel (x, y): the Brown–Conrady model of the calibration file
 * (Brown 1966; x_d = x(1 + k1 r² + k2 r⁴ + k3 r⁶) + 2 p1 x y + p2 (r² + 2x²), …).
 */
export function distortion(c, x, y) {
  const xn = (x - c.cx_px) / c.fx_px, yn = (y - c.cy_px) / c.fy_px;
  const r2 = xn * xn + yn * yn;
  const rad = 1 + r2 * (c.k1 + r2 * (c.k2 + r2 * c.k3));
  const xd = xn * rad + 2 * c.p1 * xn * yn + c.p2 * (r2 + 2 * xn * xn);
  const yd = yn * rad + c.p1 * (r2 + 2 * yn * yn) + 2 * c.p2 * xn * yn;
  return [c.fx_px * (xd - xn), c.fy_px * (yd - yn)];
}

function arrow(ctx, x0, y0, x1, y1) {
  const dx = x1 - x0, dy = y1 - y0, l = Math.hypot(dx, dy);
  ctx.beginPath(); ctx.moveTo(x0, y0); ctx.lineTo(x1, y1);
  if (l > 3) {
    const a = Math.atan2(dy, dx), h = Math.min(6, l / 3);
    ctx.lineTo(x1 - h * Math.cos(a - 0.45), y1 - h * Math.sin(a - 0.45));
    ctx.moveTo(x1, y1);
    ctx.lineTo(x1 - h * Math.cos(a + 0.45), y1 - h * Math.sin(a + 0.45));
  }
  ctx.stroke();
}

/** drawDistortion draws the distortion field of file f on canvas; it returns the largest displacement in px. */
export function drawDistortion(canvas, f) {
  const ctx = canvas.getContext('2d');
  const [w, h] = f.image_size_px;
  const W = canvas.width, H = canvas.height, m = 20;
  const s = Math.min((W - 2 * m) / w, (H - 2 * m - 20) / h);
  ctx.fillStyle = '#fff'; ctx.fillRect(0, 0, W, H);
  ctx.strokeStyle = '#8a96a3'; ctx.strokeRect(m, m, w * s, h * s);
  const nx = 16, ny = Math.max(2, Math.round(16 * h / w));
  let dmax = 0;
  const vs = [];
  for (let j = 0; j <= ny; j++) {
    for (let i = 0; i <= nx; i++) {
      const x = (i / nx) * (w - 1), y = (j / ny) * (h - 1);
      const [dx, dy] = distortion(f.camera, x, y);
      dmax = Math.max(dmax, Math.hypot(dx, dy));
      vs.push([x, y, dx, dy]);
    }
  }
  const spacing = Math.min(w / nx, h / ny) * s;
  const k = dmax > 0 ? 0.9 * spacing / (dmax * s) : 1; // longest arrow ≈ 0.9 grid spacing
  ctx.strokeStyle = '#2a4d8f'; ctx.lineWidth = 1.2;
  for (const [x, y, dx, dy] of vs) arrow(ctx, m + x * s, m + y * s, m + (x + k * dx) * s, m + (y + k * dy) * s);
  ctx.fillStyle = '#1b2229'; ctx.font = '12px system-ui, sans-serif';
  ctx.fillText(`image ${w}×${h} px; largest distortion ${fmt(dmax)} px; arrows drawn ${fmt(k)}× longer`, m, H - 8);
  return dmax;
}

/** drawResiduals draws a bar of the reprojection RMS of every view; outlier views in orange. */
export function drawResiduals(canvas, f) {
  const ctx = canvas.getContext('2d');
  const W = canvas.width, H = canvas.height;
  const mg = { l: 60, r: 10, t: 12, b: 70 };
  ctx.fillStyle = '#fff'; ctx.fillRect(0, 0, W, H);
  const views = f.views || [];
  const top = Math.max(1e-3, ...views.map(v => v.max_px || v.rms_px)) * 1.1;
  const bw = (W - mg.l - mg.r) / Math.max(1, views.length);
  const y = v => H - mg.b - (v / top) * (H - mg.t - mg.b);
  ctx.strokeStyle = '#8a96a3'; ctx.beginPath(); ctx.moveTo(mg.l, mg.t); ctx.lineTo(mg.l, H - mg.b); ctx.lineTo(W - mg.r, H - mg.b); ctx.stroke();
  ctx.font = '11px system-ui, sans-serif'; ctx.fillStyle = '#1b2229';
  for (const t of [0, top / 2, top]) { ctx.fillText(fmt(t), 22, y(t) + 4); }
  ctx.save(); ctx.translate(12, H / 2); ctx.rotate(-Math.PI / 2); ctx.fillText('reprojection error, px', -60, 0); ctx.restore();
  views.forEach((v, i) => {
    const x = mg.l + i * bw + bw * 0.15;
    ctx.fillStyle = v.outlier ? '#d9822b' : '#2a4d8f';
    ctx.fillRect(x, y(v.rms_px), bw * 0.7, H - mg.b - y(v.rms_px));
    ctx.fillStyle = '#1b2229';
    ctx.fillRect(x + bw * 0.35 - 1, y(v.max_px), 2, 2); // max as a tick
    ctx.save(); ctx.translate(x + bw * 0.35, H - mg.b + 8); ctx.rotate(Math.PI / 4);
    ctx.fillText(String(v.image).split('/').pop().slice(0, 18), 0, 0); ctx.restore();
  });
}

function show(f) {
  window.mottleCalibration.file = f;
  $('cal-body').hidden = false;
  const c = f.camera, s = f.std || {};
  const rows = [['fx', 'fx_px', 'px'], ['fy', 'fy_px', 'px'], ['cx', 'cx_px', 'px'], ['cy', 'cy_px', 'px'],
    ['k1', 'k1', ''], ['k2', 'k2', ''], ['k3', 'k3', ''], ['p1', 'p1', ''], ['p2', 'p2', '']];
  const tb = $('cal-params').querySelector('tbody');
  tb.textContent = '';
  for (const [label, key, unit] of rows) {
    const tr = document.createElement('tr');
    for (const t of [label, fmt(c[key]), s[key] ? `± ${fmt(s[key])}` : '—', unit]) {
      const td = document.createElement('td'); td.textContent = t; tr.appendChild(td);
    }
    tb.appendChild(tr);
  }
  const out = (f.views || []).filter(v => v.outlier).map(v => v.image);
  const rej = (f.rejected || []).map(r => `${r.image}: ${r.reason}`);
  $('cal-summary').textContent = `${(f.views || []).length} views, reprojection RMS ${fmt(f.rms_px)} px` +
    (out.length ? `; views that stand out: ${out.join(', ')}` : '') + (rej.length ? `; left out: ${rej.join('; ')}` : '') +
    (f.plane ? `; specimen plane from ${f.plane.image} (results in mm)` : '');
  drawResiduals($('cal-residuals'), f);
  drawDistortion($('cal-distortion'), f);
  const blob = new Blob([JSON.stringify(f, null, 2)], { type: 'application/json' });
  const a = $('cal-download');
  if (a.href) URL.revokeObjectURL(a.href);
  a.href = URL.createObjectURL(blob); a.hidden = false;
}

function fail(err) {
  const d = describe(err);
  const box = $('cal-error');
  box.hidden = false;
  box.textContent = [d.title, d.detail, ...d.items.map(i => (i.field ? i.field + ': ' : '') + i.message)].filter(Boolean).join('\n');
}

async function calibrate() {
  $('cal-error').hidden = true;
  const target = $('cal-target').files[0];
  const images = [...$('cal-images').files];
  const fd = new FormData();
  if (target) fd.append('target', target, target.name);
  for (const im of images) fd.append('image', im, im.name);
  const plane = $('cal-plane').value.trim();
  if (plane) fd.append('options', new Blob([JSON.stringify({ plane })], { type: 'application/json' }));
  $('cal-status').textContent = `calibrating from ${images.length} images…`;
  try {
    const resp = await request('/v1/calibrations', { method: 'POST', body: fd });
    show(await resp.json());
    $('cal-status').textContent = 'done';
  } catch (err) {
    $('cal-status').textContent = 'failed';
    fail(err);
  }
}

async function openFile() {
  $('cal-error').hidden = true;
  const file = $('cal-file').files[0];
  if (!file) return;
  try {
    const f = JSON.parse(await file.text());
    if (f.format !== 'mottle-camera/1') throw new Error(`${file.name} is not a calibration file (format "${f.format}", want "mottle-camera/1")`);
    show(f);
  } catch (err) { fail(err); }
}

function init() {
  // For tests and the console: the formula and the file shown.
  window.mottleCalibration = { distortion, file: null };
  if (!$('cal-run')) return;
  $('cal-run').addEventListener('click', calibrate);
  $('cal-file').addEventListener('change', openFile);
}

init();
