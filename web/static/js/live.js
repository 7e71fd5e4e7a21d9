// The live plot of a series: the extensometer and gauge readings of each
// live frame (POST /v1/series/{id}/live/frames, or GET …/live/events) drawn
// against time, load or frame as the frames arrive. An untrusted reading
// (too few valid points, low correlation, a jump) is a gap, and the text
// says why.

import { linesPlot, fmt } from './plot.js';

/** readingKey names a reading: "ext1 eng", "gauge1 E11". */
export const readingKey = r => `${r.name} ${r.component}`;

/** LivePlot keeps the live values of one series and draws the chosen
 * readings. els: {panel, canvas, x, pick, text}. */
export class LivePlot {
  constructor(els) {
    this.els = els;
    this.rows = [];
    this.keys = [];
    this.chosen = new Set();
    els.x.addEventListener('change', () => this.draw());
  }

  /** reset empties the plot for series id. */
  reset(id) {
    this.id = id; this.rows = []; this.keys = []; this.chosen = new Set();
    this.els.pick.textContent = '';
    this.els.panel.hidden = true;
    this.draw();
  }

  /** add takes one frame's LiveValues (a repeat of an index replaces it). */
  add(v) {
    if (!v || !Number.isInteger(v.index)) return;
    this.els.panel.hidden = false;
    const i = this.rows.findIndex(r => r.index === v.index);
    if (i >= 0) this.rows[i] = v; else { this.rows.push(v); this.rows.sort((a, b) => a.index - b.index); }
    for (const r of v.readings || []) {
      const k = readingKey(r);
      if (this.keys.includes(k)) continue;
      this.keys.push(k);
      // The first two readings are plotted unless the user chooses.
      if (this.chosen.size < 2) this.chosen.add(k);
      const lab = document.createElement('label');
      const cb = document.createElement('input');
      cb.type = 'checkbox'; cb.value = k; cb.checked = this.chosen.has(k);
      cb.addEventListener('change', () => { if (cb.checked) this.chosen.add(k); else this.chosen.delete(k); this.draw(); });
      lab.append(cb, ` ${k}${r.gauge ? ' (gauge mean)' : ' (extensometer)'}`);
      this.els.pick.appendChild(lab);
    }
    this.draw();
  }

  draw() {
    const { canvas, x, text } = this.els;
    const xk = x.value;
    const xs = this.rows.map(r => xk === 'time' ? (r.time_s ?? NaN) : xk === 'load' ? (r.load_N ?? NaN) : r.index);
    const keys = this.keys.filter(k => this.chosen.has(k));
    const series = keys.map(k => ({
      label: k,
      ys: this.rows.map(r => { const g = (r.readings || []).find(q => readingKey(q) === k); return g && g.value != null ? g.value : NaN; }),
    }));
    const counts = linesPlot(canvas, xs, series, { xlabel: { time: 'time (s)', load: 'load (N)', frame: 'frame' }[xk], ylabel: 'strain' });
    canvas.dataset.points = counts.join(',');
    canvas.dataset.frames = String(this.rows.length);
    text.dataset.frames = String(this.rows.length);
    const last = this.rows[this.rows.length - 1];
    if (!last) { text.textContent = ''; return; }
    const parts = (last.readings || []).map(r => r.value != null
      ? `${readingKey(r)} ${fmt(r.value)}${r.std != null ? ' ± ' + fmt(r.std) : ''}`
      : `${readingKey(r)} untrusted (${(r.reason || 'no value').replace(/_/g, ' ')})`);
    const noX = xk !== 'frame' && !xs.some(Number.isFinite) ? ` No frame has a ${xk}; plot against frame instead.` : '';
    text.textContent = `Frame ${last.index}${last.time_s != null ? ` at ${fmt(last.time_s)} s` : ''}${last.load_N != null ? `, ${fmt(last.load_N)} N` : ''}: ${parts.join('; ')}. ${this.rows.length} live frames.${noX}`;
  }
}
