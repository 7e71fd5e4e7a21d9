// Running a whole test series from the page: frames dropped as files or a
// folder, ordered as the CLI orders them (natural order, reference.* first),
// time stamps from the file names, a frame rate or the file times, loads
// from a CSV table, extensometers and gauge areas drawn on the reference,
// then one frame after another through the series API with a per-frame and
// an overall progress bar. A stopped upload (or a reloaded page) resumes
// from the frames the server already has.

import { getJSON, request, token } from './api.js';

const API = '/v1';
const pendingKey = 'mottle-series-upload';
const imageExt = /\.(png|tiff?|jpe?g|bmp|pgm)$/i;

/** naturalLess orders names so that "f2" comes before "f10" (as the CLI). */
export function naturalLess(a, b) {
  const digit = c => c >= '0' && c <= '9';
  while (a !== '' && b !== '') {
    if (digit(a[0]) && digit(b[0])) {
      let i = 0, j = 0;
      while (i < a.length && digit(a[i])) i++;
      while (j < b.length && digit(b[j])) j++;
      const na = a.slice(0, i).replace(/^0+/, ''), nb = b.slice(0, j).replace(/^0+/, '');
      if (na.length !== nb.length) return na.length < nb.length;
      if (na !== nb) return na < nb;
      a = a.slice(i); b = b.slice(j); continue;
    }
    if (a[0] !== b[0]) return a[0] < b[0];
    a = a.slice(1); b = b.slice(1);
  }
  return a.length < b.length;
}

const isReference = n => /^reference\.[^.]+$/i.test(n);

/** order returns the image files in the CLI's order: reference.* first,
 * then natural order of the names. */
export function order(files) {
  const imgs = files.filter(f => imageExt.test(f.name));
  return imgs.sort((x, y) => {
    const rx = isReference(x.name), ry = isReference(y.name);
    if (rx !== ry) return rx ? -1 : 1;
    return naturalLess(x.name, y.name) ? -1 : naturalLess(y.name, x.name) ? 1 : 0;
  });
}

/** timesFromNames takes the first capture group of pattern from each name,
 * times scale (as series.TimesFromNames). */
export function timesFromNames(names, pattern, scale) {
  let re;
  try { re = new RegExp(pattern); } catch (e) { throw new Error(`time pattern ${pattern}: ${e.message}`); }
  if (!(scale > 0) || !Number.isFinite(scale)) throw new Error(`time scale ${scale}: use a positive factor to seconds`);
  return names.map(n => {
    const m = re.exec(n);
    if (!m || m[1] === undefined) throw new Error(`name "${n}" does not match the time pattern ${pattern} (it needs a capture group around the number)`);
    const v = Number(m[1]);
    if (!Number.isFinite(v)) throw new Error(`name "${n}": "${m[1]}" is not a number`);
    return v * scale;
  });
}

/** readTable parses a per-frame CSV as series.ReadTable: a key column
 * (frame/index, name/file, or time), a time and a load column. */
