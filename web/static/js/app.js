// Mottle preview: wires the page to the HTTP API.

import { ApiError, absolute, describe, getJSON, loadPrincipal, openEvents, principal, project, request, roleIn, setProject, setToken, token, withAuth } from './api.js';
import { parseField } from './field.js';
import { fmt, linePlot } from './plot.js';
import { RoiEditor } from './roi.js';
import { advice, speckleSize } from './speckle.js';
import { MapView } from './viewer.js';
import { Shelf } from './shelf.js';
import { forQuantity } from './colormap.js';
import { SeriesRunner } from './seriesrun.js';
import { LivePlot } from './live.js';

const $ = id => document.getElementById(id);
const API = '/v1';
const resultFormats = ['field.json', 'field.csv', 'field.vts', 'field.npz'];

const state = {
  files: { reference: null, deformed: null },
  bitmaps: { reference: null, deformed: null },
  served: { reference: null, deformed: null }, // the service's answers for files the browser cannot show
  check: { reference: null, deformed: null },   // the service's image check (quality, subset recommendation) per image
  fileSeq: { reference: 0, deformed: 0 },
  size: null,      // [w, h] of the reference image, when the browser could decode it
  speckle: null,
  job: null,       // current analysis record
  base: null,      // URL prefix of the shown result (…/analyses/{id} or …/frames/{n})
  tracking: null,  // {id, stop()}
  series: null,
  curve: null,
};

// ---- messages -------------------------------------------------------------

function showError(err) {
  const box = $('error-box');
  const d = describe(err);
  box.textContent = '';
  const h = document.createElement('h2'); h.textContent = d.title; box.appendChild(h);
  if (d.detail) { const p = document.createElement('p'); p.className = 'detail'; p.textContent = d.detail; box.appendChild(p); }
  if (d.items.length) {
    const ul = document.createElement('ul');
    for (const it of d.items) {
      const li = document.createElement('li');
      if (it.field) { const c = document.createElement('code'); c.textContent = it.field; li.append(c, ': '); }
      li.append(it.message);
      ul.appendChild(li);
    }
    box.appendChild(ul);
  }
  const b = document.createElement('button'); b.type = 'button'; b.textContent = 'Dismiss';
  b.addEventListener('click', clearError); box.appendChild(b);
  box.hidden = false;
  box.scrollIntoView({ block: 'nearest' });
}

function clearError() { $('error-box').hidden = true; $('error-box').textContent = ''; }

function say(text) { $('status-region').textContent = text; }

// ---- images ----------------------------------------------------------------

async function decode(file) {
  try {
    return await createImageBitmap(file);
  } catch {
    return null; // not a format the browser reads: the service decodes it.
  }
}

// needsService reports whether the browser cannot show file faithfully:
// TIFF (no browser decodes it) and 16-bit PNG (decoded to 8 bits without
// stretching, so a 12-bit camera image looks black). Both are recognised
// from the first bytes, whatever the file name says.
async function needsService(file) {
  const b = new Uint8Array(await file.slice(0, 32).arrayBuffer());
  const tiff = (b[0] === 0x49 && b[1] === 0x49 && b[2] === 42 && b[3] === 0) || (b[0] === 0x4d && b[1] === 0x4d && b[2] === 0 && b[3] === 42);
  const png = b[0] === 0x89 && b[1] === 0x50 && b[2] === 0x4e && b[3] === 0x47;
  return tiff || (png && b.length > 24 && b[24] === 16);
}

// checkImage sends file to the service, which answers its size, bit depth,
// speckle size and an 8-bit preview with the grey range stretched.
// The service runs as many image checks at once as it has workers and
// answers 429 beyond that, so the page sends its own one at a time.
let checkChain = Promise.resolve();
function checkImage(file) {
  const p = checkChain.then(() => checkNow(file));
  checkChain = p.catch(() => {});
  return p;
}

async function checkNow(file) {
  const type = /^image\/(png|tiff|jpeg|bmp)$/.test(file.type) ? file.type : 'application/octet-stream';
  // The service's defaults: a target of 0.01 px at 95 % of the points, a
  // strain window of 5 points for the VSG.
  const resp = await request(`${API}/images/check`, { method: 'POST', body: file, headers: { 'Content-Type': type } });
  const doc = await resp.json();
  const b64 = String(doc.preview_png || '').replace(/^data:image\/png;base64,/, '');
  const bin = atob(b64), bytes = new Uint8Array(bin.length);
  for (let i = 0; i < bin.length; i++) bytes[i] = bin.charCodeAt(i);
  doc.bitmap = await createImageBitmap(new Blob([bytes], { type: 'image/png' }));
  return doc;
}

function greyOf(bitmap) {
  const c = new OffscreenCanvas(bitmap.width, bitmap.height);
  const ctx = c.getContext('2d', { willReadFrequently: true });
  ctx.drawImage(bitmap, 0, 0);
  const d = ctx.getImageData(0, 0, bitmap.width, bitmap.height).data;
  const g = new Float32Array(bitmap.width * bitmap.height);
  for (let i = 0; i < g.length; i++) g[i] = 0.2126 * d[4 * i] + 0.7152 * d[4 * i + 1] + 0.0722 * d[4 * i + 2];
  return g;
}

