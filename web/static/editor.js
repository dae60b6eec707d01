// The goal editor: the frame on a canvas with zoom and pan, tools that place sources and
// targets, a term list, cost settings, the live cost heat of the selected term, and saving as a
// new revision with If-Match. Terms are kept exactly in the API's JSON form, so what is saved is
// what is shown.
import {
  View, INKS, KIND_NAME, SIZES, css, kindColour, cased, drawArrow, drawGoal, drawZones, sourceMark, targetMark,
  polygonPath, retint as retintArea, paintedAt, paintedCentroid, fittedSources,
} from './view.js';
import { csrfToken, apiErrorText } from './site.js';

const HIT_PX = 9; // how close (CSS px) a pointer must be to grab a point
const ROUND = 1000; // coordinates kept to 1/1000 px: exact for every click at any zoom we offer

const root = document.getElementById('editor');
const data = JSON.parse(root.dataset.editor);
const canvas = document.getElementById('stage-canvas');
const ctx = canvas.getContext('2d');
const frame = data.frame;
const camera = data.camera;
const view = new View(frame.width, frame.height);
const editable = !!data.can_edit;

const state = {
  goalId: data.goal_id,
  etag: data.etag,
  revision: data.revision,
  terms: data.document ? structuredClone(data.document.terms) : [],
  cost: data.document && data.document.cost ? structuredClone(data.document.cost) : { metric: 'euclidean', steps: 'final', mode: 'expected' },
  overrideSafety: data.document ? !!data.document.override_safety : false,
  tool: 'inspect',
  selected: null, // { term, handle: ['source'] | ['target'] | ['sources', k] | ['targets', k] | ['polygon', k] }
  pending: null, // what is being placed
  ticked: new Set(),
  heat: true,
  heatImage: null,
  heatFor: null,
  undo: [],
  redo: [],
  dirty: false,
  refused: null, // { term, text }
};
const masks = new Map(); // term object → { paint: canvas (black/white), tint: canvas }
let image = null;
let cursor = null; // last pointer position in CSS px
let drag = null;
let erasing = false;
let brush = 8;

const $ = (id) => document.getElementById(id);
const round = (v) => Math.round(v * ROUND) / ROUND;

// ---------- the frame and the canvas size ----------

function resize() {
  const r = canvas.getBoundingClientRect();
  const dpr = window.devicePixelRatio || 1;
  canvas.width = Math.max(1, Math.round(r.width * dpr));
  canvas.height = Math.max(1, Math.round(r.height * dpr));
  draw();
}

function cssSize() {
  const r = canvas.getBoundingClientRect();
  return [r.width, r.height];
}

function setZoomReadout() {
  $('zoom-readout').textContent = `${Math.round(view.z * 100)}%`;
}

function fit() {
  const [w, h] = cssSize();
  view.fit(w, h);
  setZoomReadout();
  draw();
}

function one() {
  const [w, h] = cssSize();
  view.one(w, h);
  setZoomReadout();
  draw();
}

function zoomBy(f, cx, cy) {
  const [w, h] = cssSize();
  view.zoomAt(view.z * f, cx ?? w / 2, cy ?? h / 2);
  setZoomReadout();
  draw();
}

// ---------- masks ----------

function blankMask() {
  const paint = document.createElement('canvas');
  paint.width = frame.width;
  paint.height = frame.height;
  const p = paint.getContext('2d', { willReadFrequently: true });
  p.fillStyle = '#000';
  p.fillRect(0, 0, frame.width, frame.height);
  const tint = document.createElement('canvas');
  tint.width = frame.width;
  tint.height = frame.height;
  return { paint, tint, centre: undefined };
}

function maskOf(term) {
  let m = masks.get(term);
  if (!m) {
    m = blankMask();
    masks.set(term, m);
    if (term.mask_png_base64) {
      const img = new Image();
      img.onload = () => {
        m.paint.getContext('2d').drawImage(img, 0, 0);
        retint(m);
        draw();
      };
      img.src = `data:image/png;base64,${term.mask_png_base64}`;
    }
  }
  return m;
}

/** Redoes the tint of a painted area (all of it, or the frame-pixel box given). */
function retint(m, box) {
  const b = box || [0, 0, frame.width, frame.height];
  retintArea(m.paint, m.tint, kindColour('mask'), b[0], b[1], b[2], b[3]);
  m.centre = undefined;
}

/** What the shared goal drawing needs to know of a painted area. */
function maskInfo(_, term) {
  const m = maskOf(term);
  if (m.centre === undefined) m.centre = paintedCentroid(m.paint);
  return { tint: m.tint, centre: m.centre, covers: (x, y) => paintedAt(m.paint, x, y) };
}

function paintAt(term, x, y, erase) {
  const m = maskOf(term);
  // Frame point (x, y) is the centre of pixel (x, y): canvas pixel coordinates are offset 0.5.
  const c = m.paint.getContext('2d');
  c.save();
  c.fillStyle = erase ? '#000' : '#fff';
  c.beginPath();
  c.arc(x + 0.5, y + 0.5, brush, 0, Math.PI * 2);
  c.fill();
  c.restore();
  retint(m, [x + 0.5 - brush, y + 0.5 - brush, x + 0.5 + brush, y + 0.5 + brush]);
  term.mask_png_base64 = null; // re-encoded when needed
}