export function readTable(text, what) {
  const rows = text.replace(/^\ufeff/, '').split(/\r?\n/).filter(l => l.trim() !== '' && !l.trimStart().startsWith('#'))
    .map(l => l.split(',').map(c => c.trim()));
  if (rows.length < 2) throw new Error(`${what}: need a header row and at least one data row`);
  let key = -1, by = '', tcol = -1, lcol = -1, ts = 1, ls = 1;
  rows[0].forEach((h, i) => {
    h = h.toLowerCase();
    if ((h === 'frame' || h === 'index') && (key < 0 || by === 'time')) { key = i; by = 'frame'; }
    else if ((h === 'name' || h === 'file') && (key < 0 || by === 'time')) { key = i; by = 'name'; }
    if (['time', 'time_s', 't'].includes(h)) { tcol = i; ts = 1; if (key < 0) { key = i; by = 'time'; } }
    if (h === 'time_ms') { tcol = i; ts = 1e-3; if (key < 0) { key = i; by = 'time'; } }
    if (['load', 'force', 'load_n', 'force_n'].includes(h)) { lcol = i; ls = 1; }
    if (['load_kn', 'force_kn'].includes(h)) { lcol = i; ls = 1e3; }
  });
  if (key < 0) throw new Error(`${what}: no frame, name or time column in the header ${rows[0].join(',')}`);
  const num = (r, c, s) => (c < 0 || r[c] === undefined || r[c] === '') ? NaN : Number(r[c]) * s;
  const data = rows.slice(1).map((r, i) => {
    const o = { key: r[key], time: num(r, tcol, ts), load: num(r, lcol, ls) };
    if ((tcol >= 0 && r[tcol] && !Number.isFinite(o.time)) || (lcol >= 0 && r[lcol] && !Number.isFinite(o.load))) throw new Error(`${what}: row ${i + 2} holds a value that is not a number`);
    return o;
  });
  return {
    by,
    lookup(index, name, at) {
      let row;
      if (by === 'frame') row = data.find(d => Number(d.key) === index);
      else if (by === 'name') row = data.find(d => d.key === name);
      else {
        if (at == null) throw new Error(`frame ${index} "${name}": the load table is keyed by time but the frame has no time stamp`);
        const o = data.filter(d => Number.isFinite(d.time)).sort((a, b) => a.time - b.time);
        if (!o.length || at < o[0].time || at > o[o.length - 1].time) throw new Error(`frame ${index} "${name}": time ${at} s is outside the load table's times`);
        const i = o.findIndex(d => d.time >= at);
        let l;
        if (o[i].time === at || i === 0) l = o[i].load;
        else { const a = o[i - 1], b = o[i]; l = a.load + (at - a.time) / (b.time - a.time) * (b.load - a.load); }
        return { time: null, load: Number.isFinite(l) ? l : null };
      }
      if (!row) return { time: null, load: null };
      return { time: Number.isFinite(row.time) ? row.time : null, load: Number.isFinite(row.load) ? row.load : null };
    },
  };
}

/** filesFromDrop collects the files of a drop, walking dropped folders. */
export async function filesFromDrop(dt) {
  const entries = [...(dt.items || [])].map(i => i.webkitGetAsEntry && i.webkitGetAsEntry()).filter(Boolean);
  if (!entries.length) return [...(dt.files || [])];
  const out = [];
  const walk = async e => {
    if (e.isFile) { out.push(await new Promise((res, rej) => e.file(res, rej))); return; }
    const rd = e.createReader();
    for (;;) {
      const batch = await new Promise((res, rej) => rd.readEntries(res, rej));
      if (!batch.length) break;
      for (const c of batch) await walk(c);
    }
  };
  for (const e of entries) await walk(e);
  return out;
}

/** sendFrame posts one frame and resolves with the finished frame record;
 * onUpload(fraction) follows the upload. */
function sendFrame(url, file, key, onUpload) {
  return new Promise((resolve, reject) => {
    const x = new XMLHttpRequest();
    x.open('POST', url);
    x.setRequestHeader('Content-Type', file.type || 'application/octet-stream');
    // Safe retries: the server may use it to answer a repeated frame once.
    x.setRequestHeader('Idempotency-Key', key);
    if (token()) x.setRequestHeader('Authorization', `Bearer ${token()}`);
    x.upload.onprogress = e => { if (e.lengthComputable) onUpload(e.loaded / e.total); };
    x.onload = () => {
      let body = null;
      try { body = JSON.parse(x.responseText); } catch { /* not JSON */ }
      if (x.status >= 200 && x.status < 300) resolve(body);
      else reject({ problem: body || { title: `HTTP ${x.status}`, detail: x.responseText.slice(0, 300) }, status: x.status });
    };
    x.onerror = () => reject({ problem: { title: 'The upload failed', detail: `POST ${url}: the connection broke. Resume the upload when the service answers again.` } });
    x.onabort = () => reject({ aborted: true });
    x.send(file);
    sendFrame.current = x;
  });
}