// setFile takes a chosen or dropped file. The file itself is what the
// analysis uploads; for display the page uses the browser's decoding or,
// for TIFF, 16-bit PNG and anything the browser cannot read, the service's
// stretched preview and its speckle size measured on the full-precision image.
async function setFile(role, file) {
  state.files[role] = file;
  const seq = state.fileSeq[role] = (state.fileSeq[role] || 0) + 1;
  const info = $(`info-${role}`);
  if (!file) { info.textContent = 'none chosen'; return; }
  const kB = `${file.name}, ${(file.size / 1024).toFixed(1)} kB`;
  let bm = null, served = null, failure = null;
  try {
    bm = (await needsService(file)) ? null : await decode(file);
    if (!bm) {
      info.textContent = `${kB} (asking the service for a preview…)`;
      served = await checkImage(file);
      bm = served.bitmap;
    }
  } catch (err) { failure = err; bm = null; served = null; }
  if (seq !== state.fileSeq[role]) return; // a newer file was chosen meanwhile
  state.bitmaps[role] = bm;
  state.served[role] = served;
  state.check[role] = served;
  if (!served && bm) {
    // The image check runs on the service for every image; the page works
    // without it.
    checkImage(file).then(doc => {
      if (seq === state.fileSeq[role]) { state.check[role] = doc; updateQuality(); }
    }).catch(() => { if (seq === state.fileSeq[role]) { state.check[role] = { failed: true }; updateQuality(); } });
  }
  updateQuality();
  // The service's preview of a large image is a bounded-size display copy
  // (at most preview_max_px on its long side); the image itself keeps its
  // size, which is what the ROI editor and the analysis use.
  const W = served ? served.width : bm && bm.width, H = served ? served.height : bm && bm.height;
  if (role === 'reference') {
    state.size = bm ? [W, H] : null;
    $('roi-placeholder').hidden = !!bm;
    if (served) {
      state.speckle = served.speckle_size_px ?? null;
      state.speckleSource = 'service';
      state.speckleError = served.speckle_error || '';
    } else if (bm) {
      const s = speckleSize(greyOf(bm), bm.width, bm.height);
      state.speckle = s ? s.size : null;
      state.speckleSource = 'browser';
      state.speckleError = '';
    } else { state.speckle = null; state.speckleSource = ''; state.speckleError = ''; }
    if (bm) editor.setImage(bm, W, H, $('roi-wrap').clientWidth || 640);
    updateAdvice();
  }
  if (failure) {
    const d = describe(failure);
    info.textContent = `${kB} (no preview: ${d.title})`;
    const p = failure instanceof ApiError ? failure.problem : { title: d.title, detail: d.detail };
    showError({ problem: {
      title: `The ${role} image cannot be read: ${p.title || d.title}`,
      detail: p.detail || d.detail,
      errors: (p.errors || []).map(e => ({ field: e.field === 'body' ? role : e.field, message: e.detail || e.message || '' })),
    } });
    return;
  }
  info.textContent = `${kB}, ${W} × ${H} px` + (served ? `, ${served.bits}-bit, grey ${fmt(served.grey.min)}–${fmt(served.grey.max)}; preview stretched to full contrast by the service` + (bm.width !== W ? ` and reduced to ${bm.width} × ${bm.height} px for display` : '') : '');
}

function wireDrop(role) {
  const zone = $(`drop-${role}`), input = $(`file-${role}`);
  input.addEventListener('change', () => setFile(role, input.files[0] || null));
  zone.addEventListener('dragover', e => { e.preventDefault(); zone.classList.add('over'); });
  zone.addEventListener('dragleave', () => zone.classList.remove('over'));
  zone.addEventListener('drop', e => {
    e.preventDefault(); zone.classList.remove('over');
    const f = e.dataTransfer.files[0];
    if (f) setFile(role, f);
  });
}

// ---- parameters and advice ----------------------------------------------------

function intOf(id) { return parseInt($(id).value, 10); }

function params() {
  const p = {
    subset: intOf('p-subset'),
    step: intOf('p-step'),
    shape: $('p-shape').value,
    strain_window: intOf('p-window'),
  };
  const mm = parseFloat($('p-scale').value);
  if (mm > 0) p.mm_per_px = mm;
  const v = editor.value();
  if (v.roi) p.roi = v.roi;
  if (v.seeds.length) p.seeds = v.seeds;
  return p;
}

function updateAdvice() {
  const subset = intOf('p-subset'), step = intOf('p-step'), win = intOf('p-window');
  const a = advice(state.speckle, subset, step, win);
  const set = (id, text, ok) => { const e = $(id); e.textContent = text; e.classList.toggle('warn', ok === false); };
  if (state.speckle) {
    const by = state.speckleSource === 'service' ? ', measured by the service on the full-precision image' : '';
    set('adv-speckle', `${fmt(state.speckle)} px (width at half height of the autocorrelation peak${by}) — ${a.speckleNote}`, a.speckleOK);
    set('adv-subset', `at least ${a.subsetMin} px for 3 speckles across; about ${a.subsetPitch} px counting the gaps between them. Yours: ${subset} px`, a.subsetOK);
  } else {
    set('adv-speckle', !state.files.reference ? '— choose a reference image'
      : state.speckleError ? `not measured: ${state.speckleError}` : 'not measured (the image could not be read)');
    set('adv-subset', '— needs a speckle size');
  }
  set('adv-step', `${a.stepLo}–${a.stepHi} px for a ${subset} px subset (common practice). Yours: ${step} px` +
    (a.stepOK ? '' : step < a.stepLo ? ' — finer: more points, more time, neighbours share pixels' : ' — coarser: fewer points, features between them can be missed'));
  set('adv-vsg', Number.isFinite(a.vsg) ? `(${win} − 1) · ${step} + ${subset} = ${a.vsg} px` : '—');
}