function encodeMask(term) {
  if (term.kind !== 'mask' || term.mask_png_base64) return;
  const url = maskOf(term).paint.toDataURL('image/png');
  term.mask_png_base64 = url.slice(url.indexOf(',') + 1);
}

// ---------- fitted positions ----------

// Where a whole-object fit puts the sources is the server's to compute; it comes with the
// revision (`derived.rigid`). It is shown while the term's points are as saved, and hidden
// once they are moved, until the next save.
const fitKey = (t) => JSON.stringify([t.kind, t.sources, t.targets, !!t.allow_scale]);
let saved = { derived: null, keys: [] };

function rememberSaved(doc) {
  saved = doc ? { derived: doc.derived, keys: (doc.terms || []).map(fitKey) } : { derived: null, keys: [] };
}

function fitted(i, t) {
  return saved.keys[i] === fitKey(t) ? fittedSources(saved.derived, i, t.sources) : null;
}

// ---------- drawing ----------

function handlesOf(t) {
  const out = [];
  if (t.source) out.push([['source'], t.source, 'source']);
  if (t.target) out.push([['target'], t.target, 'target']);
  (t.sources || []).forEach((p, k) => out.push([['sources', k], p, 'source']));
  (t.targets || []).forEach((p, k) => out.push([['targets', k], p, 'target']));
  (t.polygon || []).forEach((p, k) => out.push([['polygon', k], p, 'vertex']));
  return out;
}

function getHandle(t, h) {
  return h.length === 1 ? t[h[0]] : t[h[0]][h[1]];
}

function setHandle(t, h, xy) {
  const v = view.clamp(xy[0], xy[1]).map(round);
  if (h.length === 1) t[h[0]] = v;
  else t[h[0]][h[1]] = v;
}

function sameHandle(a, b) {
  return a && b && a.length === b.length && a[0] === b[0] && a[1] === b[1];
}

function draw() {
  const dpr = window.devicePixelRatio || 1;
  ctx.setTransform(1, 0, 0, 1, 0, 0);
  ctx.clearRect(0, 0, canvas.width, canvas.height);
  ctx.setTransform(dpr, 0, 0, dpr, 0, 0);
  if (image) {
    ctx.imageSmoothingEnabled = view.z < 2;
    ctx.drawImage(image, view.px, view.py, frame.width * view.z, frame.height * view.z);
  }
  if (state.heat && state.heatImage && state.selected && state.heatFor === heatKey()) {
    ctx.imageSmoothingEnabled = true;
    ctx.drawImage(state.heatImage, view.px, view.py, frame.width * view.z, frame.height * view.z);
  }
  drawZones(ctx, view, camera);
  drawGoal(ctx, view, state.terms, { camera, fitted, mask: maskInfo, selected: state.selected });
  drawSelection();
  drawPending();
}

/** Editor only: the corners of the selected area as handles, and a refused point ringed. */
function drawSelection() {
  const sel = state.selected && state.terms[state.selected.term];
  if (sel && sel.polygon) {
    ctx.save();
    ctx.lineWidth = 1;
    for (const p of sel.polygon) {
      const [x, y] = view.toCanvas(p[0], p[1]);
      ctx.fillStyle = css(INKS.selected);
      ctx.fillRect(x - 3.5, y - 3.5, 7, 7);
      ctx.strokeStyle = css(INKS.casing);
      ctx.strokeRect(x - 3.5, y - 3.5, 7, 7);
    }
    ctx.restore();
  }
  const r = state.refused;
  const t = r && state.terms[r.term];
  if (t) {
    const h = handlesOf(t).find(([hh]) => hh[0] === r.handle) || handlesOf(t)[0];
    if (h) {
      const [x, y] = view.toCanvas(h[1][0], h[1][1]);
      ctx.save();
      ctx.beginPath();
      ctx.arc(x, y, 2 * SIZES.target_radius, 0, Math.PI * 2);
      cased(ctx, SIZES.line * 1.5, INKS.refused, null);
      ctx.restore();
    }
  }
}

function drawPending() {
  const p = state.pending;
  if (!p) return;
  const colour = kindColour(p.kind);
  const cur = cursor ? view.toFrame(cursor[0], cursor[1]) : null;
  const at = (q) => view.toCanvas(q[0], q[1]);
  if (p.kind === 'point' && p.source) {
    if (cursor) drawArrow(ctx, at(p.source), cursor, colour, { dashed: true, toMark: false });
    sourceMark(ctx, ...at(p.source), colour, true);
  }
  if (p.kind === 'region' && p.source) {
    const pts = cur ? [...p.polygon, cur] : p.polygon;
    if (pts.length > 1) {
      ctx.save();
      polygonPath(ctx, view, pts, false);
      cased(ctx, SIZES.line, colour, SIZES.dash);
      ctx.restore();
    }
    for (const q of p.polygon) {
      const [x, y] = at(q);
      ctx.fillStyle = css(colour);
      ctx.fillRect(x - 3, y - 3, 6, 6);
    }
    sourceMark(ctx, ...at(p.source), colour, true);
  }
  if (p.kind === 'rigid') {
    p.sources.forEach((s, k) => {
      const g = p.targets[k];
      if (g) {
        drawArrow(ctx, at(s), at(g), colour);
        targetMark(ctx, ...at(g), colour, false);
      } else if (p.phase === 'targets' && k === p.targets.length && cursor) {
        drawArrow(ctx, at(s), cursor, colour, { dashed: true, toMark: false });
      }
      sourceMark(ctx, ...at(s), colour, p.phase === 'targets' && k === p.targets.length);
    });
  }
}

