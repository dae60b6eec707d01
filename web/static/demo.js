// The demo page: one demonstration's frames with a scrubber, its tracks drawn as paths, the
// frames that need a look, the progress of tracking, and a goal made from the demo.
//
// Frame coordinates follow docs/conventions.md (the centre of the top-left pixel is (0, 0)); the
// frame ↔ canvas mapping is view.js's `View`. Tracks are drawn in the marking code of
// server/draw/marks.rs (served as /static/marks.js): a path through the samples in the track's
// colour, dashed where the tracker was unsure or lost the point, a small square where a person
// placed it, a red cross where it was lost, and the sample at the shown frame as a source disc
// with the track's label.
//
// Everything the page changes goes through the JSON API with the session cookie and the
// X-CSRF-Token header: starting a track, correcting a sample, making the goal. Operations are
// followed over server-sent events (`/api/operations/{id}/events`), with polling as a fallback
// (ops.js).
import { csrfToken, apiErrorText } from './site.js';
import { followOperation, cancelOperation } from './ops.js';
import { View, fitCanvas, Obstacles, css, cased, drawMark, sourceMark, drawLabel, drawZones, INKS, SIZES, TRACKS } from './view.js';

const $ = (id) => document.getElementById(id);
const root = $('demo');
const data = JSON.parse(root.dataset.demo);
const demo = data.demo;
const N = demo.frame_count;
const canEdit = !!data.can_edit;
const api = `/api/demos/${encodeURIComponent(demo.id)}`;
const canvas = $('demo-canvas');
const ctx = canvas.getContext('2d');
const view = new View(demo.width, demo.height);
const FPS_FALLBACK = 10;

const state = {
  k: 0,
  playing: false,
  placing: false,
  selected: null, // track id
  drag: null, // {track, x, y, moved}
  tracks: data.tracks.map(indexTrack),
  running: new Map(), // operation id -> {trackId, li, follow}
};

/** A track from the API with its samples indexed by frame. */
function indexTrack(t) {
  const byFrame = new Map();
  for (const s of t.samples) byFrame.set(s.frame, s);
  return { ...t, byFrame };
}

function colourOf(t) {
  const i = state.tracks.findIndex((u) => u.id === t.id);
  return TRACKS.colours[(i < 0 ? 0 : i) % TRACKS.colours.length];
}

const unsure = (s) => s.lost || (s.origin === 'tracked' && s.confidence < TRACKS.sizes.unsure_below);

// ---------- frames ----------

const images = new Map(); // frame index -> HTMLImageElement, most recently used last
const KEEP = 96;

function image(k) {
  let img = images.get(k);
  if (img) {
    images.delete(k);
    images.set(k, img);
    return img;
  }
  img = new Image();
  img.decoding = 'async';
  img.onload = () => {
    if (k === state.k) draw();
  };
  img.src = `${api}/frames/${k}/image`;
  images.set(k, img);
  while (images.size > KEEP) images.delete(images.keys().next().value);
  return img;
}

function prefetch(k) {
  for (let j = k + 1; j < Math.min(N, k + 6); j += 1) image(j);
}

let lastShown = null; // the last frame image drawn, kept on screen while the next one loads

function timeOf(k) {
  const f = demo.frames[k];
  return f && f.time_s !== null && f.time_s !== undefined ? f.time_s : null;
}

function go(k) {
  state.k = Math.max(0, Math.min(N - 1, Math.round(k)));
  $('scrubber').value = String(state.k);
  const t = timeOf(state.k);
  $('frame-readout').value = `frame ${state.k} of ${N - 1}${t === null ? '' : ` · ${t.toFixed(2)} s`}`;
  root.dataset.frame = String(state.k);
  prefetch(state.k);
  draw();
}

// ---------- drawing ----------

function resize() {
  fitCanvas(canvas, view);
  draw();
}

const squarePart = (h) => [{ ink: 'fill', outline: { lines: { points: [[-h, -h], [h, -h], [h, h], [-h, h]], closed: true } } }];