function syncRoiJSON(v) {
  const doc = {};
  if (v.roi) Object.assign(doc, v.roi);
  if (v.seeds.length) doc.seeds = v.seeds;
  $('roi-json').value = JSON.stringify(doc);
  $('roi-json-msg').textContent = v.roi ? '' : 'No region drawn: the whole image is used.';
}

// ---- running ------------------------------------------------------------------

function idFromLocation(resp, body) {
  const loc = resp.headers.get('Location');
  if (loc) return absolute(loc).replace(/\/+$/, '').split('/').pop();
  if (body && body.id) return body.id;
  throw new Error('the service accepted the job but gave no Location header or id');
}

async function submit(kind) {
  clearError();
  stopTracking();
  let resp;
  try {
    const name = $('job-name').value.trim();
    const nq = name ? `?name=${encodeURIComponent(name)}` : '';
    if (kind === 'demo') {
      resp = await request(`${API}/demo${nq}`, { method: 'POST' });
    } else {
      if (!state.files.reference || !state.files.deformed) {
        showError({ problem: { title: 'Two images needed', detail: 'Choose a reference and a deformed image, or run the demo.', errors: [
          ...(state.files.reference ? [] : [{ field: 'reference', message: 'no file chosen' }]),
          ...(state.files.deformed ? [] : [{ field: 'deformed', message: 'no file chosen' }]),
        ] } });
        return;
      }
      const fd = new FormData();
      fd.append('reference', state.files.reference, state.files.reference.name);
      fd.append('deformed', state.files.deformed, state.files.deformed.name);
      fd.append('params', new Blob([JSON.stringify(params())], { type: 'application/json' }), 'params.json');
      const cal = calibration('use-cal');
      if (cal) fd.append('calibration', new Blob([JSON.stringify(cal)], { type: 'application/json' }), 'camera.json');
      resp = await request(`${API}/analyses${nq}`, { method: 'POST', body: fd });
    }
  } catch (err) { showError(err); return; }
  let body = null;
  try { body = await resp.json(); } catch { /* empty body */ }
  let id;
  try { id = idFromLocation(resp, body); } catch (err) { showError(err); return; }
  say(`Analysis ${(body && body.name) || id} accepted.`);
  track(id, body);
  shelf.refresh();
}

function setProgress(job) {
  const p = job.progress || {};
  const bar = $('progress'), txt = $('progress-text');
  if (p.total > 0) { bar.max = p.total; bar.value = p.done || 0; } else if (job.state === 'succeeded') { bar.max = 1; bar.value = 1; } else bar.removeAttribute('value');
  const pct = p.total > 0 ? ` ${Math.round(100 * (p.done || 0) / p.total)} % (${p.done} of ${p.total} points)` : '';
  txt.textContent = `${job.state || 'waiting'}${pct}`;
}

function stopTracking() {
  if (state.tracking) state.tracking.stop();
  state.tracking = null;
}

function track(id, first) {
  const url = `${API}/analyses/${encodeURIComponent(id)}`;
  let done = false, es = null, timer = 0;
  $('btn-cancel').disabled = false;
  $('btn-run').disabled = true; $('btn-demo').disabled = true;
  const stop = () => { done = true; if (es) es.close(); clearTimeout(timer); };
  state.tracking = { id, stop };
  const finish = async () => {
    if (done) return;
    stop();
    state.tracking = null;
    $('btn-cancel').disabled = true; $('btn-run').disabled = false; $('btn-demo').disabled = false;
    let job;
    try { job = await getJSON(url); } catch (err) { showError(err); return; }
    setProgress(job);
    if (job.state === 'succeeded') {
      say(`Analysis ${job.name || id} finished.`);
      await openResult(`${API}/analyses/${encodeURIComponent(id)}`, job, `analysis “${job.name || id}”`);
      refreshLists();
    } else if (job.state === 'canceled') {
      say(`Analysis ${id} was canceled.`);
    } else {
      const e = job.error || {};
      showError({ problem: { title: e.title || 'The analysis failed', detail: e.detail || '', errors: e.field ? [{ field: e.field, message: e.detail || e.title }] : [] } });
    }
  };
  const seen = job => {
    if (!job || done) return;
    if (job.job) job = job.job;
    setProgress(job);
    if (job.state && ['succeeded', 'failed', 'canceled'].includes(job.state)) finish();
  };
  if (first && first.state) seen(first);
  // Server-sent events (through a stream ticket when signed in with a token).
  openEvents(`${url}/events`).then(src => {
    if (done) { src.close(); return; }
    es = src;
    const onEvent = ev => {
      state.events = (state.events || 0) + 1;
      try { seen(JSON.parse(ev.data)); } catch { /* not JSON */ }
    };
    es.onmessage = onEvent;
    for (const name of ['progress', 'state', 'status', 'done', 'end', 'succeeded', 'failed', 'canceled']) es.addEventListener(name, onEvent);
    es.onerror = () => { if (es) es.close(); es = null; };
  }).catch(() => { es = null; });
  // Poll as well, slowly while events arrive and faster without them.
  const poll = async () => {
    if (done) return;
    try { seen(await getJSON(url)); } catch (err) { if (err instanceof ApiError && err.status === 404) { stop(); showError(err); return; } }
    if (!done) timer = setTimeout(poll, es ? 1500 : 400);
  };
  timer = setTimeout(poll, 300);
}

