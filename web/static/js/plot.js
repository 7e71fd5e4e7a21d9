// Small canvas line plots: profiles and series curves.

/** niceTicks returns about n round tick values covering [lo, hi]. */
export function niceTicks(lo, hi, n = 5) {
  if (!(hi > lo)) { const d = Math.abs(lo) || 1; lo -= d * 0.5; hi += d * 0.5; }
  const raw = (hi - lo) / n;
  const mag = 10 ** Math.floor(Math.log10(raw));
  const step = [1, 2, 2.5, 5, 10].map(f => f * mag).find(s => s >= raw) || 10 * mag;
  const out = [];
  for (let t = Math.ceil(lo / step) * step; t <= hi + step * 1e-9; t += step) out.push(Math.abs(t) < step * 1e-9 ? 0 : t);
  return out;
}

/** fmt formats a number with about 4 significant digits. */
export function fmt(v) {
  if (!Number.isFinite(v)) return '—';
  if (v === 0) return '0';
  const a = Math.abs(v);
  if (a >= 1e5 || a < 1e-3) return v.toExponential(3);
  return Number(v.toPrecision(4)).toString();
}

/**
 * axes pads the value ranges [x0, x1] and [y0, y1], draws the grid, tick
 * labels, frame and axis labels (opts.xlabel, opts.ylabel) of a plot with
 * margins m on a W×H canvas, and returns the maps from values to pixels.
 */
function axes(ctx, W, H, m, x0, x1, y0, y1, opts) {
  if (y1 - y0 < 1e-12 * Math.max(1, Math.abs(y0))) { const d = Math.abs(y0) * 0.05 || 1e-6; y0 -= d; y1 += d; }
  const pad = (y1 - y0) * 0.06; y0 -= pad; y1 += pad;
  if (!(x1 > x0)) { x0 -= 0.5; x1 += 0.5; }
  const px = x => m.l + (x - x0) / (x1 - x0) * (W - m.l - m.r);
  const py = y => H - m.b - (y - y0) / (y1 - y0) * (H - m.t - m.b);
  ctx.strokeStyle = '#d9d4c9'; ctx.lineWidth = 1;
  ctx.textAlign = 'right'; ctx.textBaseline = 'middle';
  for (const t of niceTicks(y0, y1)) {
    if (t < y0 || t > y1) continue;
    ctx.beginPath(); ctx.moveTo(m.l, py(t)); ctx.lineTo(W - m.r, py(t)); ctx.stroke();
    ctx.fillText(fmt(t), m.l - 6, py(t));
  }
  ctx.textAlign = 'center'; ctx.textBaseline = 'top';
  for (const t of niceTicks(x0, x1, 6)) {
    if (t < x0 || t > x1) continue;
    ctx.beginPath(); ctx.moveTo(px(t), m.t); ctx.lineTo(px(t), H - m.b); ctx.stroke();
    ctx.fillText(fmt(t), px(t), H - m.b + 4);
  }
  ctx.strokeStyle = '#1b2229';
  ctx.strokeRect(m.l, m.t, W - m.l - m.r, H - m.t - m.b);
  if (opts.xlabel) ctx.fillText(opts.xlabel, (m.l + W - m.r) / 2, H - 18);
  if (opts.ylabel) {
    ctx.save(); ctx.translate(14, (m.t + H - m.b) / 2); ctx.rotate(-Math.PI / 2);
    ctx.textBaseline = 'middle'; ctx.fillText(opts.ylabel, 0, 0); ctx.restore();
  }
  return { px, py };
}

/**
 * linePlot draws ys against xs on canvas (NaN leaves a gap), with labelled
 * axes. opts: {xlabel, ylabel, marker: x value to mark, points: draw dots}.
 * It returns the number of finite points drawn.
 */