// ---------- the term list ----------

function describe(t) {
  const f = (p) => `(${p[0].toFixed(1)}, ${p[1].toFixed(1)})`;
  switch (t.kind) {
    case 'point': return `${f(t.source)} → ${f(t.target)}`;
    case 'region': return `${f(t.source)} → inside ${t.polygon.length} corners`;
    case 'mask': return `${f(t.source)} → onto the painted area`;
    case 'rigid': return `${t.sources.length} points move together`;
    default: return t.source ? f(t.source) : '';
  }
}

function numberField(t, key, labelText, fallback, i) {
  const label = document.createElement('label');
  label.textContent = labelText;
  const input = document.createElement('input');
  input.inputMode = 'decimal';
  input.value = t[key] ?? fallback;
  input.readOnly = !editable;
  input.dataset.field = key;
  input.id = `term-${i}-${key}`;
  input.addEventListener('change', () => {
    const v = Number(input.value);
    if (input.value.trim() === '' || !Number.isFinite(v)) {
      input.value = t[key] ?? fallback;
      return;
    }
    remember();
    t[key] = v;
    changed();
  });
  label.appendChild(input);
  return label;
}

function renderList() {
  const list = $('term-list');
  list.replaceChildren();
  $('terms-empty').hidden = state.terms.length > 0;
  state.terms.forEach((t, i) => {
    const li = document.createElement('li');
    li.className = `term kind-${t.kind}`;
    li.style.setProperty('--k', css(kindColour(t.kind)));
    if (state.selected && state.selected.term === i) li.classList.add('selected');
    if (state.refused && state.refused.term === i) li.classList.add('refused');
    li.dataset.index = i;
    const tick = document.createElement('input');
    tick.type = 'checkbox';
    tick.setAttribute('aria-label', `Tick term ${i + 1} to join it into an object move`);
    tick.checked = state.ticked.has(i);
    tick.disabled = !editable || t.kind !== 'point';
    tick.hidden = !editable;
    tick.addEventListener('change', () => {
      if (tick.checked) state.ticked.add(i);
      else state.ticked.delete(i);
      updateCombine();
    });
    const pick = document.createElement('button');
    pick.type = 'button';
    pick.className = 'term-pick';
    pick.textContent = `${i + 1}. ${KIND_NAME[t.kind] || t.kind}`;
    pick.addEventListener('click', () => select(i, handlesOf(t)[0] ? handlesOf(t)[0][0] : null));
    const del = document.createElement('button');
    del.type = 'button';
    del.className = 'small danger';
    del.textContent = 'Delete';
    del.setAttribute('aria-label', `Delete term ${i + 1}`);
    del.hidden = !editable;
    del.addEventListener('click', () => removeTerm(i));
    const fields = document.createElement('div');
    fields.className = 'term-fields';
    const label = document.createElement('label');
    label.textContent = 'Label';
    const lin = document.createElement('input');
    lin.value = t.label || '';
    lin.maxLength = 2000;
    lin.readOnly = !editable;
    lin.dataset.field = 'label';
    lin.id = `term-${i}-label`;
    lin.addEventListener('change', () => {
      remember();
      if (lin.value.trim()) t.label = lin.value;
      else delete t.label;
      changed(false);
    });
    label.appendChild(lin);
    fields.append(label, numberField(t, 'weight', 'Weight', 1, i));
    if (t.kind !== 'learned') fields.append(numberField(t, 'tolerance_px', 'Tolerance px', 5, i));
    if (t.targets && editable) {
      // Turning an object's targets, for those who prefer buttons to the , and . keys.
      const turns = document.createElement('div');
      turns.className = 'turns';
      for (const [text, deg, what] of [['⟲ 1°', -1, 'anticlockwise'], ['⟳ 1°', 1, 'clockwise']]) {
        const b = document.createElement('button');
        b.type = 'button';
        b.className = 'small';
        b.textContent = text;
        b.dataset.turn = String(deg);
        b.setAttribute('aria-label', `Turn the targets of term ${i + 1} by 1° ${what}`);
        b.addEventListener('click', () => {
          state.selected = { term: i, handle: ['targets', 0] };
          rotateTargets(deg);
        });
        turns.appendChild(b);
      }
      fields.append(turns);
    }
    const coords = document.createElement('div');
    coords.className = 'coords';
    coords.textContent = describe(t);
    li.append(tick, pick, del, fields, coords);
    list.appendChild(li);
  });
  updateCombine();
}

function updateCombine() {
  const b = $('combine');
  if (!b) return;
  const n = [...state.ticked].filter((i) => state.terms[i] && state.terms[i].kind === 'point').length;
  b.disabled = n < 2;
  b.textContent = n >= 2 ? `Join ${n} ticked points into one object move` : 'Join ticked points into one object move';
}