/** pending returns the stored record of an unfinished upload, or null. */
export function pending() {
  try { return JSON.parse(localStorage.getItem(pendingKey) || 'null'); } catch { return null; }
}
function setPending(p) {
  try { if (p) localStorage.setItem(pendingKey, JSON.stringify(p)); else localStorage.removeItem(pendingKey); } catch { /* storage off */ }
}

/** SeriesRunner wires section 4 of the page. app gives openSeries(id),
 * refresh(), showError(err), say(text), calibration() and name(). */
export class SeriesRunner {
  constructor(app) {
    const $ = id => document.getElementById(id);
    this.$ = $; this.app = app;
    this.files = []; this.table = null; this.bitmap = null; this.items = []; this.stop = false; this.running = false;
    this.canvas = $('gauge-canvas'); this.ctx = this.canvas.getContext('2d'); this.drag = null; this.s = 1;
    const take = list => this.setFiles(list);
    $('series-files').addEventListener('change', e => take([...e.target.files]));
    $('series-folder').addEventListener('change', e => take([...e.target.files]));
    const drop = $('drop-series');
    drop.addEventListener('dragover', e => { e.preventDefault(); drop.classList.add('over'); });
    drop.addEventListener('dragleave', () => drop.classList.remove('over'));
    drop.addEventListener('drop', async e => { e.preventDefault(); drop.classList.remove('over'); take(await filesFromDrop(e.dataTransfer)); });
    $('s-table').addEventListener('change', async e => {
      const f = e.target.files[0];
      this.table = null;
      if (!f) return;
      try { this.table = readTable(await f.text(), f.name); this.app.say(`Load table ${f.name}: keyed by ${this.table.by}.`); } catch (err) { this.app.showError(err); }
    });
    $('g-add').addEventListener('click', () => {
      const v = ['g-x0', 'g-y0', 'g-x1', 'g-y1'].map(id => parseFloat($(id).value));
      if (v.some(x => !Number.isFinite(x))) { this.app.showError(new Error('Give x0, y0, x1 and y1 of the extensometer or gauge area.')); return; }
      this.add($('g-kind').value, v);
    });
    const c = this.canvas;
    c.addEventListener('pointerdown', e => { if (!this.bitmap) return; c.setPointerCapture(e.pointerId); const p = this.pt(e); this.drag = [p, p]; });
    c.addEventListener('pointermove', e => { if (this.drag) { this.drag[1] = this.pt(e); this.draw(); } });
    c.addEventListener('pointerup', () => {
      if (!this.drag) return;
      const [a, b] = this.drag; this.drag = null;
      if (Math.hypot(b[0] - a[0], b[1] - a[1]) > 3) this.add(document.querySelector('input[name=gauge-mode]:checked').value, [a[0], a[1], b[0], b[1]]);
      else this.draw();
    });
    $('s-start').addEventListener('click', () => this.start());
    $('s-stop').addEventListener('click', () => { this.stop = true; if (sendFrame.current) sendFrame.current.abort(); });
    $('s-resume').addEventListener('click', () => this.resume());
    this.showPending();
  }

  pt(e) {
    const r = this.canvas.getBoundingClientRect();
    const x = (e.clientX - r.left) * this.canvas.width / r.width / this.s, y = (e.clientY - r.top) * this.canvas.height / r.height / this.s;
    return [Math.round(x * 10) / 10, Math.round(y * 10) / 10];
  }

  async setFiles(list) {
    this.files = order(list);
    const $ = this.$;
    if (!this.files.length) { $('series-info').textContent = 'no image among the chosen files'; return; }
    const n = this.files.length;
    $('series-info').textContent = `${n} images: reference ${this.files[0].name}, frames ${n > 1 ? this.files[1].name + ' … ' + this.files[n - 1].name : 'none'}`;
    if (!$('s-name').value) $('s-name').value = this.files[0].name.replace(/\.[^.]+$/, '') + (n > 1 ? ` … ${this.files[n - 1].name.replace(/\.[^.]+$/, '')}` : '');
    try { this.bitmap = await createImageBitmap(this.files[0]); } catch { this.bitmap = null; }
    $('gauge-placeholder').hidden = !!this.bitmap;
    if (this.bitmap) {
      const avail = Math.max(240, this.canvas.parentElement.clientWidth || 640);
      this.s = Math.min(avail / this.bitmap.width, 420 / this.bitmap.height, 4);
      this.canvas.width = Math.round(this.bitmap.width * this.s); this.canvas.height = Math.round(this.bitmap.height * this.s);
    }
    this.draw();
    this.showPending();
  }