export function linePlot(canvas, xs, ys, opts = {}) {
  const ctx = canvas.getContext('2d');
  const W = canvas.width, H = canvas.height;
  const m = { l: 70, r: 14, t: 12, b: 42 };
  ctx.clearRect(0, 0, W, H);
  ctx.fillStyle = '#fff'; ctx.fillRect(0, 0, W, H);
  const fin = [];
  for (let i = 0; i < xs.length; i++) if (Number.isFinite(xs[i]) && Number.isFinite(ys[i])) fin.push(i);
  ctx.fillStyle = '#1b2229'; ctx.font = '12px system-ui, sans-serif';
  if (!fin.length) {
    ctx.fillText('no valid values along this path', m.l, H / 2);
    return 0;
  }
  let x0 = Infinity, x1 = -Infinity, y0 = Infinity, y1 = -Infinity;
  for (const i of fin) { x0 = Math.min(x0, xs[i]); x1 = Math.max(x1, xs[i]); y0 = Math.min(y0, ys[i]); y1 = Math.max(y1, ys[i]); }
  const { px, py } = axes(ctx, W, H, m, x0, x1, y0, y1, opts);
  ctx.strokeStyle = '#0b5d66'; ctx.lineWidth = 2;
  ctx.beginPath();
  let pen = false;
  for (let i = 0; i < xs.length; i++) {
    if (!Number.isFinite(xs[i]) || !Number.isFinite(ys[i])) { pen = false; continue; }
    if (pen) ctx.lineTo(px(xs[i]), py(ys[i])); else ctx.moveTo(px(xs[i]), py(ys[i]));
    pen = true;
  }
  ctx.stroke();
  if (opts.points) {
    ctx.fillStyle = '#0b5d66';
    for (const i of fin) { ctx.beginPath(); ctx.arc(px(xs[i]), py(ys[i]), 3, 0, 2 * Math.PI); ctx.fill(); }
  }
  if (Number.isFinite(opts.marker)) {
    ctx.strokeStyle = '#c26a00'; ctx.setLineDash([4, 3]); ctx.lineWidth = 1.5;
    ctx.beginPath(); ctx.moveTo(px(opts.marker), m.t); ctx.lineTo(px(opts.marker), H - m.b); ctx.stroke();
    ctx.setLineDash([]);
  }
  return fin.length;
}

// Line colours of multi-line plots: the colour-universal palette of Okabe
// & Ito (2008), distinguishable with the common colour-vision deficiencies.
export const lineColours = ['#0072b2', '#d55e00', '#009e73', '#cc79a7', '#e69f00', '#56b4e9', '#000000'];

/**
 * linesPlot draws several lines against one x axis on canvas: series is a
 * list of {label, ys} (NaN leaves a gap), each in the next colour of
 * lineColours with a dot per value and a legend. opts: {xlabel, ylabel}.
 * It returns the number of finite points drawn per line.
 */
export function linesPlot(canvas, xs, series, opts = {}) {
  const ctx = canvas.getContext('2d');
  const W = canvas.width, H = canvas.height;
  const m = { l: 78, r: 14, t: 12, b: 42 };
  ctx.clearRect(0, 0, W, H);
  ctx.fillStyle = '#fff'; ctx.fillRect(0, 0, W, H);
  ctx.fillStyle = '#1b2229'; ctx.font = '12px system-ui, sans-serif';
  const counts = series.map(() => 0);
  let x0 = Infinity, x1 = -Infinity, y0 = Infinity, y1 = -Infinity;
  series.forEach((s, k) => {
    for (let i = 0; i < xs.length; i++) {
      if (!Number.isFinite(xs[i]) || !Number.isFinite(s.ys[i])) continue;
      counts[k]++;
      x0 = Math.min(x0, xs[i]); x1 = Math.max(x1, xs[i]); y0 = Math.min(y0, s.ys[i]); y1 = Math.max(y1, s.ys[i]);
    }
  });
  if (!counts.some(n => n > 0)) {
    ctx.fillText(series.length ? 'no trusted value yet' : 'choose a reading to plot', m.l, H / 2);
    return counts;
  }
  const { px, py } = axes(ctx, W, H, m, x0, x1, y0, y1, opts);
  series.forEach((s, k) => {
    const col = lineColours[k % lineColours.length];
    ctx.strokeStyle = col; ctx.fillStyle = col; ctx.lineWidth = 2;
    ctx.beginPath();
    let pen = false;
    for (let i = 0; i < xs.length; i++) {
      if (!Number.isFinite(xs[i]) || !Number.isFinite(s.ys[i])) { pen = false; continue; }
      if (pen) ctx.lineTo(px(xs[i]), py(s.ys[i])); else ctx.moveTo(px(xs[i]), py(s.ys[i]));
      pen = true;
    }
    ctx.stroke();
    for (let i = 0; i < xs.length; i++) {
      if (!Number.isFinite(xs[i]) || !Number.isFinite(s.ys[i])) continue;
      ctx.beginPath(); ctx.arc(px(xs[i]), py(s.ys[i]), 3, 0, 2 * Math.PI); ctx.fill();
    }
  });
  // Legend, top left inside the axes.
  ctx.textAlign = 'left'; ctx.textBaseline = 'middle'; ctx.font = '12px system-ui, sans-serif';
  series.forEach((s, k) => {
    const y = m.t + 12 + 16 * k;
    ctx.fillStyle = lineColours[k % lineColours.length];
    ctx.fillRect(m.l + 8, y - 2, 18, 4);
    ctx.fillStyle = '#1b2229';
    ctx.fillText(s.label, m.l + 32, y);
  });
  return counts;
}