function combine() {
  const idx = [...state.ticked].filter((i) => state.terms[i] && state.terms[i].kind === 'point').sort((a, b) => a - b);
  if (idx.length < 2) return;
  remember();
  const pts = idx.map((i) => state.terms[i]);
  const rigid = {
    kind: 'rigid',
    label: pts.map((p) => p.label).filter(Boolean).join(' + ') || undefined,
    sources: pts.map((p) => p.source),
    targets: pts.map((p) => p.target),
    allow_scale: false,
    weight: pts.reduce((s, p) => s + (p.weight ?? 1), 0),
    tolerance_px: Math.max(...pts.map((p) => p.tolerance_px ?? 5)),
  };
  if (!rigid.label) delete rigid.label;
  const at = idx[0];
  state.terms = state.terms.filter((_, i) => !idx.includes(i));
  state.terms.splice(at, 0, rigid);
  state.ticked.clear();
  state.selected = { term: at, handle: ['targets', 0] };
  changed();
  hint('Joined into one object move: its targets are fitted as one rigid transform.');
}

// ---------- edits, undo ----------

function snapshot() {
  state.terms.forEach(encodeMask);
  return JSON.stringify({ terms: state.terms, cost: state.cost });
}

function remember() {
  state.undo.push(snapshot());
  if (state.undo.length > 200) state.undo.shift();
  state.redo = [];
}

function restoreSnapshot(s) {
  const v = JSON.parse(s);
  state.terms = v.terms;
  state.cost = v.cost;
  masks.clear();
  state.selected = null;
  state.ticked.clear();
  syncCost();
  changed();
}

function undo() {
  if (!state.undo.length) return;
  state.redo.push(snapshot());
  restoreSnapshot(state.undo.pop());
  hint('Undone.');
}

function redo() {
  if (!state.redo.length) return;
  state.undo.push(snapshot());
  restoreSnapshot(state.redo.pop());
  hint('Redone.');
}

let previewTimer = null;
function changed(geometry = true) {
  state.dirty = true;
  state.refused = null;
  renderList();
  draw();
  if (geometry) schedulePreview();
}

function select(i, handle) {
  state.selected = i === null ? null : { term: i, handle };
  renderList();
  draw();
  schedulePreview();
}

function removeTerm(i) {
  remember();
  state.terms.splice(i, 1);
  state.ticked.clear();
  state.selected = null;
  changed();
}

function addTerm(t) {
  remember();
  state.terms.push(t);
  const i = state.terms.length - 1;
  state.selected = { term: i, handle: t.target ? ['target'] : t.targets ? ['targets', 0] : ['source'] };
  changed();
}

// ---------- tools ----------

const HINTS = {
  inspect: 'Click a point to select it, drag to move it, arrow keys to nudge it. Drag the empty frame to pan.',
  point: 'Click where the thing is now (source), then where it should end up (target).',
  region: 'Click the source, then the corners of the target area; Enter or a click on the first corner closes it.',
  mask: 'Click the source, then paint the target area (Erase in the bar, or E, switches to removing paint). Enter when done.',
  rigid: 'Click several points on one object, press Enter, then click where each should go, in the same order.',
};

function hint(text) {
  $('tool-hint').textContent = text;
}

function setTool(tool) {
  if (!editable && tool !== 'inspect') return;
  state.tool = tool;
  state.pending = null;
  document.querySelectorAll('[data-tool]').forEach((b) => b.setAttribute('aria-pressed', String(b.dataset.tool === tool)));
  const brushCtl = document.querySelector('.brush-size');
  if (brushCtl) brushCtl.hidden = tool !== 'mask';
  if (tool !== 'mask') setErasing(false);
  hint(HINTS[tool]);
  draw();
}

function hitTest(cx, cy) {
  let best = null;
  const order = state.terms.map((_, i) => i);
  if (state.selected) order.unshift(state.selected.term);
  for (const i of order) {
    for (const [h, p] of handlesOf(state.terms[i])) {
      const [x, y] = view.toCanvas(p[0], p[1]);
      const d = Math.hypot(x - cx, y - cy);
      if (d <= HIT_PX && (!best || d < best.d - 0.01)) best = { term: i, handle: h, d };
    }
    if (best && i === order[0] && state.selected) break;
  }
  return best;
}

function localPos(e) {
  const r = canvas.getBoundingClientRect();
  return [e.clientX - r.left, e.clientY - r.top];
}

function framePos(cx, cy) {
  return view.clamp(...view.toFrame(cx, cy)).map(round);
}

