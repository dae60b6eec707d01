// The reward-fit pages.
//
// "new": set up a fit on one of a camera's frames. Demonstrations are tracks of the camera's
// demos (ticked in the side panel) or paths drawn on the frame; features are placed on the frame
// with the tools: a point whose distance each cell's feature measures, a bump (rbf) around a
// point, an area (its corners clicked in turn), and optionally the camera's no-go zones. The
// fit is started with POST /api/reward-fits, and the page moves to the fit's own page.
//
// "view": one fit. While it runs, its operation is followed (ops.js) and the log-likelihood per
// move of each iteration so far (the operation's `detail.trace`) is plotted as a small SVG; once
// done, the reward map (/api/reward-fits/{id}/reward-map.png, drawn by the server) replaces the
// frame, and the weights, the log-likelihood figures beside the uniform random walk's, and the
// held-out (leave-one-out) figures are listed. A click on the frame picks the point of a
// `learned` goal term made from the fit with POST /api/goals.
//
// Frame coordinates follow docs/conventions.md (the centre of the top-left pixel is (0, 0));
// the frame ↔ canvas mapping is view.js's `View`, and the marks are the marking code's.
import { csrfToken, apiErrorText } from './site.js';
import { followOperation, cancelOperation } from './ops.js';
import { View, fitCanvas, css, cased, drawMark, sourceMark, targetMark, drawLabel, drawZones, polygonPath, kindColour, SHAPES, SIZES, TRACKS } from './view.js';

const $ = (id) => document.getElementById(id);
const root = $('fit');
const data = JSON.parse(root.dataset.fit);
const camera = data.camera;
const canvas = $('fit-canvas');
const ctx = canvas.getContext('2d');
const view = new View(camera.width, camera.height);
const LEARNED = kindColour('learned');
const CLOSE_PX = 10; // a click this near (CSS px) the first corner closes an area

let picture = null; // the image drawn under everything
let drawExtra = () => {};

function loadPicture(url) {
  const img = new Image();
  img.decoding = 'async';
  img.onload = () => {
    picture = img;
    root.dataset.picture = url;
    draw();
  };
  img.src = url;
}

function resize() {
  fitCanvas(canvas, view);
  draw();
}

function draw() {
  const dpr = window.devicePixelRatio || 1;
  ctx.setTransform(dpr, 0, 0, dpr, 0, 0);
  ctx.fillStyle = '#1d1b22';
  ctx.fillRect(0, 0, canvas.width / dpr, canvas.height / dpr);
  if (picture) {
    ctx.imageSmoothingEnabled = view.z < 1;
    ctx.drawImage(picture, view.px, view.py, camera.width * view.z, camera.height * view.z);
  }
  drawExtra();
}

function pointerFrame(e) {
  const r = canvas.getBoundingClientRect();
  return view.clamp(...view.toFrame(e.clientX - r.left, e.clientY - r.top));
}

function polyline(pts) {
  ctx.beginPath();
  pts.forEach(([x, y], k) => {
    const [cx, cy] = view.toCanvas(x, y);
    if (k === 0) ctx.moveTo(cx, cy);
    else ctx.lineTo(cx, cy);
  });
}

/** A demonstration's samples `[x, y, lost]` as a cased path (a gap where lost) in `colour`. */
function drawDemo(samples, colour) {
  let run = [];
  const flush = () => {
    if (run.length > 1) {
      polyline(run);
      cased(ctx, TRACKS.sizes.path, colour, null);
    }
    run = [];
  };
  for (const [x, y, lost] of samples) {
    if (lost) flush();
    else run.push([x, y]);
  }
  flush();
  const first = samples.find((s) => !s[2]);
  if (first) sourceMark(ctx, ...view.toCanvas(first[0], first[1]), colour, false);
}

function say(id, text, error) {
  const el = $(id);
  el.textContent = text;
  el.classList.toggle('error', !!error);
}

function swatch(colour) {
  const sw = document.createElement('span');
  sw.className = 'track-swatch';
  sw.style.background = css(colour);
  sw.setAttribute('aria-hidden', 'true');
  return sw;
}

