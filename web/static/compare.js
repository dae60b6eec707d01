// The comparison view: both revisions on the frame in the marking code, the older one dashed and
// faded, and a legend whose swatches are drawn by the same functions with the same constants.
import {
  View, KIND_NAME, SHAPES, SIZES, ZONES, ALPHAS, css, kindColour, cased, drawArrow, drawGoal,
  drawMark, drawZones, fittedSources, paintedAt, paintedCentroid, retint,
} from './view.js';

/** Decodes the painted areas of a revision's mask terms: term index → what drawGoal needs. */
async function masksOf(doc, w, h) {
  const out = new Map();
  const jobs = (doc.terms || []).map(async (t, i) => {
    if (t.kind !== 'mask' || !t.mask_png_base64) return;
    const img = new Image();
    img.src = `data:image/png;base64,${t.mask_png_base64}`;
    await img.decode();
    const paint = document.createElement('canvas');
    paint.width = w;
    paint.height = h;
    paint.getContext('2d', { willReadFrequently: true }).drawImage(img, 0, 0);
    const tint = document.createElement('canvas');
    tint.width = w;
    tint.height = h;
    retint(paint, tint, kindColour('mask'));
    out.set(i, { tint, centre: paintedCentroid(paint), covers: (x, y) => paintedAt(paint, x, y) });
  });
  await Promise.all(jobs);
  return out;
}

function goalOptions(doc, masks, extra) {
  return {
    fitted: (i, t) => fittedSources(doc.derived, i, t.sources),
    mask: (i) => masks.get(i) || null,
    ...extra,
  };
}

/** A small canvas, `w` × `h` CSS pixels, ready to draw on in CSS pixels. */
function swatchCanvas(canvas, w, h) {
  const dpr = window.devicePixelRatio || 1;
  canvas.width = Math.round(w * dpr);
  canvas.height = Math.round(h * dpr);
  canvas.style.width = `${w}px`;
  canvas.style.height = `${h}px`;
  const ctx = canvas.getContext('2d');
  ctx.setTransform(dpr, 0, 0, dpr, 0, 0);
  return ctx;
}

/**
 * Swatch painters: each draws on a 52 × 24 canvas (the revisions' on 76 × 24) what the frame
 * shows for that entry, with the same functions and constants.
 */
const SWATCH = {
  older: (ctx, colour) => {
    ctx.globalAlpha = ALPHAS.older / 255;
    SWATCH.newer(ctx, colour, true);
  },
  newer: (ctx, colour, dashed = false) => {
    drawArrow(ctx, [8, 12], [66, 12], colour, { dashed });
    drawMark(ctx, SHAPES.target, 66, 12, colour);
    drawMark(ctx, SHAPES.source, 8, 12, colour);
  },
  kind: (ctx, colour) => drawMark(ctx, SHAPES.source, 26, 12, colour),
  source: (ctx, colour) => drawMark(ctx, SHAPES.source, 26, 12, colour),
  target: (ctx, colour) => drawMark(ctx, SHAPES.target, 26, 12, colour),
  fitted: (ctx, colour) => drawMark(ctx, SHAPES.fitted, 26, 12, colour),
  tolerance: (ctx, colour) => {
    ctx.beginPath();
    ctx.arc(26, 12, 10, 0, Math.PI * 2);
    ctx.fillStyle = css(colour, ALPHAS.tolerance);
    ctx.fill();
    cased(ctx, SIZES.thin, colour, SIZES.dash);
    drawMark(ctx, SHAPES.target, 26, 12, colour);
  },
  area: (ctx, colour) => {
    ctx.beginPath();
    ctx.rect(10, 4, 32, 16);
    ctx.fillStyle = css(colour, ALPHAS.area);
    ctx.fill();
    cased(ctx, SIZES.line, colour, null);
  },
  painted: (ctx, colour) => {
    ctx.beginPath();
    ctx.ellipse(26, 12, 16, 8, 0, 0, Math.PI * 2);
    ctx.fillStyle = css(colour, ALPHAS.area);
    ctx.fill();
    ctx.lineWidth = 1;
    ctx.strokeStyle = css(colour);
    ctx.stroke();
  },
  safe: (ctx) => {
    ctx.beginPath();
    ctx.moveTo(4, 12);
    ctx.lineTo(48, 12);
    cased(ctx, SIZES.line, ZONES.safe, SIZES.dash);
  },
  no_go: (ctx) => {
    const view = new View(44, 16);
    view.px = 4 - 0.5;
    view.py = 4 - 0.5;
    drawZones(ctx, view, { no_go_zones: [[[0, 0], [43, 0], [43, 15], [0, 15]]] });
  },
};