function onPointerDown(e) {
  canvas.focus({ preventScroll: true });
  const [cx, cy] = localPos(e);
  cursor = [cx, cy];
  const hit = hitTest(cx, cy);
  if (!editable && hit && e.button === 0) {
    select(hit.term, hit.handle);
    return;
  }
  if (e.button === 1 || !editable || (e.button === 0 && state.tool === 'inspect' && !hit)) {
    drag = { kind: 'pan', x: cx, y: cy, px: view.px, py: view.py };
    canvas.classList.add('panning');
    canvas.setPointerCapture(e.pointerId);
    return;
  }
  if (e.button !== 0) return;
  const at = framePos(cx, cy);
  switch (state.tool) {
    case 'inspect': {
      select(hit.term, hit.handle);
      const p = getHandle(state.terms[hit.term], hit.handle);
      const [hx, hy] = view.toCanvas(p[0], p[1]);
      remember();
      drag = { kind: 'handle', dx: hx - cx, dy: hy - cy, group: e.shiftKey && hit.handle[0] === 'targets', last: at };
      canvas.setPointerCapture(e.pointerId);
      break;
    }
    case 'point':
      if (!state.pending) {
        state.pending = { kind: 'point', source: at };
        hint('Now click where it should end up (the target). Esc cancels.');
      } else {
        addTerm({ kind: 'point', source: state.pending.source, target: at, weight: 1, tolerance_px: 5 });
        state.pending = null;
        hint(HINTS.point);
      }
      break;
    case 'region':
      if (!state.pending) {
        state.pending = { kind: 'region', source: at, polygon: [] };
        hint('Now click the corners of the target area; Enter closes it.');
      } else {
        const first = state.pending.polygon[0];
        if (first && state.pending.polygon.length >= 3) {
          const [fx, fy] = view.toCanvas(first[0], first[1]);
          if (Math.hypot(fx - cx, fy - cy) <= HIT_PX) {
            finishRegion();
            break;
          }
        }
        state.pending.polygon.push(at);
      }
      break;
    case 'mask': {
      const sel = state.selected && state.terms[state.selected.term];
      if (sel && sel.kind === 'mask' && state.pending && state.pending.kind === 'mask') {
        remember();
        paintAt(sel, at[0], at[1], erasing);
        drag = { kind: 'paint', term: sel, erase: erasing };
        canvas.setPointerCapture(e.pointerId);
        draw();
      } else {
        addTerm({ kind: 'mask', source: at, mask_png_base64: null, weight: 1, tolerance_px: 5 });
        state.pending = { kind: 'mask' };
        hint('Now paint the target area (Erase or E switches to removing paint). Enter when done.');
      }
      break;
    }
    case 'rigid':
      if (!state.pending) state.pending = { kind: 'rigid', phase: 'sources', sources: [], targets: [] };
      if (state.pending.phase === 'sources') {
        state.pending.sources.push(at);
        hint(`${state.pending.sources.length} point(s) on the object. Click more, or press Enter to place their targets.`);
      } else {
        state.pending.targets.push(at);
        if (state.pending.targets.length === state.pending.sources.length) finishRigid();
        else hint(`Now click where point ${state.pending.targets.length + 1} should go.`);
      }
      break;
    default:
      break;
  }
  draw();
}

function onPointerMove(e) {
  const [cx, cy] = localPos(e);
  cursor = [cx, cy];
  const [fx, fy] = view.toFrame(cx, cy);
  $('cursor-readout').textContent = `x ${fx.toFixed(1)}  y ${fy.toFixed(1)}`;
  if (!drag) {
    if (state.pending) draw();
    return;
  }
  if (drag.kind === 'pan') {
    view.px = drag.px + (cx - drag.x);
    view.py = drag.py + (cy - drag.y);
    draw();
  } else if (drag.kind === 'handle') {
    const s = state.selected;
    const t = state.terms[s.term];
    const at = framePos(cx + drag.dx, cy + drag.dy);
    if (drag.group) {
      const dx = at[0] - drag.last[0];
      const dy = at[1] - drag.last[1];
      t.targets = t.targets.map((p) => view.clamp(p[0] + dx, p[1] + dy).map(round));
    } else {
      setHandle(t, s.handle, at);
    }
    drag.last = at;
    drag.moved = true;
    renderCoords();
    draw();
  } else if (drag.kind === 'paint') {
    const at = view.toFrame(cx, cy);
    paintAt(drag.term, at[0], at[1], drag.erase);
    draw();
  }
}

function renderCoords() {
  const s = state.selected;
  if (!s) return;
  const el = document.querySelector(`.term[data-index="${s.term}"] .coords`);
  if (el) el.textContent = describe(state.terms[s.term]);
}

function onPointerUp(e) {
  if (!drag) return;
  const d = drag;
  drag = null;
  canvas.classList.remove('panning');
  if (canvas.hasPointerCapture(e.pointerId)) canvas.releasePointerCapture(e.pointerId);
  if (d.kind === 'handle') {
    if (d.moved) changed();
    else state.undo.pop();
  }
  if (d.kind === 'paint') changed();
}

function finishRegion() {
  const p = state.pending;
  if (!p || p.polygon.length < 3) {
    hint('An area needs at least three corners.');
    return;
  }
  addTerm({ kind: 'region', source: p.source, polygon: p.polygon, weight: 1, tolerance_px: 5 });
  state.pending = null;
  hint(HINTS.region);
}

function finishRigid() {
  const p = state.pending;
  if (!p) return;
  if (p.phase === 'sources') {
    if (p.sources.length < 2) {
      hint('An object move needs at least two points on the object.');
      return;
    }
    p.phase = 'targets';
    hint('Now click where point 1 should go. (Enter again: targets start at the sources; drag them with Shift to move all, , and . to turn.)');
    draw();
    return;
  }
  const targets = p.targets.length === p.sources.length ? p.targets : p.sources.map((s) => [...s]);
  addTerm({ kind: 'rigid', sources: p.sources, targets, allow_scale: false, weight: 1, tolerance_px: 5 });
  state.pending = null;
  hint(HINTS.rigid);
}

function meanOf(pts) {
  return [pts.reduce((a, p) => a + p[0], 0) / pts.length, pts.reduce((a, p) => a + p[1], 0) / pts.length];
}