function drawCross(x, y) {
  const h = TRACKS.sizes.lost_half;
  ctx.beginPath();
  ctx.moveTo(x - h, y - h);
  ctx.lineTo(x + h, y + h);
  ctx.moveTo(x + h, y - h);
  ctx.lineTo(x - h, y + h);
  cased(ctx, SIZES.line, TRACKS.lost, null);
}

/** The track's path: runs of consecutive frames, solid where sure and dashed where not. */
function drawPath(t, colour) {
  const frames = [...t.byFrame.keys()].sort((a, b) => a - b);
  let run = [];
  let runUnsure = null;
  const flush = () => {
    if (run.length > 1) {
      ctx.beginPath();
      run.forEach((s, i) => {
        const [cx, cy] = view.toCanvas(s.x, s.y);
        if (i === 0) ctx.moveTo(cx, cy);
        else ctx.lineTo(cx, cy);
      });
      cased(ctx, TRACKS.sizes.path, colour, runUnsure ? SIZES.dash : null);
    }
  };
  let prev = null;
  for (const f of frames) {
    const s = t.byFrame.get(f);
    const u = unsure(s);
    if (prev !== null && f === prev.frame + 1 && (runUnsure === null || u === runUnsure || run.length === 0)) {
      run.push(s);
      runUnsure = runUnsure === null ? u : runUnsure;
    } else if (prev !== null && f === prev.frame + 1) {
      flush();
      run = [prev, s];
      runUnsure = u;
    } else {
      flush();
      run = [s];
      runUnsure = null;
    }
    prev = s;
  }
  flush();
  for (const f of frames) {
    const s = t.byFrame.get(f);
    const [cx, cy] = view.toCanvas(s.x, s.y);
    if (s.lost) drawCross(cx, cy);
    else if (s.origin === 'manual') drawMark(ctx, squarePart(TRACKS.sizes.manual_half), cx, cy, colour);
  }
}

function draw() {
  const dpr = window.devicePixelRatio || 1;
  ctx.setTransform(dpr, 0, 0, dpr, 0, 0);
  const cw = canvas.width / dpr;
  const ch = canvas.height / dpr;
  ctx.fillStyle = '#1d1b22';
  ctx.fillRect(0, 0, cw, ch);
  const img = image(state.k);
  const shown = img.complete && img.naturalWidth > 0 ? img : lastShown;
  if (shown) {
    ctx.imageSmoothingEnabled = view.z < 1;
    ctx.drawImage(shown, view.px, view.py, demo.width * view.z, demo.height * view.z);
    if (shown === img) lastShown = img;
  }
  root.dataset.shown = shown === img ? String(state.k) : '';
  drawZones(ctx, view, data.camera);
  for (const t of state.tracks) drawPath(t, colourOf(t));
  // The current samples first as obstacles, so no label covers another track's point.
  const obstacles = new Obstacles();
  const current = [];
  for (const t of state.tracks) {
    let s = t.byFrame.get(state.k);
    if (state.drag && state.drag.track === t.id) s = { ...(s || {}), x: state.drag.x, y: state.drag.y };
    if (!s) continue;
    const at = view.toCanvas(s.x, s.y);
    obstacles.disc(at, SIZES.source_radius + SIZES.casing);
    current.push([t, s, at]);
  }
  for (const [t, s, at] of current) {
    sourceMark(ctx, at[0], at[1], colourOf(t), state.selected === t.id);
    if (s.lost) drawCross(at[0], at[1]);
    drawLabel(ctx, view, at, s.lost ? `${t.label} (lost)` : t.label, { obstacles });
  }
  if (state.placing) {
    ctx.strokeStyle = css(INKS.selected);
    ctx.lineWidth = 2;
    ctx.setLineDash([]);
    ctx.strokeRect(view.px - 1, view.py - 1, demo.width * view.z + 2, demo.height * view.z + 2);
  }
}

// ---------- lists ----------