const num = (v) => {
  const t = String(v).trim();
  return t !== '' && Number.isFinite(Number(t)) ? Number(t) : null;
};
const fmt = (x, d = 3) => (x === null || x === undefined ? '—' : Number(x).toFixed(d));

// =====================================================================================
// Setting up a fit
// =====================================================================================

function newFit() {
  const st = {
    tool: null,
    paths: [], // drawn demos: arrays of [x, y]
    drawing: null, // the path being drawn
    features: [], // API feature objects, in order
    corners: [], // the area being clicked
  };
  const colourOfDemo = (k) => TRACKS.colours[k % TRACKS.colours.length];

  // ---- frames ----
  const select = $('fit-frame');
  for (const f of data.frames) {
    const o = document.createElement('option');
    o.value = f.id;
    o.textContent = `${f.created_at.replace('T', ' ').replace('Z', '')} · ${f.id.slice(0, 8)}`;
    select.appendChild(o);
  }
  $('no-frames').hidden = data.frames.length > 0;
  select.disabled = data.frames.length === 0;
  const showFrame = () => {
    if (select.value) loadPicture(`/api/frames/${encodeURIComponent(select.value)}/image`);
  };
  select.addEventListener('change', showFrame);

  // ---- demos ----
  const choices = $('demo-choices');
  const trackBoxes = [];
  if (data.demos.length === 0) {
    const p = document.createElement('p');
    p.className = 'empty';
    p.textContent = 'No demos on this camera yet. Draw paths on the frame instead, or upload a demo on the team home.';
    choices.appendChild(p);
  }
  for (const d of data.demos) {
    const fs = document.createElement('fieldset');
    const lg = document.createElement('legend');
    const a = document.createElement('a');
    a.href = `/demos/${encodeURIComponent(d.id)}`;
    a.textContent = d.name;
    lg.appendChild(a);
    fs.appendChild(lg);
    if (d.tracks.length === 0) {
      const p = document.createElement('p');
      p.className = 'empty small';
      p.textContent = 'No tracks: place points on the demo page first.';
      fs.appendChild(p);
    }
    for (const t of d.tracks) {
      const label = document.createElement('label');
      label.className = 'check';
      const input = document.createElement('input');
      input.type = 'checkbox';
      input.dataset.demo = d.id;
      input.dataset.track = t.id;
      input.checked = data.preselect_demo === d.id;
      input.addEventListener('change', () => { renderLists(); draw(); });
      trackBoxes.push({ input, track: t });
      const lost = t.samples.filter((s) => s[2]).length;
      label.append(input, document.createTextNode(` ${t.label} `));
      const meta = document.createElement('span');
      meta.className = 'muted small';
      meta.textContent = `${t.samples.length} samples${lost ? `, ${lost} lost` : ''}`;
      label.appendChild(meta);
      fs.appendChild(label);
    }
    choices.appendChild(fs);
  }
  const chosenTracks = () => trackBoxes.filter((b) => b.input.checked);

  // ---- tools ----
  const hints = {
    path: 'Press and drag on the frame to draw a demonstration; release to finish it.',
    distance_to: 'Click the frame: each cell gets its distance to that point as a feature.',
    rbf: 'Click the frame: a bump of the width below around that point.',
    inside: 'Click the corners of the area; Enter, or a click on the first corner, closes it.',
  };
  const setTool = (tool) => {
    st.tool = st.tool === tool ? null : tool;
    st.corners = [];
    for (const b of document.querySelectorAll('.tool')) b.setAttribute('aria-pressed', String(b.dataset.tool === st.tool));
    $('tool-hint').textContent = st.tool ? hints[st.tool] : 'Choose what a click does. Esc stops; Backspace takes back the last corner of an area.';
    root.dataset.tool = st.tool || '';
    canvas.style.cursor = st.tool ? 'crosshair' : '';
    draw();
  };
  for (const b of document.querySelectorAll('.tool')) b.addEventListener('click', () => setTool(b.dataset.tool));

  const closeArea = () => {
    if (st.corners.length >= 3) {
      st.features.push({ kind: 'inside', polygon: st.corners });
      st.corners = [];
      renderLists();
    }
    draw();
  };

  canvas.addEventListener('pointerdown', (e) => {
    if (!st.tool || e.button !== 0) return;
    const p = pointerFrame(e);
    if (st.tool === 'path') {
      st.drawing = [p];
      canvas.setPointerCapture(e.pointerId);
    } else if (st.tool === 'distance_to') {
      st.features.push({ kind: 'distance_to', point: p });
      renderLists();
    } else if (st.tool === 'rbf') {
      const sigma = num($('rbf-sigma').value);
      if (sigma === null || sigma <= 0) {
        say('fit-status', 'The bump width σ is a number of pixels above 0.', true);
        return;
      }
      st.features.push({ kind: 'rbf', center: p, sigma_px: sigma });
      renderLists();
    } else if (st.tool === 'inside') {
      const first = st.corners[0];
      if (first && st.corners.length >= 3) {
        const [ax, ay] = view.toCanvas(...first);
        const [bx, by] = view.toCanvas(...p);
        if (Math.hypot(ax - bx, ay - by) <= CLOSE_PX) {
          closeArea();
          return;
        }
      }
      st.corners.push(p);
    }
    draw();
  });
  canvas.addEventListener('pointermove', (e) => {
    if (!st.drawing) return;
    const p = pointerFrame(e);
    const last = st.drawing[st.drawing.length - 1];
    // One point per frame pixel moved keeps long strokes small.
    if (Math.hypot(p[0] - last[0], p[1] - last[1]) >= 1 && st.drawing.length < data.limits.max_path_points) {
      st.drawing.push(p);
      draw();
    }
  });
  const endPath = () => {
    if (!st.drawing) return;
    st.paths.push(st.drawing);
    st.drawing = null;
    renderLists();
    draw();
  };
  canvas.addEventListener('pointerup', endPath);
  canvas.addEventListener('pointercancel', endPath);

  document.addEventListener('keydown', (e) => {
    const tag = e.target && e.target.tagName;
    if (tag === 'INPUT' || tag === 'TEXTAREA' || tag === 'SELECT') return;
    if (e.ctrlKey || e.metaKey || e.altKey) return;
    const keys = { p: 'path', d: 'distance_to', b: 'rbf', a: 'inside' };
    const k = e.key.toLowerCase();
    if (keys[k]) setTool(keys[k]);
    else if (e.key === 'Escape') setTool(null);
    else if (e.key === 'Enter' && st.tool === 'inside') closeArea();
    else if (e.key === 'Backspace' && st.corners.length) { st.corners.pop(); draw(); }
    else return;
    e.preventDefault();
  });

  // ---- lists ----
  const featureText = (f) => {
    const p = (q) => `(${q[0].toFixed(1)}, ${q[1].toFixed(1)})`;
    if (f.kind === 'distance_to') return `distance to ${p(f.point)}`;
    if (f.kind === 'rbf') return `bump at ${p(f.center)}, σ ${f.sigma_px} px`;
    if (f.kind === 'inside') return `inside an area of ${f.polygon.length} corners`;
    return 'in a no-go zone';
  };
  function renderLists() {
    const pl = $('path-list');
    pl.replaceChildren();
    const offset = chosenTracks().length;
    st.paths.forEach((path, k) => {
      const li = document.createElement('li');
      li.append(swatch(colourOfDemo(offset + k)), document.createTextNode(` path ${k + 1}: ${path.length} points `));
      const rm = document.createElement('button');
      rm.type = 'button';
      rm.className = 'quiet small';
      rm.textContent = 'Remove';
      rm.addEventListener('click', () => { st.paths.splice(k, 1); renderLists(); draw(); });
      li.appendChild(rm);
      pl.appendChild(li);
    });
    $('path-empty').hidden = st.paths.length > 0;
    const fl = $('feature-list');
    fl.replaceChildren();
    st.features.forEach((f, k) => {
      const li = document.createElement('li');
      li.dataset.kind = f.kind;
      li.append(document.createTextNode(`f${k + 1}: ${featureText(f)} `));
      const rm = document.createElement('button');
      rm.type = 'button';
      rm.className = 'quiet small';
      rm.textContent = 'Remove';
      rm.addEventListener('click', () => { st.features.splice(k, 1); renderLists(); draw(); });
      li.appendChild(rm);
      fl.appendChild(li);
    });
    $('feature-empty').hidden = st.features.length > 0;
    root.dataset.features = String(allFeatures().length);
    root.dataset.demos = String(chosenTracks().length + st.paths.length);
    gridReadout();
  }
  const allFeatures = () => ($('feature-no-go').checked ? [...st.features, { kind: 'no_go' }] : st.features);
  $('feature-no-go').addEventListener('change', renderLists);

  function gridReadout() {
    const c = num($('cell-px').value);
    if (c === null || c < 1 || !Number.isInteger(c)) {
      say('grid-readout', 'The cell side is a whole number of pixels, 1 or more.', true);
      return;
    }
    const cols = Math.ceil(camera.width / c);
    const rows = Math.ceil(camera.height / c);
    const cells = cols * rows;
    const over = cells > data.limits.max_cells;
    let smallest = c;
    while (over && Math.ceil(camera.width / smallest) * Math.ceil(camera.height / smallest) > data.limits.max_cells) smallest += 1;
    say('grid-readout', `${cols} × ${rows} = ${cells.toLocaleString('en')} cells${over ? ` — more than ${data.limits.max_cells.toLocaleString('en')}; take cells of ${smallest} px or more` : ''}`, over);
    draw();
  }
  $('cell-px').addEventListener('input', gridReadout);

  // ---- drawing ----
  drawExtra = () => {
    drawZones(ctx, view, camera);
    chosenTracks().forEach((b, k) => drawDemo(b.track.samples, colourOfDemo(k)));
    const offset = chosenTracks().length;
    st.paths.forEach((p, k) => drawDemo(p.map(([x, y]) => [x, y, false]), colourOfDemo(offset + k)));
    if (st.drawing) drawDemo(st.drawing.map(([x, y]) => [x, y, false]), colourOfDemo(offset + st.paths.length));
    st.features.forEach((f, k) => {
      const label = `f${k + 1}`;
      if (f.kind === 'distance_to') {
        const at = view.toCanvas(...f.point);
        targetMark(ctx, at[0], at[1], LEARNED, false);
        drawLabel(ctx, view, at, label);
      } else if (f.kind === 'rbf') {
        const at = view.toCanvas(...f.center);
        ctx.beginPath();
        ctx.arc(at[0], at[1], f.sigma_px * view.z, 0, 2 * Math.PI);
        cased(ctx, SIZES.thin, LEARNED, SIZES.dash);
        drawMark(ctx, SHAPES.source, at[0], at[1], LEARNED);
        drawLabel(ctx, view, at, label);
      } else if (f.kind === 'inside') {
        polygonPath(ctx, view, f.polygon);
        ctx.fillStyle = css(LEARNED, 48);
        ctx.fill();
        polygonPath(ctx, view, f.polygon);
        cased(ctx, SIZES.line, LEARNED, null);
        drawLabel(ctx, view, view.toCanvas(...f.polygon[0]), label);
      }
    });
    if (st.corners.length) {
      polygonPath(ctx, view, st.corners, false);
      cased(ctx, SIZES.line, LEARNED, SIZES.dash);
      for (const c of st.corners) drawMark(ctx, SHAPES.source, ...view.toCanvas(...c), LEARNED, 0.6);
    }
    // The cell grid, faintly, where cells are large enough to see.
    const c = num($('cell-px').value);
    if (c && c >= 1 && c * view.z >= 6) {
      ctx.save();
      ctx.strokeStyle = 'rgba(255,255,255,0.12)';
      ctx.lineWidth = 1;
      ctx.beginPath();
      const [x0, y0] = view.toCanvas(-0.5, -0.5);
      const [x1, y1] = view.toCanvas(camera.width - 0.5, camera.height - 0.5);
      for (let x = c; x < camera.width; x += c) {
        const cx = view.toCanvas(x - 0.5, 0)[0];
        ctx.moveTo(cx, y0);
        ctx.lineTo(cx, y1);
      }
      for (let y = c; y < camera.height; y += c) {
        const cy = view.toCanvas(0, y - 0.5)[1];
        ctx.moveTo(x0, cy);
        ctx.lineTo(x1, cy);
      }
      ctx.stroke();
      ctx.restore();
    }
  };

  // ---- start ----
  $('fit-form').addEventListener('submit', async (e) => {
    e.preventDefault();
    const cell = num($('cell-px').value);
    const l2 = num($('l2').value);
    const demos = [
      ...chosenTracks().map((b) => ({ demo_id: b.input.dataset.demo, track_id: b.input.dataset.track })),
      ...st.paths.map((p) => ({ path: p })),
    ];
    if (!select.value) return say('fit-status', 'Choose a frame first.', true);
    if (!demos.length) return say('fit-status', 'Choose at least one track or draw a path.', true);
    if (!allFeatures().length) return say('fit-status', 'Add at least one feature.', true);
    if (cell === null || !Number.isInteger(cell) || cell < 1) return say('fit-status', 'The cell side is a whole number of pixels, 1 or more.', true);
    if (l2 === null || l2 < 0) return say('fit-status', 'λ is a number, 0 or more.', true);
    const body = { frame_id: select.value, cell_px: cell, features: allFeatures(), demos, l2, collapse_repeats: $('collapse').checked };
    $('start-fit').disabled = true;
    say('fit-status', 'Starting the fit…');
    const resp = await fetch('/api/reward-fits', {
      method: 'POST',
      headers: { 'Content-Type': 'application/json', 'X-CSRF-Token': csrfToken() },
      body: JSON.stringify(body),
      credentials: 'same-origin',
    });
    $('start-fit').disabled = false;
    if (resp.status === 202) {
      const started = await resp.json();
      root.dataset.fitId = started.id;
      say('fit-status', 'Started. Opening the fit…');
      window.location.assign(`/fits/${encodeURIComponent(started.id)}`);
      return;
    }
    say('fit-status', `Not started: ${await apiErrorText(resp)}`, true);
  });

  renderLists();
  showFrame();
  window.fitPage = { view, state: st, canvas, setTool, renderLists };
}