function drawSwatch(canvas, what, colour) {
  const ctx = swatchCanvas(canvas, what === 'older' || what === 'newer' ? 76 : 52, 24);
  ctx.save();
  SWATCH[what](ctx, colour);
  ctx.restore();
}

/** The legend: one line per kind of mark the frame shows, its swatch drawn like the frame. */
function legend(list, data) {
  const terms = [...(data.a.terms || []), ...(data.b.terms || [])];
  const kinds = Object.keys(KIND_NAME).filter((k) => terms.some((t) => t.kind === k));
  const first = kindColour(kinds[0] || 'point');
  const neutral = kindColour('learned');
  const has = (k) => kinds.includes(k);
  const rows = [
    ['older', first, `revision ${data.a.revision}: dashed and faded`],
    ['newer', first, `revision ${data.b.revision}: solid`],
    ...kinds.map((k) => ['kind', kindColour(k), `colour: ${KIND_NAME[k]}`]),
    ['source', neutral, 'disc: where a thing is now (arrows run to its target)'],
  ];
  if (terms.some((t) => t.target || t.targets)) {
    rows.push(['target', neutral, 'ring with a cross: where it must go']);
    rows.push(['tolerance', neutral, 'tinted, dashed ring: within tolerance of the target']);
  }
  if (has('rigid')) rows.push(['fitted', kindColour('rigid'), 'hollow square: where the fitted object move puts a point']);
  if (has('region')) rows.push(['area', kindColour('region'), 'outlined area (with its tolerance band outside)']);
  if (has('mask')) rows.push(['painted', kindColour('mask'), 'painted area']);
  if (data.camera && data.camera.safe_zone) rows.push(['safe', ZONES.safe, 'safe zone: targets stay inside']);
  if (data.camera && (data.camera.no_go_zones || []).length) rows.push(['no_go', ZONES.no_go, 'no-go zone: no target inside']);
  list.replaceChildren();
  for (const [what, colour, text] of rows) {
    const li = document.createElement('li');
    li.dataset.swatch = what;
    const c = document.createElement('canvas');
    c.className = 'swatch';
    c.setAttribute('aria-hidden', 'true');
    drawSwatch(c, what, colour);
    li.append(c, document.createTextNode(` ${text}`));
    list.appendChild(li);
  }
  return kinds;
}

async function init() {
  const canvas = document.getElementById('compare-canvas');
  if (!canvas) return;
  const data = JSON.parse(canvas.dataset.compare);
  const { width, height } = data.frame;
  const img = new Image();
  img.src = `/api/frames/${data.frame.id}/image`;
  const [ma, mb] = await Promise.all([masksOf(data.a, width, height), masksOf(data.b, width, height), img.decode()]);
  const kinds = legend(document.getElementById('compare-legend'), data);
  const first = kindColour(kinds[0] || 'point');
  for (const s of document.querySelectorAll('canvas[data-swatch]')) drawSwatch(s, s.dataset.swatch, first);
  const cssW = canvas.clientWidth || 600;
  const view = new View(width, height);
  const cssH = Math.round((cssW * height) / width);
  const dpr = window.devicePixelRatio || 1;
  canvas.width = Math.round(cssW * dpr);
  canvas.height = Math.round(cssH * dpr);
  canvas.style.height = `${cssH}px`;
  view.z = cssW / width;
  const ctx = canvas.getContext('2d');
  ctx.setTransform(dpr, 0, 0, dpr, 0, 0);
  ctx.drawImage(img, 0, 0, cssW, cssH);
  drawZones(ctx, view, data.camera);
  drawGoal(ctx, view, data.a.terms, goalOptions(data.a, ma, { dashed: true, alpha: ALPHAS.older, labels: false }));
  drawGoal(ctx, view, data.b.terms, goalOptions(data.b, mb, { camera: data.camera }));
  canvas.dataset.ready = '1';
}

if (document.readyState === 'loading') document.addEventListener('DOMContentLoaded', init);
else init();