/** Runs of consecutive frames where the track is lost or unsure: [{from, to, lost}]. */
function reviewRuns(t) {
  const runs = [];
  const frames = [...t.byFrame.keys()].sort((a, b) => a - b);
  for (const f of frames) {
    const s = t.byFrame.get(f);
    if (!unsure(s)) continue;
    const last = runs[runs.length - 1];
    if (last && last.to === f - 1 && last.lost === s.lost) last.to = f;
    else runs.push({ from: f, to: f, lost: s.lost });
  }
  return runs;
}

function swatch(colour) {
  const sw = document.createElement('span');
  sw.className = 'track-swatch';
  sw.style.background = css(colour);
  sw.setAttribute('aria-hidden', 'true');
  return sw;
}

function renderLists() {
  const list = $('track-list');
  list.replaceChildren();
  $('track-empty').hidden = state.tracks.length > 0;
  for (const t of state.tracks) {
    const li = document.createElement('li');
    li.dataset.trackId = t.id;
    li.dataset.samples = String(t.byFrame.size);
    li.classList.toggle('selected', state.selected === t.id);
    const b = document.createElement('button');
    b.type = 'button';
    b.className = 'quiet track-pick';
    b.append(swatch(colourOf(t)), document.createTextNode(t.label));
    b.addEventListener('click', () => {
      state.selected = state.selected === t.id ? null : t.id;
      renderLists();
      draw();
    });
    const lost = [...t.byFrame.values()].filter((s) => s.lost).length;
    const manual = [...t.byFrame.values()].filter((s) => s.origin === 'manual').length;
    const meta = document.createElement('span');
    meta.className = 'muted';
    meta.textContent = ` ${t.byFrame.size} of ${N} frames · ${manual} placed by hand${lost ? ` · ${lost} lost` : ''}`;
    li.append(b, meta);
    list.appendChild(li);
  }

  const review = $('review-list');
  review.replaceChildren();
  let count = 0;
  for (const t of state.tracks) {
    for (const r of reviewRuns(t)) {
      count += 1;
      const li = document.createElement('li');
      const b = document.createElement('button');
      b.type = 'button';
      b.className = 'quiet';
      b.dataset.frame = String(r.from);
      const span = r.from === r.to ? `frame ${r.from}` : `frames ${r.from}–${r.to}`;
      b.append(swatch(colourOf(t)), document.createTextNode(`${t.label}: ${span} ${r.lost ? 'lost' : 'unsure'}`));
      b.addEventListener('click', () => {
        state.selected = t.id;
        stopPlaying();
        go(r.from);
        renderLists();
        canvas.scrollIntoView({ block: 'nearest' });
      });
      li.appendChild(b);
      review.appendChild(li);
    }
  }
  $('review-empty').hidden = count > 0;
  root.dataset.review = String(count);

  const picks = $('goal-tracks');
  if (picks) {
    const was = new Set([...picks.querySelectorAll('input:checked')].map((i) => i.value));
    const fresh = picks.childElementCount === 0;
    picks.replaceChildren();
    for (const t of state.tracks) {
      const label = document.createElement('label');
      label.className = 'check';
      const input = document.createElement('input');
      input.type = 'checkbox';
      input.value = t.id;
      input.checked = fresh || was.has(t.id) || !picks.dataset.known?.includes(t.id);
      input.addEventListener('change', syncRigid);
      label.append(input, swatch(colourOf(t)), document.createTextNode(` ${t.label}`));
      picks.appendChild(label);
    }
    picks.dataset.known = state.tracks.map((t) => t.id).join(' ');
    syncRigid();
  }
}

function chosenTracks() {
  return [...document.querySelectorAll('#goal-tracks input:checked')].map((i) => i.value);
}

function syncRigid() {
  const rigid = $('goal-rigid');
  if (!rigid) return;
  const n = chosenTracks().length;
  rigid.disabled = n < 2;
  if (n < 2) rigid.checked = false;
}

// ---------- operations ----------