// =====================================================================================
// One fit
// =====================================================================================

const STOPS = {
  converged: 'converged (the gradient reached the tolerance)',
  iteration_cap: 'stopped at the iteration cap',
  line_search_failed: 'stopped: the line search found no better step',
  no_progress: 'stopped: no further progress',
};

/** The log-likelihood per move at each iteration, `[[iteration, ll, grad], …]`, as an SVG plot. */
function plotTrace(trace, uniform) {
  const svg = $('trace-plot');
  const NS = 'http://www.w3.org/2000/svg';
  const el = (name, attrs, text) => {
    const e = document.createElementNS(NS, name);
    for (const [k, v] of Object.entries(attrs)) e.setAttribute(k, String(v));
    if (text !== undefined) e.textContent = text;
    svg.appendChild(e);
    return e;
  };
  svg.replaceChildren();
  const pts = trace.filter((t) => t[1] !== null && Number.isFinite(t[1]));
  root.dataset.plotted = String(pts.length);
  const [L, R, T, B] = [48, 312, 10, 136];
  el('line', { x1: L, y1: B, x2: R, y2: B, class: 'axis' });
  el('line', { x1: L, y1: T, x2: L, y2: B, class: 'axis' });
  el('text', { x: (L + R) / 2, y: 156, 'text-anchor': 'middle', class: 'tick' }, 'iteration');
  if (!pts.length) {
    el('text', { x: (L + R) / 2, y: (T + B) / 2, 'text-anchor': 'middle', class: 'tick' }, 'waiting for the first iteration');
    return;
  }
  const ys = pts.map((t) => t[1]);
  if (uniform !== null && uniform !== undefined && Number.isFinite(uniform)) ys.push(uniform);
  let lo = Math.min(...ys);
  let hi = Math.max(...ys);
  if (hi - lo < 1e-9) { lo -= 0.5; hi += 0.5; }
  const pad = (hi - lo) * 0.06;
  lo -= pad;
  hi += pad;
  const imax = Math.max(1, pts[pts.length - 1][0]);
  const X = (i) => L + ((R - L) * i) / imax;
  const Y = (v) => B - ((B - T) * (v - lo)) / (hi - lo);
  for (const v of [lo + pad, hi - pad]) {
    el('line', { x1: L - 3, y1: Y(v), x2: L, y2: Y(v), class: 'axis' });
    el('text', { x: L - 5, y: Y(v) + 3, 'text-anchor': 'end', class: 'tick' }, v.toFixed(2));
  }
  for (const i of [0, imax]) el('text', { x: X(i), y: B + 12, 'text-anchor': 'middle', class: 'tick' }, String(i));
  if (uniform !== null && uniform !== undefined && Number.isFinite(uniform)) {
    el('line', { x1: L, y1: Y(uniform), x2: R, y2: Y(uniform), class: 'uniform' });
    el('text', { x: R, y: Y(uniform) - 3, 'text-anchor': 'end', class: 'tick' }, 'random walk');
  }
  el('polyline', { points: pts.map((t) => `${X(t[0]).toFixed(1)},${Y(t[1]).toFixed(1)}`).join(' '), class: 'trace' });
  const last = pts[pts.length - 1];
  el('circle', { cx: X(last[0]), cy: Y(last[1]), r: 2.5, class: 'trace-end' });
}