function rotateTargets(deg) {
  const s = state.selected;
  const t = s && state.terms[s.term];
  if (!t || !t.targets) return;
  remember();
  const c = meanOf(t.targets);
  const a = (deg * Math.PI) / 180;
  const [cs, sn] = [Math.cos(a), Math.sin(a)];
  t.targets = t.targets.map(([x, y]) => view.clamp(c[0] + (x - c[0]) * cs - (y - c[1]) * sn, c[1] + (x - c[0]) * sn + (y - c[1]) * cs).map(round));
  changed();
}

function nudge(dx, dy) {
  const s = state.selected;
  if (!s || !s.handle) return;
  const t = state.terms[s.term];
  const p = getHandle(t, s.handle);
  remember();
  setHandle(t, s.handle, [p[0] + dx, p[1] + dy]);
  changed();
}

function onKey(e) {
  const tag = (e.target.tagName || '').toLowerCase();
  const typing = tag === 'input' || tag === 'textarea' || tag === 'select';
  if ((e.ctrlKey || e.metaKey) && e.key.toLowerCase() === 's') {
    e.preventDefault();
    if (editable) openSave();
    return;
  }
  if (typing || $('save-dialog').open) return;
  if ((e.ctrlKey || e.metaKey) && e.key.toLowerCase() === 'z') {
    e.preventDefault();
    if (e.shiftKey) redo();
    else undo();
    return;
  }
  if ((e.ctrlKey || e.metaKey) && e.key.toLowerCase() === 'y') {
    e.preventDefault();
    redo();
    return;
  }
  if (e.ctrlKey || e.metaKey || e.altKey) return;
  const step = e.shiftKey ? 0.1 : 1;
  const keys = {
    ArrowLeft: () => nudge(-step, 0),
    ArrowRight: () => nudge(step, 0),
    ArrowUp: () => nudge(0, -step),
    ArrowDown: () => nudge(0, step),
    Enter: () => {
      if (state.pending && state.pending.kind === 'region') finishRegion();
      else if (state.pending && state.pending.kind === 'rigid') finishRigid();
      else if (state.pending && state.pending.kind === 'mask') {
        state.pending = null;
        setTool('inspect');
      }
    },
    Escape: () => {
      state.pending = null;
      hint(HINTS[state.tool]);
      draw();
    },
    Delete: () => state.selected && editable && removeTerm(state.selected.term),
    Backspace: () => {
      if (state.pending && state.pending.polygon && state.pending.polygon.length) {
        state.pending.polygon.pop();
        draw();
      } else if (state.selected && editable) removeTerm(state.selected.term);
    },
    '+': () => zoomBy(2),
    '=': () => zoomBy(2),
    '-': () => zoomBy(0.5),
    f: fit,
    F: fit,
    1: one,
    h: toggleHeat,
    H: toggleHeat,
    s: () => setTool('inspect'),
    S: () => setTool('inspect'),
    p: () => setTool('point'),
    P: () => setTool('point'),
    i: () => setTool('region'),
    I: () => setTool('region'),
    o: () => setTool('mask'),
    O: () => setTool('mask'),
    w: () => setTool('rigid'),
    W: () => setTool('rigid'),
    e: () => state.tool === 'mask' && setErasing(!erasing),
    E: () => state.tool === 'mask' && setErasing(!erasing),
  };
  // Turning goes by the physical comma and full-stop keys, so Shift (finer steps) works on any
  // keyboard layout, where Shift+, may type '<' or ';'.
  const turn = { Comma: -1, Period: 1 }[e.code];
  const f = turn ? () => rotateTargets(turn * (e.shiftKey ? 0.1 : 1)) : keys[e.key];
  if (f) {
    e.preventDefault();
    f();
  }
}

function setErasing(on) {
  erasing = on;
  const b = $('paint-erase');
  if (b) b.setAttribute('aria-pressed', String(on));
}

function toggleHeat() {
  state.heat = !state.heat;
  $('heat-toggle').checked = state.heat;
  if (state.heat) schedulePreview();
  draw();
}

// ---------- the document, preview, save ----------

function documentBody(note) {
  state.terms.forEach(encodeMask);
  const cost = { metric: state.cost.metric, steps: state.cost.steps, mode: state.cost.mode };
  if (cost.metric === 'huber') cost.huber_delta_px = Number(state.cost.huber_delta_px ?? 5);
  const body = {
    name: $('goal-name').value.trim(),
    frame_id: frame.id,
    terms: state.terms.map((t) => {
      const c = { ...t };
      for (const k of Object.keys(c)) if (c[k] === undefined || c[k] === null) delete c[k];
      return c;
    }),
    cost,
    override_safety: state.overrideSafety,
  };
  if (note !== undefined) body.note = note;
  return body;
}

/** The index of the selected point over all source points (a rigid term counts each source). */
function selectedPointIndex() {
  const s = state.selected;
  if (!s) return null;
  let p = 0;
  for (let i = 0; i < s.term; i++) {
    const t = state.terms[i];
    p += t.sources ? t.sources.length : 1;
  }
  const t = state.terms[s.term];
  if (t.sources) p += s.handle && s.handle.length === 2 && (s.handle[0] === 'sources' || s.handle[0] === 'targets') ? s.handle[1] : 0;
  return p;
}

function heatKey() {
  return JSON.stringify([selectedPointIndex(), state.terms.length, state.undo.length, state.cost]);
}

function schedulePreview() {
  clearTimeout(previewTimer);
  previewTimer = setTimeout(preview, 250);
}