async function cancel() {
  if (!state.tracking) return;
  const id = state.tracking.id;
  try {
    await request(`${API}/analyses/${encodeURIComponent(id)}/cancel`, { method: 'POST' });
    say(`Cancel requested for ${id}.`);
  } catch (err) { showError(err); }
}

// ---- results --------------------------------------------------------------------

async function loadImage(url) {
  try {
    const resp = await fetch(url, withAuth());
    if (!resp.ok) return null;
    return await createImageBitmap(await resp.blob());
  } catch { return null; }
}

async function openResult(base, job, label) {
  let doc;
  try { doc = await getJSON(`${base}/field.json`); } catch (err) { showError(err); return; }
  let field;
  try { field = parseField(doc); } catch (err) { showError(err); return; }
  const images = {
    // Stretched to 0–255 by the service, so that 12- and 16-bit images are
    // visible whether they were just uploaded or reopened later.
    reference: await loadImage(`${base}/images/reference.png?stretch=true`),
    deformed: await loadImage(`${base}/images/deformed.png?stretch=true`),
  };
  if (!base.includes('/frames/')) { view.line = null; view.lineRef = null; $('profile-text').textContent = 'No profile yet.'; delete $('profile-text').dataset.count;
    const pc = $('profile-canvas'); pc.getContext('2d').clearRect(0, 0, pc.width, pc.height); }
  state.base = base; state.job = job; state.field = field;
  const sel = $('q-select');
  const prev = sel.value;
  sel.textContent = '';
  for (const n of field.names()) { const o = document.createElement('option'); o.value = n; o.textContent = `${n}${field.unit(n) && field.unit(n) !== '–' ? ' (' + field.unit(n) + ')' : ''}`; sel.appendChild(o); }
  sel.disabled = false;
  if (field.q.has(prev)) view.opts.quantity = prev;
  const w = (job && job.width) || (images.reference && images.reference.width) || 0;
  const h = (job && job.height) || (images.reference && images.reference.height) || 0;
  view.show(field, images, w, h);
  sel.value = view.opts.quantity;
  $('results-source').textContent = `— ${label}`;
  describeResult(field, job);
  updateDownloads();
  document.body.dataset.result = 'ready';
}

// updateQuality shows the service's image check of both images: the
// quality warnings with what to change at the bench, and the subset that
// meets a 0.01 px target for the reference.
function updateQuality() {
  const dd = $('adv-quality'), auto = $('adv-auto');
  const lines = [];
  let any = false;
  for (const role of ['reference', 'deformed']) {
    const c = state.check[role];
    if (!state.files[role]) continue;
    if (!c) { lines.push(`${role}: checking…`); continue; }
    if (c.failed || !c.quality) { lines.push(`${role}: not checked (the service did not answer)`); continue; }
    const ws = c.quality.warnings || [];
    if (!ws.length) lines.push(`${role}: no problems found`);
    for (const w of ws) { any = true; lines.push(`${role}: ${w.message} — at the bench: ${w.action}`); }
  }
  dd.textContent = '';
  if (!lines.length) dd.textContent = '— choose the images';
  lines.forEach((l, i) => { if (i) dd.appendChild(document.createElement('br')); dd.append(l); });
  dd.classList.toggle('warn', any);
  const r = state.check.reference && state.check.reference.recommendation;
  if (r && r.subset_px) {
    auto.textContent = `${r.subset_px} px for σ ≤ ${fmt(r.target_std_px)} px at ${fmt(100 * r.fraction)} % of the points ` +
      `(predicted ${fmt(r.predicted_std_px)} px; noise σ ≈ ${fmt(r.noise_sigma)} grey levels ${r.noise_source === 'image' ? 'estimated from the image' : 'as given'}); ` +
      `VSG ${r.vsg_px} px with a ${r.step_px} px step and a ${r.strain_window}-point strain window`;
  } else if (r && r.problem) {
    auto.textContent = r.problem;
  } else {
    auto.textContent = state.check.reference && state.check.reference.recommendation_error ? state.check.reference.recommendation_error : '—';
  }
}