function watch(operationId, trackId, what) {
  if (state.running.has(operationId)) return;
  $('running-panel').hidden = false;
  const li = document.createElement('li');
  li.className = 'operation';
  li.dataset.operationId = operationId;
  const label = document.createElement('span');
  label.textContent = what;
  const bar = document.createElement('progress');
  bar.max = 1;
  bar.value = 0;
  bar.setAttribute('aria-label', what);
  const out = document.createElement('output');
  out.textContent = '0 %';
  const stop = document.createElement('button');
  stop.type = 'button';
  stop.className = 'quiet small';
  stop.textContent = 'Stop';
  stop.addEventListener('click', () => {
    stop.disabled = true;
    cancelOperation(operationId);
  });
  li.append(label, bar, out);
  if (canEdit) li.append(stop);
  $('running-list').appendChild(li);
  const entry = { trackId, li, follow: null };
  state.running.set(operationId, entry);
  entry.follow = followOperation(operationId, (op) => {
    bar.value = op.progress;
    li.dataset.progress = String(op.progress);
    li.dataset.state = op.state;
    out.textContent = `${Math.round(op.progress * 100)} %`;
    if (op.done) finish(operationId, op);
  });
}

async function finish(operationId, op) {
  const entry = state.running.get(operationId);
  if (!entry) return;
  state.running.delete(operationId);
  entry.follow.stop();
  const out = entry.li.querySelector('output');
  entry.li.classList.add('done');
  entry.li.querySelector('button')?.remove();
  if (op.state === 'succeeded') {
    entry.li.querySelector('progress').value = 1;
    out.textContent = '100 % · done';
  } else {
    out.textContent = op.state === 'cancelled' ? 'stopped' : `failed: ${op.error || 'no reason given'}`;
    entry.li.classList.add('error');
  }
  await refreshTrack(entry.trackId);
  root.dataset.finished = String(Number(root.dataset.finished || 0) + 1);
  if (op.state === 'succeeded') {
    setTimeout(() => {
      entry.li.remove();
      if ($('running-list').childElementCount === 0) $('running-panel').hidden = true;
    }, 6000);
  }
}

async function refreshTrack(trackId) {
  const resp = await fetch(`${api}/tracks/${trackId}`, { credentials: 'same-origin' });
  if (!resp.ok) return;
  const t = indexTrack(await resp.json());
  const i = state.tracks.findIndex((u) => u.id === t.id);
  if (i < 0) state.tracks.push(t);
  else state.tracks[i] = t;
  renderLists();
  draw();
}

// ---------- placing and correcting ----------

function say(text, error) {
  const p = $('goal-status');
  if (!p) return;
  p.textContent = text;
  p.classList.toggle('error', !!error);
}

function setPlacing(on) {
  state.placing = on && canEdit;
  const b = $('place-point');
  if (b) b.setAttribute('aria-pressed', String(state.placing));
  canvas.classList.toggle('placing', state.placing);
  draw();
}

function nextLabel() {
  const typed = $('track-label').value.trim();
  if (typed) return typed;
  let n = state.tracks.length + 1;
  const taken = new Set(state.tracks.map((t) => t.label));
  while (taken.has(`point ${n}`)) n += 1;
  return `point ${n}`;
}

async function startTrack(x, y) {
  const label = nextLabel();
  const frame = state.k;
  const resp = await fetch(`${api}/tracks`, {
    method: 'POST',
    headers: { 'Content-Type': 'application/json', 'X-CSRF-Token': csrfToken() },
    body: JSON.stringify({ label, frame, x, y }),
    credentials: 'same-origin',
  });
  if (!resp.ok) {
    say(`The track was not started: ${await apiErrorText(resp)}`, true);
    return;
  }
  const started = await resp.json();
  $('track-label').value = '';
  const t = indexTrack({ id: started.track_id, label, demo_id: demo.id, samples: [{ frame, x, y, origin: 'manual', confidence: 1, lost: false, time_s: timeOf(frame) }] });
  state.tracks.push(t);
  state.selected = t.id;
  renderLists();
  draw();
  watch(started.operation_id, started.track_id, `Tracking “${label}”`);
}