function showFit() {
  let fit = data.fit;
  const api = `/api/reward-fits/${encodeURIComponent(fit.id)}`;
  let source = null; // the term's point
  const done = () => fit.iterations !== undefined && fit.iterations !== null;

  drawExtra = () => {
    if (source) {
      const at = view.toCanvas(...source);
      sourceMark(ctx, at[0], at[1], LEARNED, true);
      drawLabel(ctx, view, at, $('term-label')?.value.trim() || 'point');
    }
  };

  const figure = (dl, term, text) => {
    const dt = document.createElement('dt');
    dt.textContent = term;
    const dd = document.createElement('dd');
    dd.textContent = text;
    dl.append(dt, dd);
  };

  function renderResult() {
    $('result-panel').hidden = false;
    if ($('term-panel')) $('term-panel').hidden = false;
    const tb = $('weights');
    tb.replaceChildren();
    fit.feature_names.forEach((name, k) => {
      const tr = document.createElement('tr');
      for (const v of [name, fmt(fit.weights[k], 4), fmt(fit.raw_weights[k], 4)]) {
        const td = document.createElement('td');
        td.textContent = v;
        tr.appendChild(td);
      }
      tb.appendChild(tr);
    });
    const dl = $('figures');
    dl.replaceChildren();
    const ll = fit.log_likelihood_per_step;
    const un = fit.uniform_log_likelihood_per_step;
    figure(dl, 'Log-likelihood per move, all demos', `${fmt(ll)} (random walk ${fmt(un)})`);
    if (fit.held_out_log_likelihood_per_step !== undefined) {
      const h = fit.held_out_log_likelihood_per_step;
      const hu = fit.held_out_uniform_log_likelihood_per_step;
      const gain = h - hu;
      figure(dl, 'Held out, each demo left out in turn', `${fmt(h)} (random walk ${fmt(hu)}): ${gain > 0 ? `better than a random walk by ${fmt(gain)} per move` : 'no better than a random walk — the reward does not explain demos it did not see'}`);
      root.dataset.heldOut = String(h);
    } else {
      figure(dl, 'Held out', 'needs 3 or more demonstrations');
    }
    figure(dl, 'Optimiser', `${fit.iterations} iterations, ${STOPS[fit.stop] || fit.stop}; gradient norm ${fit.grad_norm.toExponential(2)}`);
    figure(dl, 'Best cell', `centre (${fit.reward_argmax[0]}, ${fit.reward_argmax[1]}) px`);
    figure(dl, 'Settings', `${fit.cols} × ${fit.rows} cells of ${fit.cell_px} px, λ ${fit.l2}, ${fit.demos} demos, ${fit.collapse_repeats ? 'repeats counted once' : 'every sample a step'}`);
    $('map-npy').href = `${api}/reward-map.npy`;
    $('map-png').href = `${api}/reward-map.png`;
    $('fit-json').href = api;
    plotTrace(fit.trace.map((t) => [t.iteration, t.log_likelihood_per_step, t.grad_norm]), un);
    $('fit-progress').value = 1;
    $('fit-state').value = 'done';
    $('trace-readout').value = `${fit.iterations} iterations · log-likelihood ${fmt(ll)} per move`;
    loadPicture(`${api}/reward-map.png`);
    root.dataset.state = 'succeeded';
  }

  if (done()) {
    renderResult();
  } else {
    loadPicture(`/api/frames/${encodeURIComponent(fit.frame_id)}/image`);
    plotTrace([], null);
    root.dataset.state = 'running';
    const stop = $('cancel-fit');
    if (stop) {
      stop.hidden = false;
      stop.addEventListener('click', () => { stop.disabled = true; cancelOperation(fit.operation_id); });
    }
    followOperation(fit.operation_id, async (op) => {
      $('fit-progress').value = op.progress;
      $('fit-state').value = op.done ? op.state : `${Math.round(op.progress * 100)} %`;
      const d = op.detail;
      if (d && d.trace) {
        plotTrace(d.trace, null);
        $('trace-readout').value = d.stage === 'held_out'
          ? `held-out fold ${d.fold + 1} of ${d.folds} · main fit: ${d.iteration} iterations, log-likelihood ${fmt(d.log_likelihood_per_step)} per move`
          : `iteration ${d.iteration} · log-likelihood ${fmt(d.log_likelihood_per_step)} per move · gradient norm ${d.grad_norm === null ? '—' : Number(d.grad_norm).toExponential(2)}`;
      }
      if (!op.done) return;
      if (stop) stop.hidden = true;
      if (op.state === 'succeeded') {
        const resp = await fetch(api, { credentials: 'same-origin' });
        if (resp.ok) {
          fit = await resp.json();
          renderResult();
          return;
        }
      }
      $('trace-readout').value = op.state === 'cancelled' ? 'stopped' : `failed: ${op.error || 'no reason given'}`;
      root.dataset.state = op.state;
    });
  }

  const form = $('fit-goal');
  if (form) {
    canvas.addEventListener('pointerdown', (e) => {
      if (e.button !== 0) return;
      source = pointerFrame(e).map((v) => Math.round(v * 10) / 10);
      $('term-x').value = String(source[0]);
      $('term-y').value = String(source[1]);
      draw();
    });
    for (const id of ['term-x', 'term-y']) {
      $(id).addEventListener('input', () => {
        const x = num($('term-x').value);
        const y = num($('term-y').value);
        source = x !== null && y !== null ? [x, y] : null;
        draw();
      });
    }
    form.addEventListener('submit', async (e) => {
      e.preventDefault();
      const name = $('term-goal-name').value.trim();
      const x = num($('term-x').value);
      const y = num($('term-y').value);
      const weight = num($('term-weight').value);
      if (!name) return say('term-status', 'Give the goal a name.', true);
      if (x === null || y === null) return say('term-status', 'Click the frame where the point is now, or type x and y.', true);
      if (weight === null || weight < 0) return say('term-status', 'The weight is a number, 0 or more.', true);
      const term = { kind: 'learned', reward_fit_id: fit.id, source: [x, y], weight };
      const label = $('term-label').value.trim();
      if (label) term.label = label;
      $('make-term').disabled = true;
      say('term-status', 'Making the goal…');
      const resp = await fetch('/api/goals', {
        method: 'POST',
        headers: { 'Content-Type': 'application/json', 'X-CSRF-Token': csrfToken() },
        body: JSON.stringify({ name, frame_id: fit.frame_id, terms: [term] }),
        credentials: 'same-origin',
      });
      $('make-term').disabled = false;
      if (resp.status === 201) {
        const rev = await resp.json();
        root.dataset.goalId = rev.goal_id;
        say('term-status', `Goal “${rev.name}” made. Opening it…`);
        window.location.assign(`/goals/${encodeURIComponent(rev.goal_id)}`);
        return;
      }
      say('term-status', `Not made: ${await apiErrorText(resp)}`, true);
    });
  }
  window.fitPage = { view, canvas, fit: () => fit };
}

window.addEventListener('resize', resize);
if (data.mode === 'new') newFit();
else showFit();
resize();
root.dataset.ready = '1';