// describeResult lists how the field was made and the cautions that come with it.
function describeResult(field, job) {
  const p = Object.assign({}, field.meta.params || {}, (job && job.params) || {});
  const m = field.meta;
  const valid = field.ok.reduce((a, v) => a + v, 0);
  const parts = [`${valid} of ${field.n} points measured (${fmt(100 * valid / (field.n || 1))} %)`];
  if (p.subset) parts.push(`subset ${p.subset} px`);
  if (p.step) parts.push(`step ${p.step} px`);
  if (p.shape) parts.push(`${p.shape}-order shape function`);
  if (p.strain_window) parts.push(`strain window ${p.strain_window} points`);
  const vsg = m.vsg_px || (p.subset && p.step && p.strain_window ? (p.strain_window - 1) * p.step + p.subset : 0);
  if (vsg) parts.push(`VSG ${fmt(vsg)} px`);
  if (m.noise_sigma) parts.push(`image noise σ ≈ ${fmt(m.noise_sigma)} grey levels`);
  if (m.mm_per_px) parts.push(`scale ${fmt(m.mm_per_px)} mm/px`);
  $('result-info').textContent = parts.join(' · ') + '.';
  const ul = $('result-cautions');
  ul.textContent = '';
  for (const c of Array.isArray(m.cautions) ? m.cautions : []) { const li = document.createElement('li'); li.textContent = c; ul.appendChild(li); }
  // Image quality warnings of the job (its summary) or of the field's metadata.
  let ws = (job && job.summary && job.summary.warnings) || [];
  const iq = m.extra && m.extra.image_quality;
  if (!ws.length && Array.isArray(iq)) ws = iq.flatMap(r => r.warnings || []);
  for (const w of ws) {
    const li = document.createElement('li');
    li.className = 'warn';
    li.textContent = `Image quality, ${w.image}: ${w.message} — at the bench: ${w.action}`;
    ul.appendChild(li);
  }
}

function updateDownloads() {
  const ul = $('downloads'), base = state.base || '';
  ul.textContent = '';
  if (!state.base) return;
  const add = (href, text) => {
    const li = document.createElement('li');
    const a = document.createElement('a'); a.href = href; a.textContent = text; a.setAttribute('download', '');
    a.addEventListener('click', e => { if (token()) { e.preventDefault(); downloadWithToken(href); } });
    li.appendChild(a); ul.appendChild(li);
  };
  for (const n of resultFormats) add(`${state.base}/${n}`, n);
  const o = view.opts;
  add(`${state.base}/arrays/${encodeURIComponent(o.quantity)}.npy`, `${o.quantity}.npy`);
  const q = new URLSearchParams({ quantity: o.quantity, range: `${o.lo},${o.hi}`, on: o.on });
  // map.png is drawn in the server's map for the quantity (the automatic choice here).
  const other = view.mapName() !== forQuantity(o.quantity) ? `, in ${forQuantity(o.quantity)} as the server draws it` : '';
  add(`${state.base}/map.png?${q}`, `map.png (${o.quantity}, over ${o.on}${other})`);
  if (state.series && base.startsWith(state.series.base)) {
    add(`${state.series.base}/curve.csv`, 'curve.csv (series)');
    add(`${state.series.base}/curve.json`, 'curve.json (series)');
  }
}

// A link cannot carry a bearer token: fetch the file and save it from memory.
async function downloadWithToken(href) {
  try {
    const resp = await request(href);
    const url = URL.createObjectURL(await resp.blob());
    const a = document.createElement('a');
    a.href = url; a.download = href.split('?')[0].split('/').pop();
    document.body.appendChild(a); a.click(); a.remove();
    setTimeout(() => URL.revokeObjectURL(url), 10000);
  } catch (err) { showError(err); }
}

// calibration returns the calibration shown in section 5 when the
// checkbox id is ticked, else null.
function calibration(id) {
  const f = window.mottleCalibration && window.mottleCalibration.file;
  return $(id) && $(id).checked && f ? f : null;
}

function refreshLists() { return shelf.refresh(); }

// ---- sign-in ------------------------------------------------------------------

// showPrincipal draws who is signed in and the project chooser, and hides
// the actions the role in the chosen project does not allow: body
// data-role is that role (style.css hides .needs-submit for read); the
// list of earlier work checks each item's own project.
function showPrincipal() {
  const who = principal();
  const sel = $('project');
  sel.textContent = '';
  const all = document.createElement('option');
  all.value = '';
  all.textContent = who ? `all my projects (new work goes to ${who.default_project})` : '—';
  sel.appendChild(all);
  for (const g of who ? who.grants || [] : []) {
    if (g.project === '*') continue;
    const o = document.createElement('option');
    o.value = g.project; o.textContent = `${g.project} (${g.role})`;
    sel.appendChild(o);
  }
  if (project() && ![...sel.options].some(o => o.value === project())) setProject('');
  sel.value = project();
  sel.disabled = !who;
  const role = roleIn('');
  document.body.dataset.role = role;
  const where = project() || (who ? who.default_project : '');
  $('who').textContent = who ? `${who.principal} · ${where} · ${role}` : 'not signed in';
  $('who').dataset.principal = who ? who.principal : '';
  $('btn-signout').hidden = !token();
}

// signIn asks the service who the token (or, without one, the server's
// implicit principal) is, then redraws the page for that principal.
async function signIn() {
  const msg = $('signin-msg');
  try {
    const who = await loadPrincipal();
    msg.textContent = who.tokens_required ? `Signed in as ${who.principal}.` : 'This server asks for no token: every action is allowed.';
  } catch (err) {
    const refused = err instanceof ApiError && err.status === 401;
    msg.textContent = !refused ? describe(err).title
      : token() ? 'The server did not accept this token (unknown, revoked or expired).' : 'This server asks for an access token: enter it and sign in.';
    if (refused) $('conn').open = true;
  }
  showPrincipal();
  document.body.dataset.signedIn = principal() ? 'true' : 'false';
  refreshLists();
}