async function correct(trackId, frame, x, y) {
  const t = state.tracks.find((u) => u.id === trackId);
  if (t) t.byFrame.set(frame, { ...(t.byFrame.get(frame) || {}), frame, x, y, origin: 'manual', confidence: 1, lost: false });
  draw();
  const resp = await fetch(`${api}/tracks/${trackId}/samples/${frame}`, {
    method: 'PUT',
    headers: { 'Content-Type': 'application/json', 'X-CSRF-Token': csrfToken() },
    body: JSON.stringify({ x, y }),
    credentials: 'same-origin',
  });
  if (!resp.ok) {
    say(`The correction was not kept: ${await apiErrorText(resp)}`, true);
    await refreshTrack(trackId);
    return;
  }
  const started = await resp.json();
  watch(started.operation_id, trackId, `Tracking “${t ? t.label : 'track'}” again from frame ${frame}`);
}

function eventPoint(e) {
  const r = canvas.getBoundingClientRect();
  return view.toFrame(e.clientX - r.left, e.clientY - r.top);
}

function grabbed(e) {
  const r = canvas.getBoundingClientRect();
  const cx = e.clientX - r.left;
  const cy = e.clientY - r.top;
  let best = null;
  for (const t of state.tracks) {
    const s = t.byFrame.get(state.k);
    if (!s) continue;
    const [sx, sy] = view.toCanvas(s.x, s.y);
    const d = Math.hypot(sx - cx, sy - cy);
    if (d <= TRACKS.sizes.grab && (!best || d < best.d || t.id === state.selected)) best = { t, d };
  }
  return best ? best.t : null;
}

function inFrame([x, y]) {
  return x >= -0.5 && y >= -0.5 && x <= demo.width - 0.5 && y <= demo.height - 0.5;
}

canvas.addEventListener('pointerdown', (e) => {
  canvas.focus();
  if (!canEdit) return;
  const p = eventPoint(e);
  if (state.placing) {
    if (!inFrame(p)) {
      say('Place the point on the frame.', true);
      return;
    }
    setPlacing(false);
    startTrack(p[0], p[1]);
    return;
  }
  const t = grabbed(e);
  if (!t) return;
  const s = t.byFrame.get(state.k);
  state.selected = t.id;
  state.drag = { track: t.id, x: s.x, y: s.y, moved: false, start: p, at: [s.x, s.y] };
  canvas.setPointerCapture(e.pointerId);
  stopPlaying();
  renderLists();
  draw();
});

canvas.addEventListener('pointermove', (e) => {
  if (!state.drag) return;
  const p = eventPoint(e);
  const [x, y] = view.clamp(state.drag.at[0] + p[0] - state.drag.start[0], state.drag.at[1] + p[1] - state.drag.start[1]);
  state.drag.x = x;
  state.drag.y = y;
  state.drag.moved = state.drag.moved || Math.hypot(x - state.drag.at[0], y - state.drag.at[1]) > 0.25;
  draw();
});

function endDrag() {
  const d = state.drag;
  state.drag = null;
  if (d && d.moved) correct(d.track, state.k, d.x, d.y);
  else draw();
}
canvas.addEventListener('pointerup', endDrag);
canvas.addEventListener('pointercancel', () => {
  state.drag = null;
  draw();
});

// ---------- playing ----------

let playTimer = null;

function frameDelay(k) {
  const a = timeOf(k);
  const b = timeOf(k + 1);
  if (a !== null && b !== null && b > a) return Math.min(2000, (b - a) * 1000);
  return 1000 / FPS_FALLBACK;
}

function stopPlaying() {
  state.playing = false;
  if (playTimer) clearTimeout(playTimer);
  playTimer = null;
  $('play').textContent = 'Play';
  $('play').setAttribute('aria-pressed', 'false');
}

function tick() {
  if (!state.playing) return;
  if (state.k >= N - 1) {
    stopPlaying();
    return;
  }
  const delay = frameDelay(state.k);
  go(state.k + 1);
  playTimer = setTimeout(tick, delay);
}