  add(kind, v) {
    const n = this.items.filter(i => i.kind === kind).length + 1;
    const name = kind === 'ext' ? `ext${n}` : `gauge${n}`;
    const [x0, y0, x1, y1] = v;
    const it = kind === 'ext' ? { kind, name, a: [x0, y0], b: [x1, y1] }
      : { kind, name, rect: [Math.min(x0, x1), Math.min(y0, y1), Math.max(x0, x1), Math.max(y0, y1)] };
    this.items.push(it);
    this.list(); this.draw();
  }

  list() {
    const $ = this.$, ul = $('gauge-list');
    ul.textContent = '';
    for (const it of this.items) {
      const li = document.createElement('li');
      const f = v => (Math.round(v * 10) / 10).toString();
      li.textContent = it.kind === 'ext' ? `${it.name}: extensometer (${f(it.a[0])}, ${f(it.a[1])}) → (${f(it.b[0])}, ${f(it.b[1])}) px, L₀ = ${f(Math.hypot(it.b[0] - it.a[0], it.b[1] - it.a[1]))} px `
        : `${it.name}: gauge area ${it.rect.map(f).join(', ')} px `;
      const b = document.createElement('button'); b.type = 'button'; b.textContent = 'Remove'; b.setAttribute('aria-label', `Remove ${it.name}`);
      b.addEventListener('click', () => { this.items = this.items.filter(x => x !== it); this.list(); this.draw(); });
      li.appendChild(b); ul.appendChild(li);
    }
    // The strain sources for the properties: extensometers and gauges' E11/E22.
    for (const id of ['s-axial', 's-trans']) {
      const sel = $(id), keep = sel.value;
      sel.textContent = '';
      sel.appendChild(new Option('— none —', ''));
      for (const it of this.items) {
        if (it.kind === 'ext') sel.appendChild(new Option(`${it.name} (extensometer)`, it.name));
        else for (const c of ['E11', 'E22']) sel.appendChild(new Option(`${it.name}, mean ${c}`, `gauge:${it.name}:${c}`));
      }
      sel.value = [...sel.options].some(o => o.value === keep) ? keep : '';
      if (!sel.value && id === 's-axial') { const e = this.items.find(i => i.kind === 'ext'); if (e) sel.value = e.name; }
    }
  }

  draw() {
    const ctx = this.ctx, s = this.s;
    ctx.setTransform(1, 0, 0, 1, 0, 0);
    ctx.fillStyle = '#2a3036'; ctx.fillRect(0, 0, this.canvas.width, this.canvas.height);
    if (!this.bitmap) return;
    ctx.drawImage(this.bitmap, 0, 0, this.canvas.width, this.canvas.height);
    ctx.setTransform(s, 0, 0, s, 0, 0);
    const shapes = this.items.slice();
    if (this.drag) {
      const [a, b] = this.drag, kind = document.querySelector('input[name=gauge-mode]:checked').value;
      shapes.push(kind === 'ext' ? { kind, name: '', a, b } : { kind, name: '', rect: [Math.min(a[0], b[0]), Math.min(a[1], b[1]), Math.max(a[0], b[0]), Math.max(a[1], b[1])] });
    }
    for (const it of shapes) {
      for (const [col, w] of [['#ffffff', 4], ['#0b5d66', 2]]) {
        ctx.strokeStyle = col; ctx.lineWidth = w / s;
        ctx.beginPath();
        if (it.kind === 'ext') { ctx.moveTo(it.a[0], it.a[1]); ctx.lineTo(it.b[0], it.b[1]); } else { const [x0, y0, x1, y1] = it.rect; ctx.rect(x0, y0, x1 - x0, y1 - y0); }
        ctx.stroke();
      }
      if (it.name) {
        const [x, y] = it.kind === 'ext' ? it.a : it.rect;
        ctx.font = `${13 / s}px system-ui, sans-serif`; ctx.fillStyle = '#ffffff'; ctx.fillText(it.name, x + 3 / s, y - 4 / s);
      }
    }
  }