let previewSeq = 0;
async function preview() {
  const p = selectedPointIndex();
  if (!state.heat || p === null || !state.terms.length || state.pending) return;
  const seq = ++previewSeq;
  const key = heatKey();
  const body = documentBody();
  if (!body.name) body.name = 'preview';
  const resp = await fetch('/api/preview/cost-map.png', {
    method: 'POST',
    headers: { 'Content-Type': 'application/json', 'X-CSRF-Token': csrfToken() },
    body: JSON.stringify({ goal: body, point: p }),
    credentials: 'same-origin',
  });
  if (seq !== previewSeq) return;
  if (resp.ok) {
    const blob = await resp.blob();
    const bmp = await createImageBitmap(blob);
    state.heatImage = bmp;
    state.heatFor = key;
    clearProblems();
    draw();
  } else if (resp.status === 422) {
    const err = (await resp.json()).error || {};
    showRefusal(err, 'As it stands, the server would refuse this goal');
  }
}

/** "terms[2].target" → which term and handle, and the words for it. */
function fieldWords(field) {
  if (!field) return { text: '', term: null, handle: null };
  const m = /^terms\[(\d+)\](?:\.(\w+))?(?:\[(\d+)\])?/.exec(field);
  if (!m) return { text: ` (${field.replace(/_/g, ' ')})`, term: null, handle: null };
  const i = Number(m[1]);
  const t = state.terms[i];
  const part = { source: 'its source', target: 'its target', polygon: 'its area', sources: 'a point on the object', targets: 'a target of the object', mask_png_base64: 'its painted area', weight: 'its weight', tolerance_px: 'its tolerance', label: 'its label' }[m[2]] || m[2] || '';
  const name = t && t.label ? `term ${i + 1} (“${t.label}”)` : `term ${i + 1}`;
  return { text: ` — ${name}${part ? `, ${part}` : ''}`, term: i, handle: m[2] || null };
}

function showRefusal(err, lead) {
  const box = $('problems');
  const where = fieldWords(err.field);
  box.replaceChildren();
  const p1 = document.createElement('p');
  p1.innerHTML = '';
  const strong = document.createElement('strong');
  strong.textContent = `${lead}: `;
  p1.append(strong, document.createTextNode(`${err.message || 'the goal is not valid'}${where.text}.`));
  box.appendChild(p1);
  if (err.code === 'outside_safe_zone' || err.code === 'inside_no_go_zone') {
    const p2 = document.createElement('p');
    p2.textContent = 'Move the target out of the hatched no-go zones and inside the dashed safe zone, or save with an explicit, recorded override.';
    box.appendChild(p2);
    $('override-wrap').hidden = false;
  }
  box.hidden = false;
  state.refused = where.term !== null ? { term: where.term, handle: where.handle } : null;
  renderList();
  draw();
}

function clearProblems() {
  $('problems').hidden = true;
  $('problems').replaceChildren();
}

function openSave() {
  if (!$('goal-name').value.trim()) {
    showRefusal({ message: 'a goal needs a name', field: 'name' }, 'Not saved yet');
    $('goal-name').focus();
    return;
  }
  $('save-override').checked = state.overrideSafety;
  $('save-dialog').showModal();
  $('save-note').focus();
}

async function save(note) {
  const body = documentBody(note);
  body.override_safety = $('save-override').checked;
  const isNew = !state.goalId;
  const headers = { 'Content-Type': 'application/json', 'X-CSRF-Token': csrfToken() };
  if (!isNew) headers['If-Match'] = state.etag;
  const resp = await fetch(isNew ? '/api/goals' : `/api/goals/${state.goalId}`, {
    method: isNew ? 'POST' : 'PUT',
    headers,
    body: JSON.stringify(body),
    credentials: 'same-origin',
  });
  if (resp.ok) {
    const rev = await resp.json();
    rememberSaved(rev);
    state.goalId = rev.goal_id;
    state.etag = resp.headers.get('ETag');
    state.revision = rev.revision;
    state.dirty = false;
    state.overrideSafety = !!rev.override_safety;
    clearProblems();
    $('conflict').hidden = true;
    if (isNew) history.replaceState(null, '', `/goals/${rev.goal_id}`);
    document.querySelector('.rev-line').replaceChildren(
      document.createTextNode(`Revision ${rev.revision} saved by ${rev.author} · `),
      Object.assign(document.createElement('a'), { href: `/goals/${rev.goal_id}/history`, textContent: 'History and downloads' }),
    );
    root.dataset.savedRevision = String(rev.revision);
    hint(`Saved as revision ${rev.revision}.`);
    const warn = (rev.derived && rev.derived.warnings) || [];
    if (warn.length) showRefusal({ message: warn.join('; ') }, 'Saved with a recorded safety override');
    return;
  }
  if (resp.status === 412) {
    const text = await apiErrorText(resp);
    $('conflict-text').textContent = `Not saved: ${text}`;
    $('conflict').hidden = false;
    $('conflict-load').focus();
    return;
  }
  if (resp.status === 422) {
    const err = (await resp.json()).error || {};
    showRefusal(err, 'Not saved');
    return;
  }
  showRefusal({ message: await apiErrorText(resp) }, 'Not saved');
}