// ---- series -------------------------------------------------------------------

function flatten(row, out = {}, prefix = '') {
  for (const [k, v] of Object.entries(row || {})) {
    const key = prefix ? `${prefix} ${k}` : k;
    if (typeof v === 'number') out[key] = v;
    else if (v === null) out[key] = NaN;
    else if (v && typeof v === 'object' && !Array.isArray(v)) {
      // Gauges keep their own names; other groups prefix theirs ("mean E11").
      const inner = k === 'gauges' || k === 'summary' ? prefix : key;
      flatten(v, out, inner);
    }
  }
  return out;
}

async function openSeries(id) {
  clearError();
  id = String(id || '').trim();
  if (!id) return;
  const base = `${API}/series/${encodeURIComponent(id)}`;
  let rec;
  try { rec = await getJSON(base); } catch (err) { showError(err); return; }
  const frames = Array.isArray(rec.frames) ? rec.frames.length : (rec.frame_count || 0);
  if (state.series && state.series.events) state.series.events.close();
  if (state.series && state.series.liveEvents) state.series.liveEvents.close();
  state.series = { id, base, rec, frames };
  livePlot.reset(id);
  $('series-body').hidden = false;
  $('series-title').textContent = `Series “${rec.name || rec.reference_name || id}”: ${frames} frames`;
  $('props').textContent = ''; $('report-links').textContent = '';
  const sl = $('frame-slider');
  sl.max = String(Math.max(0, frames - 1));
  sl.value = String(Math.max(0, frames - 1));
  $('frame-out').textContent = sl.value;
  await loadCurve();
  if (frames > 0) await showFrame(+sl.value);
  watchSeries();
  if (rec.live) watchLive();
  if (frames > 0) await loadProperties();
}

// watchLive follows the live values of the open series (frames sent to its
// live route by the page or by the lab's automation) into the live plot.
function watchLive() {
  const s = state.series;
  if (!s || s.liveEvents) return;
  if (token()) return; // EventSource cannot send a bearer token; the page's own answers still plot
  try {
    s.liveEvents = new EventSource(`${s.base}/live/events`);
    s.liveEvents.addEventListener('live', e => { try { livePlot.add(JSON.parse(e.data)); } catch { /* not JSON */ } });
    s.liveEvents.onerror = () => { s.liveEvents.close(); };
  } catch { /* no live updates */ }
}

// frameDone follows a frame sent by the page: the curve grows, the slider
// and the map move to the newest frame.
async function frameDone() {
  const s = state.series;
  if (!s) return;
  try { s.rec = await getJSON(s.base); } catch { return; }
  s.frames = Array.isArray(s.rec.frames) ? s.rec.frames.length : (s.rec.frame_count || 0);
  $('series-title').textContent = `Series “${s.rec.name || s.rec.reference_name || s.id}”: ${s.frames} frames`;
  const sl = $('frame-slider');
  sl.max = String(Math.max(0, s.frames - 1)); sl.value = sl.max; $('frame-out').textContent = sl.value;
  await loadCurve();
  await showFrame(+sl.value);
}

// loadProperties shows the material properties of the open series, each
// with its fit range, fit quality and standard, and the report links.
async function loadProperties() {
  const s = state.series;
  if (!s) return;
  let d;
  try { d = await getJSON(`${s.base}/properties.json`); } catch (err) { showError(err); return; }
  const dl = $('props');
  dl.textContent = '';
  const add = (k, v, cls) => {
    const dt = document.createElement('dt'); dt.textContent = k;
    const dd = document.createElement('dd'); dd.textContent = v; if (cls) dd.className = cls;
    dl.append(dt, dd); return dd;
  };
  for (const l of d.lines || []) add(l.property, l.text);
  const pr = d.properties || {};
  if (pr.youngs_modulus) { dl.dataset.modulus = String(pr.youngs_modulus.E); } else delete dl.dataset.modulus;
  for (const [k, why] of Object.entries(pr.skipped || {})) add(k.replace(/_/g, ' '), `not computed: ${why}`, 'hint');
  if (!dl.children.length) add('—', 'no property selected');
  const links = $('report-links');
  links.textContent = '';
  const a = document.createElement('a'); a.href = `${s.base}/report.html`; a.target = '_blank'; a.rel = 'noopener'; a.id = 'report-open'; a.textContent = 'Open the report';
  const b = document.createElement('a'); b.href = `${s.base}/report.html?download=true`; b.setAttribute('download', 'report.html'); b.id = 'report-download'; b.textContent = 'Download the report (HTML)';
  for (const x of [a, b]) x.addEventListener('click', e => { if (token()) { e.preventDefault(); downloadWithToken(x.href); } });
  links.append(a, ' · ', b);
  document.body.dataset.props = 'ready';
}

