// Earlier work: every analysis and series the server keeps, newest first,
// with its name, date, size, state and a thumbnail; open, rename and
// delete from the list, so that nobody has to type an id.

import { can, getJSON, request, token, withAuth } from './api.js';

const API = '/v1';

function when(t) {
  const d = new Date(t);
  return Number.isNaN(+d) ? '' : d.toLocaleString(undefined, { dateStyle: 'medium', timeStyle: 'short' });
}

/** Shelf draws the list into ul; open(kind, id) shows an item. */
export class Shelf {
  constructor(ul, { open, onError, onDeleted }) {
    this.ul = ul; this.open = open; this.onError = onError; this.onDeleted = onDeleted || (() => {});
    this.items = []; this.urls = [];
  }

  /** refresh reloads the list from the server. */
  async refresh() {
    // ul.dataset.pending counts the reloads under way, so that a reader
    // (and the browser tests) can tell a settled list from one about to be
    // drawn again.
    this.pending = (this.pending || 0) + 1; this.ul.dataset.pending = String(this.pending);
    try { await this.reload(); } finally { this.pending--; this.ul.dataset.pending = String(this.pending); }
  }

  async reload() {
    let an = [], sr = [];
    try {
      an = (await getJSON(`${API}/analyses?limit=100`)).analyses || [];
      sr = (await getJSON(`${API}/series`)).series || [];
    } catch (err) { this.ul.textContent = ''; this.note('The list could not be loaded.'); return; }
    const items = [
      ...an.map(j => ({ kind: 'analysis', id: j.id, name: j.name || '', project: j.project || 'default', created: j.created, state: j.state,
        size: `${j.width} × ${j.height} px`, thumb: `${API}/analyses/${j.id}/thumb.png?state=${j.state}`, base: `${API}/analyses/${j.id}` })),
      ...sr.map(s => ({ kind: 'series', id: s.id, name: s.name || s.reference_name || '', project: s.project || 'default', created: s.created,
        state: `${s.frame_count ?? (s.frames || []).length} frames`, size: `${s.width} × ${s.height} px`,
        thumb: `${API}/series/${s.id}/thumb.png`, base: `${API}/series/${s.id}` })),
    ].sort((a, b) => String(b.created || '').localeCompare(String(a.created || '')));
    this.items = items;
    this.draw();
  }

  note(text) { const li = document.createElement('li'); li.className = 'hint'; li.textContent = text; this.ul.appendChild(li); }

  draw() {
    for (const u of this.urls) URL.revokeObjectURL(u);
    this.urls = [];
    this.ul.textContent = '';
    if (!this.items.length) { this.note('Nothing yet: run the demo, an analysis or a series.'); return; }
    for (const it of this.items) this.ul.appendChild(this.row(it));
  }

  row(it) {
    const li = document.createElement('li');
    li.className = 'work-item'; li.dataset.kind = it.kind; li.dataset.id = it.id;
    const img = document.createElement('img');
    img.alt = ''; img.width = 80; img.height = 60; img.className = 'thumb'; img.loading = 'lazy';
    if (token()) {
      fetch(it.thumb, withAuth()).then(r => r.ok ? r.blob() : null).then(b => {
        if (!b) return; const u = URL.createObjectURL(b); this.urls.push(u); img.src = u;
      }).catch(() => {});
    } else img.src = it.thumb;
    const body = document.createElement('div'); body.className = 'work-body';
    const title = document.createElement('p'); title.className = 'work-name';
    title.textContent = it.name || '(no name)';
    const meta = document.createElement('p'); meta.className = 'work-meta';
    meta.textContent = `${it.kind} · ${it.project} · ${when(it.created)} · ${it.size} · ${it.state}`;
    const acts = document.createElement('div'); acts.className = 'work-acts';
    const label = it.name || it.kind;
    const btn = (text, aria, fn) => {
      const b = document.createElement('button'); b.type = 'button'; b.textContent = text;
      b.setAttribute('aria-label', `${aria} ${label}`); b.addEventListener('click', fn); acts.appendChild(b); return b;
    };
    btn('Open', 'Open', () => this.open(it.kind, it.id));
    // Renaming and deleting need the role manage in the item's project.
    const manage = can('manage', it.project);
    li.dataset.project = it.project;
    btn('Rename', 'Rename', () => this.rename(li, it, title)).hidden = !manage;
    const del = btn('Delete', 'Delete', () => {
      if (del.dataset.armed) { this.remove(it); return; }
      del.dataset.armed = '1'; del.textContent = 'Confirm delete'; del.classList.add('danger');
      setTimeout(() => { delete del.dataset.armed; del.textContent = 'Delete'; del.classList.remove('danger'); }, 6000);
    });
    del.hidden = !manage;
    body.append(title, meta, acts);
    li.append(img, body);
    return li;
  }

  rename(li, it, title) {
    if (li.querySelector('.rename')) return;
    const box = document.createElement('div'); box.className = 'rename';
    const id = `rename-${it.id}`;
    const lab = document.createElement('label'); lab.htmlFor = id; lab.className = 'sr-only'; lab.textContent = `New name for ${it.name || it.kind}`;
    const inp = document.createElement('input'); inp.type = 'text'; inp.id = id; inp.maxLength = 200; inp.value = it.name;
    const ok = document.createElement('button'); ok.type = 'button'; ok.textContent = 'Save';
    const no = document.createElement('button'); no.type = 'button'; no.textContent = 'Cancel';
    const save = async () => {
      try {
        await request(`${it.base}`, { method: 'PATCH', headers: { 'Content-Type': 'application/json' }, body: JSON.stringify({ name: inp.value }) });
        it.name = inp.value.trim(); title.textContent = it.name || '(no name)'; box.remove();
      } catch (err) { this.onError(err); }
    };
    ok.addEventListener('click', save);
    no.addEventListener('click', () => box.remove());
    inp.addEventListener('keydown', e => { if (e.key === 'Enter') save(); if (e.key === 'Escape') box.remove(); });
    box.append(lab, inp, ok, no);
    title.after(box);
    inp.focus(); inp.select();
  }

  async remove(it) {
    try { await request(it.base, { method: 'DELETE' }); } catch (err) { this.onError(err); return; }
    this.items = this.items.filter(x => x !== it);
    this.draw();
    this.onDeleted(it);
  }
}