  /** plan returns the names, times and loads of every image (reference first). */
  plan() {
    const $ = this.$, names = this.files.map(f => f.name);
    let times = names.map(() => null);
    switch ($('s-times').value) {
      case 'pattern': times = timesFromNames(names, $('s-pattern').value, parseFloat($('s-tscale').value)); break;
      case 'fps': { const fps = parseFloat($('s-fps').value); if (!(fps > 0)) throw new Error('Give a positive frame rate.'); times = names.map((_, i) => i / fps); break; }
      case 'mtime': { const t0 = this.files[0].lastModified; times = this.files.map(f => (f.lastModified - t0) / 1000); break; }
    }
    for (let i = 1; i < times.length; i++) {
      if (times[i] != null && times[i - 1] != null && !(times[i] > times[i - 1])) throw new Error(`frame "${names[i]}" at ${times[i]} s is not after "${names[i - 1]}" at ${times[i - 1]} s; time stamps must increase (sort the frames or fix the times)`);
    }
    const loads = names.map(() => null);
    if (this.table) names.forEach((n, i) => { const r = this.table.lookup(i, n, times[i]); if (times[i] == null && r.time != null) times[i] = r.time; loads[i] = r.load; });
    return { names, times, loads };
  }

  params() {
    const $ = this.$, num = id => parseFloat($(id).value);
    const p = { subset: parseInt($('s-subset').value, 10), step: parseInt($('s-step').value, 10) };
    if (num('s-scale') > 0) p.mm_per_px = num('s-scale');
    const ext = this.items.filter(i => i.kind === 'ext').map(({ name, a, b }) => ({ name, a, b }));
    const gauges = this.items.filter(i => i.kind === 'gauge').map(({ name, rect }) => ({ name, rect }));
    if (ext.length) p.extensometers = ext;
    if (gauges.length) p.gauges = gauges;
    if (num('s-area') > 0) p.area_mm2 = num('s-area');
    const pr = {};
    if ($('s-axial').value) pr.axial = $('s-axial').value;
    if ($('s-trans').value) pr.transverse = $('s-trans').value;
    if (num('s-mod-hi') > num('s-mod-lo')) pr.modulus_range = [num('s-mod-lo'), num('s-mod-hi')];
    if (num('s-poi-hi') > num('s-poi-lo')) pr.poisson_range = [num('s-poi-lo'), num('s-poi-hi')];
    if (num('s-offset') > 0) pr.offset = num('s-offset');
    if (Object.keys(pr).length) p.properties = pr;
    return p;
  }

  async start() {
    const $ = this.$;
    if (this.running) return;
    if (this.files.length < 2) { this.app.showError({ problem: { title: 'Frames needed', detail: 'Choose or drop a reference and at least one frame.' } }); return; }
    let plan;
    try { plan = this.plan(); } catch (err) { this.app.showError(err); return; }
    const fd = new FormData();
    fd.append('reference', this.files[0], this.files[0].name);
    fd.append('params', new Blob([JSON.stringify(this.params())], { type: 'application/json' }), 'params.json');
    const cal = this.app.calibration('s-use-cal');
    if (cal) fd.append('calibration', new Blob([JSON.stringify(cal)], { type: 'application/json' }), 'camera.json');
    const name = $('s-name').value.trim();
    let rec;
    try {
      const resp = await request(`${API}/series${name ? '?name=' + encodeURIComponent(name) : ''}`, { method: 'POST', body: fd });
      rec = await resp.json();
    } catch (err) { this.app.showError(err); return; }
    const p = { series: rec.id, name: rec.name || name, ...plan, total: plan.names.length - 1 };
    setPending(p);
    await this.app.openSeries(rec.id);
    this.app.refresh();
    await this.upload(p, 0);
  }