// watchSeries follows new and finished frames of the open series.
function watchSeries() {
  const s = state.series;
  if (s.events) s.events.close();
  s.events = null;
  let timer = 0;
  const refresh = () => {
    clearTimeout(timer);
    timer = setTimeout(async () => {
      try {
        const rec = await getJSON(s.base);
        s.rec = rec;
        s.frames = Array.isArray(rec.frames) ? rec.frames.length : (rec.frame_count || 0);
        const sl = $('frame-slider');
        const atEnd = +sl.value >= +sl.max;
        sl.max = String(Math.max(0, s.frames - 1));
        if (atEnd) { sl.value = sl.max; $('frame-out').textContent = sl.value; }
        await loadCurve();
      } catch { /* keep the last curve */ }
    }, 500);
  };
  openEvents(`${s.base}/events`).then(src => {
    if (state.series !== s) { src.close(); return; }
    s.events = src;
    src.addEventListener('frame', refresh);
    src.onerror = () => { src.close(); };
  }).catch(() => { /* no live updates */ });
}

async function loadCurve() {
  const s = state.series;
  let doc;
  try { doc = await getJSON(`${s.base}/curve.json`); } catch (err) { showError(err); return; }
  const rows = (Array.isArray(doc) ? doc : doc.rows || doc.frames || doc.curve || doc.points || []).map(r => flatten(r));
  // Engineering stress from the load and the series' cross-section.
  const p = (s.rec && s.rec.params) || {};
  const area = +p.area_mm2 || 0;
  if (area > 0) for (const r of rows) if (Number.isFinite(r.load)) r.stress_MPa = r.load / area;
  state.curve = rows;
  const keys = new Set();
  for (const r of rows) for (const k of Object.keys(r)) if (!['frame', 'time', 'load', 'index'].includes(k)) keys.add(k);
  const sel = $('curve-y'), prev = sel.value;
  sel.textContent = '';
  for (const k of keys) { const o = document.createElement('option'); o.value = k; o.textContent = k; sel.appendChild(o); }
  // Strains can be the x axis too (a stress–strain curve).
  const xs = $('curve-x'), prevX = xs.value;
  xs.textContent = '';
  for (const k of ['frame', 'time', 'load', ...[...keys].filter(k => /^ext_.*_eng$|^gauge_.*_mean$|^mean (E|H|eps)/.test(k))]) xs.appendChild(new Option(k, k));
  const axial = p.properties && p.properties.axial ? `ext_${p.properties.axial}_eng` : '';
  if (keys.has(prev)) { sel.value = prev; xs.value = [...xs.options].some(o => o.value === prevX) ? prevX : 'frame'; }
  else if (keys.has('stress_MPa') && keys.has(axial)) { sel.value = 'stress_MPa'; xs.value = axial; }
  else xs.value = [...xs.options].some(o => o.value === prevX) ? prevX : 'frame';
  drawCurve();
}

function drawCurve() {
  const rows = state.curve || [];
  const xk = $('curve-x').value, yk = $('curve-y').value;
  const xs = rows.map((r, i) => xk === 'frame' ? (r.frame ?? r.index ?? i) : (r[xk] ?? NaN));
  const ys = rows.map(r => r[yk] ?? NaN);
  const frame = +$('frame-slider').value;
  const n = linePlot($('curve-canvas'), xs, ys, { xlabel: xk, ylabel: yk, points: true, marker: xs[frame] });
  $('curve-text').textContent = n ? `${yk} against ${xk}: ${n} of ${rows.length} frames have values.` : `No frame has both ${xk} and ${yk}.`;
}

async function showFrame(n) {
  const s = state.series;
  if (!s) return;
  $('frame-out').textContent = String(n);
  drawCurve();
  const base = `${s.base}/frames/${n}`;
  let job = null;
  try { job = await getJSON(base); } catch { /* the frame record is optional */ }
  if (job && job.state && job.state !== 'succeeded') {
    const e = job.error || {};
    $('curve-text').textContent = `Frame ${n} is ${job.state}${e.detail ? ': ' + e.detail : ''}; its map appears once it has succeeded.`;
    return;
  }
  await openResult(base, job || { width: s.rec.width, height: s.rec.height }, `series “${s.rec.name || s.id}”, frame ${n}`);
}

// ---- wiring ---------------------------------------------------------------------

const shelf = new Shelf($('work-list'), {
  open: (kind, id) => {
    clearError();
    if (kind === 'series') { openSeries(id).then(() => $('series').scrollIntoView({ block: 'start' })); return; }
    stopTracking(); track(id); $('results').scrollIntoView({ block: 'start' });
  },
  onError: showError,
  onDeleted: it => { say(`Deleted ${it.name || it.kind}.`); if (state.series && state.series.id === it.id) { if (state.series.events) state.series.events.close(); if (state.series.liveEvents) state.series.liveEvents.close(); $('series-body').hidden = true; state.series = null; } },
});
const livePlot = new LivePlot({ panel: $('live-panel'), canvas: $('live-canvas'), x: $('live-x'), pick: $('live-pick'), text: $('live-text') });
const runner = new SeriesRunner({
  openSeries, showError, say, calibration, frameDone,
  liveStarted: () => watchLive(),
  liveValues: v => { if (state.series) livePlot.add(v); },
  refresh: refreshLists,
  seriesFinished: async () => { await frameDone(); await loadProperties(); },
});
const editor = new RoiEditor($('roi-canvas'), v => syncRoiJSON(v));
const view = new MapView({
  canvas: $('map-canvas'), colorbar: $('colorbar'), readout: $('readout'), where: $('readout-where'), announce: $('readout-announce'),
  profile: $('profile-canvas'), profileText: $('profile-text'),
  onRange: (lo, hi) => { $('r-min').value = fmt(lo); $('r-max').value = fmt(hi); },
  onVectors: (k, mean) => {
    $('vec-info').textContent = `Arrows are ${fmt(k)} × the displacement` + (mean ? `, after removing the mean (${fmt(mean[0])}, ${fmt(mean[1])}) px.` : '.');
  },
  onLine: L => { $('pr-x0').value = fmt(L.x0); $('pr-y0').value = fmt(L.y0); $('pr-x1').value = fmt(L.x1); $('pr-y1').value = fmt(L.y1); },
});