function togglePlay() {
  if (state.playing) {
    stopPlaying();
    return;
  }
  if (state.k >= N - 1) go(0);
  state.playing = true;
  $('play').textContent = 'Pause';
  $('play').setAttribute('aria-pressed', 'true');
  playTimer = setTimeout(tick, frameDelay(state.k));
}

$('play').addEventListener('click', togglePlay);
$('step-back').addEventListener('click', () => { stopPlaying(); go(state.k - 1); });
$('step-on').addEventListener('click', () => { stopPlaying(); go(state.k + 1); });
$('scrubber').addEventListener('input', () => { stopPlaying(); go(Number($('scrubber').value)); });

document.addEventListener('keydown', (e) => {
  const tag = e.target && e.target.tagName;
  if (tag === 'INPUT' && e.target.type !== 'range') return;
  if (tag === 'TEXTAREA' || tag === 'SELECT') return;
  const step = e.shiftKey ? 10 : 1;
  if (e.key === 'ArrowRight') { stopPlaying(); go(state.k + step); }
  else if (e.key === 'ArrowLeft') { stopPlaying(); go(state.k - step); }
  else if (e.key === 'Home') { stopPlaying(); go(0); }
  else if (e.key === 'End') { stopPlaying(); go(N - 1); }
  else if (e.key === ' ' && tag !== 'BUTTON') togglePlay();
  else if ((e.key === 'n' || e.key === 'N') && canEdit && !e.ctrlKey && !e.metaKey) setPlacing(!state.placing);
  else if (e.key === 'Escape') setPlacing(false);
  else return;
  e.preventDefault();
});

// ---------- the goal ----------

function frameField(id) {
  const v = $(id).value.trim();
  if (!/^\d+$/.test(v)) return null;
  const k = Number(v);
  return k < N ? k : null;
}

async function makeGoal(e) {
  e.preventDefault();
  const name = $('goal-name').value.trim();
  const tracks = chosenTracks();
  const start = frameField('start-frame');
  const end = frameField('end-frame');
  if (!name) return say('Give the goal a name.', true);
  if (!tracks.length) return say('Choose at least one track.', true);
  if (start === null || end === null) return say(`Frames go from 0 to ${N - 1}.`, true);
  const body = { name, tracks, start_frame: start, end_frame: end, rigid: $('goal-rigid').checked, override_safety: $('goal-override').checked };
  const note = $('goal-note').value.trim();
  if (note) body.note = note;
  $('make-goal').disabled = true;
  say('Making the goal…');
  const resp = await fetch(`${api}/goal`, {
    method: 'POST',
    headers: { 'Content-Type': 'application/json', 'X-CSRF-Token': csrfToken() },
    body: JSON.stringify(body),
    credentials: 'same-origin',
  });
  $('make-goal').disabled = false;
  if (resp.ok) {
    const rev = await resp.json();
    say(`Goal “${rev.name}” made, revision ${rev.revision}. Opening it…`);
    root.dataset.goalId = rev.goal_id;
    window.location.assign(`/goals/${encodeURIComponent(rev.goal_id)}`);
    return;
  }
  let err = null;
  try {
    err = (await resp.clone().json()).error;
  } catch (_) { /* not JSON */ }
  if (err && (err.code === 'outside_safe_zone' || err.code === 'inside_no_go_zone')) {
    $('goal-override-line').hidden = false;
  }
  say(`Not made: ${await apiErrorText(resp)}`, true);
}

if (canEdit) {
  $('place-point').addEventListener('click', () => setPlacing(!state.placing));
  $('demo-goal').addEventListener('submit', makeGoal);
  $('start-here').addEventListener('click', () => { $('start-frame').value = String(state.k); });
  $('end-here').addEventListener('click', () => { $('end-frame').value = String(state.k); });
}

// ---------- start ----------

window.addEventListener('resize', resize);
renderLists();
resize();
go(0);
for (const r of data.running) {
  const t = state.tracks.find((u) => u.id === r.track_id);
  watch(r.operation.id, r.track_id, `Tracking “${t ? t.label : 'track'}”`);
}
window.demoPage = { view, state, canvas, go };
root.dataset.ready = '1';