  showPending() {
    const $ = this.$, p = pending();
    const box = $('s-pending'), btn = $('s-resume');
    if (!p || this.running) { box.hidden = true; btn.hidden = true; return; }
    box.hidden = false; btn.hidden = false;
    const match = this.files.length && this.files.map(f => f.name).join('\n') === p.names.join('\n');
    btn.disabled = !match;
    box.textContent = match ? `The upload of “${p.name}” stopped before all ${p.total} frames were sent. Resume it to send the rest.`
      : `The upload of “${p.name}” stopped before all ${p.total} frames were sent. Choose the same ${p.names.length} files again (reference ${p.names[0]}), then resume.`;
  }

  async resume() {
    const p = pending();
    if (!p) return;
    let rec;
    try { rec = await getJSON(`${API}/series/${encodeURIComponent(p.series)}`); } catch (err) { this.app.showError(err); return; }
    const have = rec.frame_count ?? (rec.frames || []).length;
    await this.app.openSeries(p.series);
    await this.upload(p, have);
  }

  async upload(p, from) {
    const $ = this.$;
    this.running = true; this.stop = false;
    this.showPending();
    $('s-start').disabled = true; $('s-stop').disabled = false;
    const all = $('s-all-progress'), one = $('s-frame-progress'), txt = $('s-progress-text');
    all.max = p.total; all.value = from;
    const byName = new Map(this.files.map(f => [f.name, f]));
    let ok = true;
    // Live gauges: the frames go through the live route, whose answer
    // holds the readings; every frame still gets its full field.
    const live = $('s-live').checked;
    if (live) {
      try {
        await request(`${API}/series/${p.series}/live`, { method: 'POST', headers: { 'Content-Type': 'application/json' }, body: '{"full": "every"}' });
      } catch (err) {
        if (!(err && err.status === 409 && /live-started/.test((err.problem && err.problem.type) || ''))) { this.app.showError(err); ok = false; }
      }
      if (ok) this.app.liveStarted();
    }
    for (let k = from; ok && k < p.total && !this.stop; k++) {
      const i = k + 1, file = byName.get(p.names[i]);
      if (!file) { this.app.showError(new Error(`${p.names[i]} is not among the chosen files`)); ok = false; break; }
      const q = new URLSearchParams(live ? { name: p.names[i] } : { name: p.names[i], wait: 'true' });
      if (p.times[i] != null) q.set('time', String(p.times[i]));
      if (p.loads[i] != null) q.set('load', String(p.loads[i]));
      one.value = 0; one.max = 1;
      txt.textContent = `frame ${k + 1} of ${p.total}: sending ${p.names[i]}`;
      try {
        const url = live ? `${API}/series/${p.series}/live/frames?${q}` : `${API}/series/${p.series}/frames?${q}`;
        const job = await sendFrame(url, file, `${p.series}-${live ? 'live' : 'frame'}-${k}`, f => {
          one.value = 0.5 * f;
          if (f >= 1) txt.textContent = `frame ${k + 1} of ${p.total}: analysing ${p.names[i]}`;
        });
        one.value = 1;
        all.value = k + 1;
        if (live) {
          this.app.liveValues(job);
          txt.textContent = `${k + 1} of ${p.total} frames answered live` + (job && job.trusted === false ? ` (frame ${k + 1}: a reading is not trusted)` : '');
        } else {
          txt.textContent = `${k + 1} of ${p.total} frames done` + (job && job.state && job.state !== 'succeeded' ? ` (frame ${k + 1} ${job.state})` : '');
        }
        document.body.dataset.seriesDone = String(k + 1);
        if (!live) await this.app.frameDone();
      } catch (err) {
        ok = false;
        if (err && err.aborted) txt.textContent = `stopped after ${all.value} of ${p.total} frames`;
        else this.app.showError(err);
        break;
      }
    }
    this.running = false;
    $('s-start').disabled = false; $('s-stop').disabled = true;
    if (ok && !this.stop) {
      setPending(null);
      txt.textContent = `all ${p.total} frames done`;
      await this.app.seriesFinished();
    }
    this.showPending();
    this.app.refresh();
  }
}