async function loadLatest(keepMine) {
  const resp = await fetch(`/api/goals/${state.goalId}`, { credentials: 'same-origin' });
  if (!resp.ok) {
    showRefusal({ message: await apiErrorText(resp) }, 'Could not load the latest revision');
    return;
  }
  const rev = await resp.json();
  state.etag = resp.headers.get('ETag');
  state.revision = rev.revision;
  $('conflict').hidden = true;
  if (keepMine) {
    hint(`Your changes now sit on top of revision ${rev.revision} by ${rev.author}. Save again to make them the next revision.`);
    openSave();
  } else {
    state.terms = rev.terms;
    rememberSaved(rev);
    state.cost = rev.cost;
    masks.clear();
    state.selected = null;
    state.undo = [];
    state.redo = [];
    $('goal-name').value = rev.name;
    syncCost();
    renderList();
    draw();
    hint(`Loaded revision ${rev.revision} by ${rev.author}. Apply your change again and save.`);
  }
  document.querySelector('.rev-line').firstChild.textContent = `Revision ${rev.revision} · `;
}

// ---------- cost settings, zones ----------

function syncCost() {
  $('cost-metric').value = state.cost.metric || 'euclidean';
  $('cost-steps').value = state.cost.steps || 'final';
  $('cost-mode').value = state.cost.mode || 'expected';
  $('huber-wrap').hidden = state.cost.metric !== 'huber';
  if (state.cost.huber_delta_px) $('cost-huber').value = state.cost.huber_delta_px;
}

function bindCost() {
  for (const [id, key] of [['cost-metric', 'metric'], ['cost-steps', 'steps'], ['cost-mode', 'mode']]) {
    $(id).addEventListener('change', () => {
      remember();
      state.cost[key] = $(id).value;
      if (key === 'metric' && state.cost.metric === 'huber' && !state.cost.huber_delta_px) state.cost.huber_delta_px = Number($('cost-huber').value) || 5;
      if (key === 'metric' && state.cost.metric !== 'huber') delete state.cost.huber_delta_px;
      $('huber-wrap').hidden = state.cost.metric !== 'huber';
      changed();
    });
  }
  $('cost-huber').addEventListener('change', () => {
    const v = Number($('cost-huber').value);
    if (!(v > 0)) return;
    remember();
    state.cost.huber_delta_px = v;
    changed();
  });
}

function describeZones() {
  const parts = [];
  if (camera.safe_zone) parts.push('targets must stay inside the dashed safe zone');
  const n = (camera.no_go_zones || []).length;
  if (n) parts.push(`${n} hatched no-go zone${n > 1 ? 's' : ''} must stay free of targets`);
  $('zones-line').textContent = parts.length ? `This camera: ${parts.join('; ')}.` : 'This camera has no safe zone or no-go zones.';
}

// ---------- start ----------

function start() {
  rememberSaved(data.document);
  syncCost();
  bindCost();
  describeZones();
  renderList();
  document.querySelectorAll('[data-tool]').forEach((b) => b.addEventListener('click', () => setTool(b.dataset.tool)));
  document.querySelectorAll('[data-view]').forEach((b) => b.addEventListener('click', () => {
    ({ in: () => zoomBy(2), out: () => zoomBy(0.5), fit, one })[b.dataset.view]();
  }));
  $('heat-toggle').addEventListener('change', () => {
    state.heat = $('heat-toggle').checked;
    if (state.heat) schedulePreview();
    draw();
  });
  const bs = $('brush-size');
  if (bs) bs.addEventListener('input', () => { brush = Number(bs.value); });
  if ($('combine')) $('combine').addEventListener('click', combine);
  if ($('save')) $('save').addEventListener('click', openSave);
  $('save-dialog').addEventListener('close', () => {
    if ($('save-dialog').returnValue === 'save') save($('save-note').value.trim());
  });
  $('conflict-load').addEventListener('click', () => loadLatest(false));
  $('conflict-keep').addEventListener('click', () => loadLatest(true));
  $('goal-name').addEventListener('input', () => { state.dirty = true; });
  canvas.addEventListener('pointerdown', onPointerDown);
  canvas.addEventListener('pointermove', onPointerMove);
  canvas.addEventListener('pointerup', onPointerUp);
  canvas.addEventListener('pointercancel', onPointerUp);
  canvas.addEventListener('pointerleave', () => { cursor = null; if (state.pending) draw(); });
  canvas.addEventListener('wheel', (e) => {
    e.preventDefault();
    const [cx, cy] = localPos(e);
    zoomBy(Math.exp(-e.deltaY * 0.0015), cx, cy);
  }, { passive: false });
  canvas.addEventListener('contextmenu', (e) => e.preventDefault());
  document.addEventListener('keydown', onKey);
  const eraseBtn = $('paint-erase');
  if (eraseBtn) eraseBtn.addEventListener('click', () => setErasing(!erasing));
  window.addEventListener('beforeunload', (e) => {
    if (state.dirty && editable) e.preventDefault();
  });
  new ResizeObserver(resize).observe(canvas);
  setTool('inspect');
  if (!editable) hint('Read-only: drag to pan, wheel to zoom, click a point to see its cost heat.');
  image = new Image();
  image.onload = () => {
    resize();
    fit();
    root.dataset.ready = '1';
  };
  image.src = `/api/frames/${frame.id}/image`;
  // Tests and power users read and set the view here; the page never depends on it.
  window.goalEditor = { view, state, draw, setZoomReadout };
}

start();