$('token').value = token();
const signInWith = () => { setToken($('token').value.trim()); signIn(); };
$('btn-signin').addEventListener('click', signInWith);
$('token').addEventListener('keydown', e => { if (e.key === 'Enter') signInWith(); });
$('btn-signout').addEventListener('click', () => { setToken(''); setProject(''); $('token').value = ''; signIn(); });
$('project').addEventListener('change', e => { setProject(e.target.value); showPrincipal(); refreshLists(); });
wireDrop('reference');
wireDrop('deformed');
$('btn-demo').addEventListener('click', () => submit('demo'));
$('btn-run').addEventListener('click', () => submit('upload'));
$('btn-cancel').addEventListener('click', cancel);
for (const id of ['p-subset', 'p-step', 'p-window']) $(id).addEventListener('input', updateAdvice);
for (const r of document.querySelectorAll('input[name=roi-mode]')) r.addEventListener('change', () => editor.setMode(r.value));
$('btn-roi-clear').addEventListener('click', () => editor.clear());
$('roi-json').addEventListener('change', () => {
  try {
    const doc = JSON.parse($('roi-json').value || '{}');
    const { seeds, ...roi } = doc;
    editor.setValue({ roi, seeds });
    $('roi-json-msg').textContent = 'Region updated.';
  } catch (err) { $('roi-json-msg').textContent = `Not used: ${err.message}`; }
});
$('q-select').addEventListener('change', e => { view.set({ quantity: e.target.value }); view.setHover(view.hover); updateDownloads(); });
for (const r of document.querySelectorAll('input[name=on]')) r.addEventListener('change', () => { view.set({ on: r.value }); updateDownloads(); });
$('cmap-select').addEventListener('change', e => { view.set({ cmap: e.target.value }); updateDownloads(); });
const rangeChanged = () => {
  const lo = parseFloat($('r-min').value), hi = parseFloat($('r-max').value);
  if (Number.isFinite(lo) && Number.isFinite(hi) && hi > lo) { view.set({ lo, hi }); updateDownloads(); }
};
$('r-min').addEventListener('change', rangeChanged);
$('r-max').addEventListener('change', rangeChanged);
$('btn-autorange').addEventListener('click', () => { view.autoRange(); view.render(); updateDownloads(); });
$('opacity').addEventListener('input', e => { $('opacity-out').textContent = e.target.value; view.set({ opacity: +e.target.value }); });
for (const r of document.querySelectorAll('input[name=tool]')) r.addEventListener('change', () => view.set({ tool: r.value }));
$('vectors').addEventListener('change', e => view.set({ vectors: e.target.checked }));
$('vec-relative').addEventListener('change', e => view.set({ vecRelative: e.target.checked }));
$('smooth').addEventListener('change', e => view.set({ smooth: e.target.checked }));
$('vec-scale').addEventListener('input', e => { $('vec-scale-out').textContent = `${e.target.value}×`; view.set({ vecScale: +e.target.value }); });
$('btn-profile').addEventListener('click', () => {
  const v = ['pr-x0', 'pr-y0', 'pr-x1', 'pr-y1'].map(id => parseFloat($(id).value));
  if (!view.field) return;
  if (v.some(x => !Number.isFinite(x))) { $('profile-text').textContent = 'Give both end points of the line.'; return; }
  const prevOn = view.opts.on;
  view.opts.on = 'reference'; // typed coordinates are reference pixels
  view.setLine({ x0: v[0], y0: v[1], x1: v[2], y1: v[3] });
  view.opts.on = prevOn;
  view.profile();
});
$('shelf-refresh').addEventListener('click', refreshLists);
$('frame-slider').addEventListener('change', e => showFrame(+e.target.value));
$('frame-slider').addEventListener('input', e => { $('frame-out').textContent = e.target.value; drawCurve(); });
$('curve-x').addEventListener('change', drawCurve);
$('curve-y').addEventListener('change', drawCurve);
window.addEventListener('resize', () => { if (view.field) { view.fit(); view.render(); } });
updateAdvice();
syncRoiJSON(editor.value());
signIn();

// Open a result or a series named in the address: ?analysis=ID or ?series=ID.
const qs = new URLSearchParams(location.search);
if (qs.get('analysis')) track(qs.get('analysis'));
if (qs.get('series')) openSeries(qs.get('series'));

// A small hook for the browser tests and for scripting the page.
window.mottlePreview = {
  view, editor, state, shelf, runner, openSeries, livePlot,
  toClient: (x, y) => view.toClient(x, y),
  roiToClient: (x, y) => {
    const c = editor.canvas, r = c.getBoundingClientRect();
    return [r.left + x * editor.s * r.width / c.width, r.top + y * editor.s * r.height / c.height];
  },
};
document.body.dataset.ready = 'true';
