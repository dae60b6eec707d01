// The frame ↔ screen mapping, and a goal drawn in goalsmith's marking code, shared by the editor
// and the comparison view.
//
// Convention (docs/conventions.md): the centre of the top-left frame pixel is (0, 0), so a frame of width
// W spans x in [-0.5, W - 0.5]. The frame is drawn with its left edge at canvas CSS x = px and
// each frame pixel z CSS pixels wide, so pixel i covers [px + i·z, px + (i+1)·z] and its centre
// is at px + (i + 0.5)·z. Hence a canvas position cx is the frame point x = (cx − px)/z − 0.5.
//
// Colours, sizes and shapes come from /static/marks.js, which the server writes from the same
// module the overlay PNG is drawn with (server/draw/marks.rs); the drawing rules below follow
// server/draw/overlay.rs step by step, so the editor shows what a download will show. Mark sizes
// are CSS pixels whatever the zoom; goal geometry (targets, outlines, tolerances) is in frame
// pixels and zooms with the frame.
import { KINDS, ZONES, INKS, ALPHAS, SIZES, SHAPES, TRACKS } from '/static/marks.js';

export { KINDS, ZONES, INKS, ALPHAS, SIZES, SHAPES, TRACKS };

export class View {
  constructor(width, height) {
    this.W = width;
    this.H = height;
    this.z = 1;
    this.px = 0;
    this.py = 0;
  }

  toFrame(cx, cy) {
    return [(cx - this.px) / this.z - 0.5, (cy - this.py) / this.z - 0.5];
  }

  toCanvas(x, y) {
    return [(x + 0.5) * this.z + this.px, (y + 0.5) * this.z + this.py];
  }

  /** Zoom to `z`, keeping the frame point under canvas position (cx, cy) where it is. */
  zoomAt(z, cx, cy) {
    const zz = Math.min(64, Math.max(0.05, z));
    const [fx, fy] = this.toFrame(cx, cy);
    this.z = zz;
    this.px = cx - (fx + 0.5) * zz;
    this.py = cy - (fy + 0.5) * zz;
  }

  /** Whole frame visible and centred; whole CSS pixels so 1:1 stays crisp. */
  fit(cw, ch) {
    this.z = Math.min(cw / this.W, ch / this.H) * 0.96;
    this.px = Math.round((cw - this.W * this.z) / 2);
    this.py = Math.round((ch - this.H * this.z) / 2);
  }

  one(cw, ch) {
    this.z = 1;
    this.px = Math.round((cw - this.W) / 2);
    this.py = Math.round((ch - this.H) / 2);
  }

  /** Keeps a point inside the frame: x in [-0.5, W - 0.5], y in [-0.5, H - 0.5]. */
  clamp(x, y) {
    return [Math.min(this.W - 0.5, Math.max(-0.5, x)), Math.min(this.H - 0.5, Math.max(-0.5, y))];
  }
}

/**
 * Sizes a page's frame canvas to its box's width and the frame's aspect (at most 72 % of the
 * window's height), in device pixels for a sharp picture, and fits `view` (the frame's W × H)
 * to it. The caller draws afterwards.
 */
export function fitCanvas(canvas, view) {
  const box = canvas.parentElement.getBoundingClientRect();
  const cw = Math.max(200, Math.floor(box.width));
  const ch = Math.max(150, Math.min(Math.floor(cw * (view.H / view.W)), Math.floor(window.innerHeight * 0.72)));
  const dpr = window.devicePixelRatio || 1;
  canvas.style.width = `${cw}px`;
  canvas.style.height = `${ch}px`;
  canvas.width = Math.round(cw * dpr);
  canvas.height = Math.round(ch * dpr);
  view.fit(cw, ch);
}

/** A marks.js colour [r, g, b, a] (a in 0–255) as CSS, optionally with another opacity. */
export function css(c, alpha) {
  const a = alpha === undefined ? c[3] : alpha;
  return `rgba(${c[0]}, ${c[1]}, ${c[2]}, ${a / 255})`;
}

/** How the pages name the term kinds (the tools' names). */
export const KIND_NAME = { point: 'point to point', region: 'into an area', mask: 'onto paint', rigid: 'whole object', learned: 'learned reward' };

/** The colour of a term kind; one this code does not know gets the learned terms' slate. */
export function kindColour(kind) {
  return KINDS[kind] || KINDS.learned;
}

// ---------- strokes and marks, in canvas CSS pixels ----------

function stroke(ctx, width, colour, dash) {
  ctx.lineWidth = width;
  ctx.strokeStyle = css(colour);
  ctx.lineCap = 'round';
  ctx.lineJoin = 'round';
  ctx.setLineDash(dash || []);
  ctx.stroke();
}

const dashOf = (unit) => SIZES.dash.map((d) => d * unit);

/** Strokes the current path over its dark casing (the path is kept for both passes). */
export function cased(ctx, width, colour, dash, unit = 1) {
  stroke(ctx, width + 2 * SIZES.casing * unit, INKS.casing, dash);
  stroke(ctx, width, colour, dash);
}

function outlinePath(ctx, outline, x, y, unit, angle) {
  ctx.beginPath();
  if (outline.circle) {
    ctx.arc(x, y, outline.circle.r * unit, 0, Math.PI * 2);
    return;
  }
  const { points, closed } = outline.lines;
  const [s, c] = [Math.sin(angle), Math.cos(angle)];
  points.forEach(([px, py], k) => {
    const qx = x + unit * (c * px - s * py);
    const qy = y + unit * (s * px + c * py);
    if (k === 0) ctx.moveTo(qx, qy);
    else ctx.lineTo(qx, qy);
  });
  if (closed) ctx.closePath();
}

/** The casing pass of a mark: each part's outline stroked 2 × casing wider than the part. */
export function markCasing(ctx, parts, x, y, unit = 1, angle = 0) {
  for (const p of parts) {
    outlinePath(ctx, p.outline, x, y, unit, angle);
    stroke(ctx, ((p.ink === 'stroke' ? p.width : 0) + 2 * SIZES.casing) * unit, INKS.casing);
  }
}

/** The colour pass of a mark. */
export function markInk(ctx, parts, x, y, colour, unit = 1, angle = 0) {
  for (const p of parts) {
    outlinePath(ctx, p.outline, x, y, unit, angle);
    if (p.ink === 'fill') {
      ctx.fillStyle = css(colour);
      ctx.fill();
    } else {
      stroke(ctx, p.width * unit, colour);
    }
  }
}

/** A mark (SHAPES.source, .target, .fitted) at canvas point (x, y): casings, then colour. */
export function drawMark(ctx, parts, x, y, colour, unit = 1) {
  ctx.save();
  markCasing(ctx, parts, x, y, unit);
  markInk(ctx, parts, x, y, colour, unit);
  ctx.restore();
}

export function sourceMark(ctx, x, y, colour, selected) {
  drawMark(ctx, SHAPES.source, x, y, selected ? INKS.selected : colour, selected ? 1.3 : 1);
}

export function targetMark(ctx, x, y, colour, selected) {
  drawMark(ctx, SHAPES.target, x, y, selected ? INKS.selected : colour, selected ? 1.3 : 1);
}

/**
 * The arrow from a source at a to b (a target mark when toMark, else a bare point), in canvas
 * pixels: it starts source_radius + arrow_gap from a, its tip stops target_radius + arrow_gap
 * short of a target mark, and there is none when less than a head's length would be left.
 */
export function arrowGeometry(a, b, toMark, unit = 1) {
  const dx = b[0] - a[0];
  const dy = b[1] - a[1];
  const len = Math.hypot(dx, dy);
  const gapA = (SIZES.source_radius + SIZES.arrow_gap) * unit;
  const gapB = toMark ? (SIZES.target_radius + SIZES.arrow_gap) * unit : 0;
  const head = SIZES.head_length * unit;
  if (!(len > gapA + gapB + head)) return null;
  const [ux, uy] = [dx / len, dy / len];
  const tip = [b[0] - ux * gapB, b[1] - uy * gapB];
  return {
    from: [a[0] + ux * gapA, a[1] + uy * gapA],
    base: [tip[0] - ux * head, tip[1] - uy * head],
    tip,
    angle: Math.atan2(dy, dx),
  };
}

/** Draws an arrow: shaft and head share one casing pass, then one colour pass. */
export function drawArrow(ctx, a, b, colour, { dashed = false, toMark = true, unit = 1 } = {}) {
  const g = arrowGeometry(a, b, toMark, unit);
  if (!g) return;
  const width = SIZES.line * unit;
  const dash = dashed ? dashOf(unit) : null;
  const shaft = () => {
    ctx.beginPath();
    ctx.moveTo(g.from[0], g.from[1]);
    ctx.lineTo(g.base[0], g.base[1]);
  };
  ctx.save();
  shaft();
  stroke(ctx, width + 2 * SIZES.casing * unit, INKS.casing, dash);
  markCasing(ctx, SHAPES.arrow_head, g.tip[0], g.tip[1], unit, g.angle);
  shaft();
  stroke(ctx, width, colour, dash);
  markInk(ctx, SHAPES.arrow_head, g.tip[0], g.tip[1], colour, unit, g.angle);
  ctx.restore();
}

export function polygonPath(ctx, view, pts, closed = true) {
  ctx.beginPath();
  pts.forEach(([x, y], k) => {
    const [cx, cy] = view.toCanvas(x, y);
    if (k === 0) ctx.moveTo(cx, cy);
    else ctx.lineTo(cx, cy);
  });
  if (closed) ctx.closePath();
}

// ---------- labels ----------

/** Whether the segment a–b meets the box min..max (Liang–Barsky clipping). */
function segmentMeetsBox(a, b, min, max) {
  let t0 = 0;
  let t1 = 1;
  const d = [b[0] - a[0], b[1] - a[1]];
  for (let k = 0; k < 2; k++) {
    for (const [p, q] of [[-d[k], a[k] - min[k]], [d[k], max[k] - a[k]]]) {
      if (p === 0) {
        if (q < 0) return false;
      } else if (p < 0) {
        t0 = Math.max(t0, q / p);
      } else {
        t1 = Math.min(t1, q / p);
      }
    }
  }
  return t0 <= t1;
}

/**
 * What labels should not cover, in canvas pixels: marks (discs), arrows (segments with a half
 * width) and the labels already placed (boxes). The same rule as server/draw/place.rs.
 */
export class Obstacles {
  constructor() {
    this.discs = [];
    this.segments = [];
    this.boxes = [];
  }

  disc(c, r) {
    this.discs.push([c, r]);
  }

  segment(a, b, hw) {
    this.segments.push([a, b, hw]);
  }

  box(min, max) {
    this.boxes.push([min, max]);
  }

  /**
   * How bad a label box at min..max is, 0 when free: for each mark covered, 4 times how far
   * into it the box reaches (as a share of its radius); 2 for each earlier label overlapped;
   * 1 for each arrow crossed.
   */
  cost(min, max) {
    let marks = 0;
    for (const [c, r] of this.discs) {
      const dx = c[0] - Math.min(max[0], Math.max(min[0], c[0]));
      const dy = c[1] - Math.min(max[1], Math.max(min[1], c[1]));
      marks += Math.max(0, (r - Math.hypot(dx, dy)) / r);
    }
    const labels = this.boxes.filter(([lo, hi]) => lo[0] < max[0] && min[0] < hi[0] && lo[1] < max[1] && min[1] < hi[1]).length;
    const arrows = this.segments.filter(([a, b, hw]) => segmentMeetsBox(a, b, [min[0] - hw, min[1] - hw], [max[0] + hw, max[1] + hw])).length;
    return 4 * marks + 2 * labels + arrows;
  }
}

/**
 * A label on its dark box beside the mark at canvas point `at`, or centred on it, as the
 * overlay places it (server/draw/place.rs): the first choice is the corner facing away from
 * `away` (where the mark's arrow heads; up and to the right without one), then the other corner
 * on the same level, the one on the same side, the opposite one; of those that fit in the
 * frame, the one of least cost against `obstacles`; none fitting, the first choice moved inside
 * the frame. The box placed joins `obstacles`. Returns the box [x0, y0, x1, y1].
 */
export function drawLabel(ctx, view, at, text, { centred = false, away = null, obstacles = null, unit = 1 } = {}) {
  if (!text) return null;
  ctx.save();
  ctx.font = `${SIZES.label_size * unit}px "DejaVu Sans", sans-serif`;
  ctx.textBaseline = 'alphabetic';
  const m = ctx.measureText(text);
  const asc = m.fontBoundingBoxAscent;
  const desc = m.fontBoundingBoxDescent;
  const pad = SIZES.label_pad * unit;
  const bw = Math.ceil(m.width + 2 * pad);
  const bh = Math.ceil(asc + desc + 2 * pad);
  const off = SIZES.label_offset * unit;
  const [fx0, fy0] = view.toCanvas(-0.5, -0.5);
  const [fx1, fy1] = view.toCanvas(view.W - 0.5, view.H - 0.5);
  const fits = ([x, y]) => x >= fx0 && x + bw <= fx1 && y >= fy0 && y + bh <= fy1;
  let [left, top] = [at[0] - bw / 2, at[1] - bh / 2];
  if (!centred) {
    const right = away ? away[0] <= at[0] : true;
    const above = away ? away[1] >= at[1] : true;
    const corner = (r, a) => [r ? at[0] + off : at[0] - off - bw, a ? at[1] - off - bh : at[1] + off];
    const candidates = [corner(right, above), corner(!right, above), corner(right, !above), corner(!right, !above)];
    let best = null;
    let bestCost = Infinity;
    for (const c of candidates) {
      if (!fits(c)) continue;
      const cost = obstacles ? obstacles.cost(c, [c[0] + bw, c[1] + bh]) : 0;
      if (cost < bestCost) {
        best = c;
        bestCost = cost;
      }
    }
    [left, top] = best || candidates[0];
  }
  left = fx1 - bw < fx0 ? fx0 : Math.max(fx0, Math.min(fx1 - bw, left));
  top = fy1 - bh < fy0 ? fy0 : Math.max(fy0, Math.min(fy1 - bh, top));
  ctx.fillStyle = css(INKS.label_box);
  ctx.fillRect(left, top, bw, bh);
  ctx.fillStyle = css(INKS.label);
  ctx.fillText(text, left + pad, top + pad + asc);
  ctx.restore();
  if (obstacles) obstacles.box([left, top], [left + bw, top + bh]);
  return [left, top, left + bw, top + bh];
}

// ---------- zones ----------

/** The camera's safe zone (a dashed mint outline) and no-go zones (tinted, hatched, outlined). */
export function drawZones(ctx, view, camera) {
  if (!camera) return;
  ctx.save();
  if (camera.safe_zone) {
    polygonPath(ctx, view, camera.safe_zone);
    cased(ctx, SIZES.line, ZONES.safe, dashOf(1));
  }
  for (const zone of camera.no_go_zones || []) {
    polygonPath(ctx, view, zone);
    ctx.fillStyle = css(ZONES.no_go, ALPHAS.no_go);
    ctx.fill();
    hatch(ctx, view, zone);
    polygonPath(ctx, view, zone);
    cased(ctx, SIZES.line, ZONES.no_go, null);
  }
  ctx.restore();
}

/** Lines x + y = k · hatch_spacing (canvas pixels), rising to the right, kept inside the zone. */
function hatch(ctx, view, zone) {
  const pts = zone.map(([x, y]) => view.toCanvas(x, y));
  const xs = pts.map((p) => p[0]);
  const ys = pts.map((p) => p[1]);
  const [x0, x1, y0, y1] = [Math.min(...xs), Math.max(...xs), Math.min(...ys), Math.max(...ys)];
  const sp = SIZES.hatch_spacing;
  ctx.save();
  polygonPath(ctx, view, zone);
  ctx.clip();
  ctx.beginPath();
  for (let k = Math.floor((x0 + y0) / sp); k <= Math.ceil((x1 + y1) / sp); k++) {
    const s = k * sp;
    ctx.moveTo(s - y1, y1);
    ctx.lineTo(s - y1 + (y1 - y0), y0);
  }
  stroke(ctx, SIZES.thin, ZONES.no_go.slice(0, 3).concat([ALPHAS.hatch]));
  ctx.restore();
}

/** Labels the no-go zones "no-go 1", "no-go 2", … at their centres, as the overlay does. */
export function drawZoneLabels(ctx, view, camera, obstacles = null) {
  if (!camera) return;
  (camera.no_go_zones || []).forEach((zone, k) => {
    const c = zone.length >= 3 && centroid(zone);
    if (c) drawLabel(ctx, view, view.toCanvas(c[0], c[1]), `no-go ${k + 1}`, { centred: true, obstacles });
  });
}

// ---------- painted areas ----------

/**
 * Tints painted pixels (frame-sized `paint` canvas, white where painted) into `tint`: the kind
 * colour at the area opacity inside, in full on the edge (a painted pixel with an unpainted or
 * outside 4-neighbour). Only the pixels in [x0, x1) × [y0, y1) (frame pixels) are redone.
 */
export function retint(paint, tint, colour, x0 = 0, y0 = 0, x1 = paint.width, y1 = paint.height) {
  const W = paint.width;
  const H = paint.height;
  const ax = Math.max(0, Math.floor(x0) - 1);
  const ay = Math.max(0, Math.floor(y0) - 1);
  const bx = Math.min(W, Math.ceil(x1) + 1);
  const by = Math.min(H, Math.ceil(y1) + 1);
  if (bx <= ax || by <= ay) return;
  // One pixel more on each side to tell edges; painted where luma ≥ 128 and alpha ≥ 128.
  const sx = Math.max(0, ax - 1);
  const sy = Math.max(0, ay - 1);
  const sw = Math.min(W, bx + 1) - sx;
  const sh = Math.min(H, by + 1) - sy;
  const src = paint.getContext('2d').getImageData(sx, sy, sw, sh).data;
  const painted = (i, j) => {
    if (i < 0 || j < 0 || i >= W || j >= H) return false;
    const k = ((j - sy) * sw + (i - sx)) * 4;
    const luma = 0.299 * src[k] + 0.587 * src[k + 1] + 0.114 * src[k + 2];
    return luma >= 128 && src[k + 3] >= 128;
  };
  const tctx = tint.getContext('2d');
  const out = tctx.createImageData(bx - ax, by - ay);
  for (let j = ay; j < by; j++) {
    for (let i = ax; i < bx; i++) {
      if (!painted(i, j)) continue;
      const edge = !painted(i - 1, j) || !painted(i + 1, j) || !painted(i, j - 1) || !painted(i, j + 1);
      const k = ((j - ay) * (bx - ax) + (i - ax)) * 4;
      out.data[k] = colour[0];
      out.data[k + 1] = colour[1];
      out.data[k + 2] = colour[2];
      out.data[k + 3] = edge ? 255 : ALPHAS.area;
    }
  }
  tctx.putImageData(out, ax, ay);
}

/** Whether the painted area covers frame point (x, y) (the pixel whose square holds it). */
export function paintedAt(paint, x, y) {
  const i = Math.floor(x + 0.5);
  const j = Math.floor(y + 0.5);
  if (i < 0 || j < 0 || i >= paint.width || j >= paint.height) return false;
  const d = paint.getContext('2d').getImageData(i, j, 1, 1).data;
  return 0.299 * d[0] + 0.587 * d[1] + 0.114 * d[2] >= 128 && d[3] >= 128;
}

/** The mean of the painted pixels' centres, in frame coordinates; null when none is painted. */
export function paintedCentroid(paint) {
  const d = paint.getContext('2d').getImageData(0, 0, paint.width, paint.height).data;
  let sx = 0;
  let sy = 0;
  let n = 0;
  for (let k = 0, p = 0; k < d.length; k += 4, p++) {
    if (0.299 * d[k] + 0.587 * d[k + 1] + 0.114 * d[k + 2] >= 128 && d[k + 3] >= 128) {
      sx += p % paint.width;
      sy += Math.floor(p / paint.width);
      n++;
    }
  }
  return n ? [sx / n, sy / n] : null;
}

// ---------- geometry helpers ----------

/** The area centroid of a polygon; the vertex mean when it encloses (almost) no area. */
export function centroid(pts) {
  if (!pts || !pts.length) return null;
  const n = pts.length;
  const m = [pts.reduce((s, p) => s + p[0], 0) / n, pts.reduce((s, p) => s + p[1], 0) / n];
  let a = 0;
  let cx = 0;
  let cy = 0;
  for (let k = 0; k < n; k++) {
    const [px, py] = [pts[k][0] - m[0], pts[k][1] - m[1]];
    const [qx, qy] = [pts[(k + 1) % n][0] - m[0], pts[(k + 1) % n][1] - m[1]];
    const cross = px * qy - qx * py;
    a += cross;
    cx += (px + qx) * cross;
    cy += (py + qy) * cross;
  }
  if (Math.abs(a) < 1e-9) return m;
  return [m[0] + cx / (3 * a), m[1] + cy / (3 * a)];
}

export function pointInPolygon(pts, p) {
  let inside = false;
  for (let k = 0; k < pts.length; k++) {
    const a = pts[k];
    const b = pts[(k + 1) % pts.length];
    if ((a[1] <= p[1]) !== (b[1] <= p[1])) {
      const x = a[0] + ((p[1] - a[1]) * (b[0] - a[0])) / (b[1] - a[1]);
      if (x < p[0]) inside = !inside;
    }
  }
  return inside;
}

/** Where the fitted transform in `derived.rigid` puts the sources of rigid term i, or null. */
export function fittedSources(derived, i, sources) {
  const fit = derived && (derived.rigid || []).find((r) => r.term === i);
  if (!fit) return null;
  const [[a, b], [c, d]] = fit.rotation;
  return sources.map(([x, y]) => [
    fit.scale * (a * x + b * y) + fit.translation[0],
    fit.scale * (c * x + d * y) + fit.translation[1],
  ]);
}

export function termLabel(t, i) {
  const l = (t.label || '').trim();
  return l ? `${i + 1} ${l}` : `${i + 1}`;
}

// ---------- a whole goal, in the overlay's layers ----------

/**
 * Draws a goal's terms as the overlay does, layer by layer over all terms: fills (area tints,
 * painted areas, tolerance tints), lines (outlines, object outlines, tolerance rings, arrows),
 * marks (fitted squares, targets, sources), labels.
 *
 * opts: dashed (every line dashed, for an older revision), alpha (0–255 for the whole goal),
 * fitted(i, term) → fitted sources or null, mask(i, term) → a painted area's { tint (a
 * frame-sized canvas, see retint), centre (frame point or null), covers(x, y) } or null,
 * selected { term, handle } (that mark drawn
 * in the selection colour, larger), labels (default true), camera (its no-go zones are
 * labelled before the terms, as in the overlay).
 */
export function drawGoal(ctx, view, terms, opts = {}) {
  const list = terms || [];
  const dash = opts.dashed ? dashOf(1) : null;
  const sel = opts.selected;
  const isSel = (i, h) => sel && sel.term === i && sel.handle && sel.handle.length === h.length && sel.handle[0] === h[0] && sel.handle[1] === h[1];
  const at = (p) => view.toCanvas(p[0], p[1]);
  const z = view.z;
  ctx.save();
  if (opts.alpha !== undefined) ctx.globalAlpha = opts.alpha / 255;
  // Fills.
  list.forEach((t, i) => {
    const colour = kindColour(t.kind);
    const tol = t.tolerance_px ?? 5;
    const disc = (p) => {
      if (!(tol > 0)) return;
      const [x, y] = at(p);
      ctx.beginPath();
      ctx.arc(x, y, tol * z, 0, Math.PI * 2);
      ctx.fillStyle = css(colour, ALPHAS.tolerance);
      ctx.fill();
    };
    if (t.kind === 'point' && t.target) disc(t.target);
    if (t.kind === 'rigid') (t.targets || []).forEach(disc);
    if (t.kind === 'region' && t.polygon && t.polygon.length >= 3) {
      if (tol > 0) {
        // The band outside the outline within the tolerance.
        ctx.save();
        ctx.beginPath();
        ctx.rect(-1e5, -1e5, 2e5, 2e5);
        t.polygon.forEach(([x, y], k) => {
          const [cx, cy] = view.toCanvas(x, y);
          if (k === 0) ctx.moveTo(cx, cy);
          else ctx.lineTo(cx, cy);
        });
        ctx.closePath();
        ctx.clip('evenodd');
        polygonPath(ctx, view, t.polygon);
        stroke(ctx, 2 * tol * z, colour.slice(0, 3).concat([ALPHAS.tolerance]));
        ctx.restore();
      }
      polygonPath(ctx, view, t.polygon);
      ctx.fillStyle = css(colour, ALPHAS.area);
      ctx.fill();
    }
    const m = t.kind === 'mask' && opts.mask ? opts.mask(i, t) : null;
    if (m && m.tint) {
      ctx.save();
      ctx.imageSmoothingEnabled = false;
      ctx.drawImage(m.tint, view.px, view.py, view.W * z, view.H * z);
      ctx.restore();
    }
  });
  // Lines.
  list.forEach((t, i) => {
    const colour = kindColour(t.kind);
    const tol = t.tolerance_px ?? 5;
    const ring = (p) => {
      if (!(tol > 0)) return;
      const [x, y] = at(p);
      ctx.beginPath();
      ctx.arc(x, y, tol * z, 0, Math.PI * 2);
      cased(ctx, SIZES.thin, colour, dashOf(1));
    };
    if (t.kind === 'point' && t.source && t.target) {
      ring(t.target);
      drawArrow(ctx, at(t.source), at(t.target), colour, { dashed: !!dash });
    }
    if (t.kind === 'region' && t.polygon && t.polygon.length >= 3) {
      polygonPath(ctx, view, t.polygon);
      cased(ctx, SIZES.line, colour, dash);
      const c = centroid(t.polygon);
      if (t.source && c && !pointInPolygon(t.polygon, t.source)) drawArrow(ctx, at(t.source), at(c), colour, { dashed: true, toMark: false });
    }
    const m = t.kind === 'mask' && t.source && opts.mask ? opts.mask(i, t) : null;
    if (m && m.centre && !m.covers(t.source[0], t.source[1])) {
      drawArrow(ctx, at(t.source), at(m.centre), colour, { dashed: true, toMark: false });
    }
    if (t.kind === 'rigid' && t.sources && t.targets) {
      const closed = t.sources.length > 2;
      for (const pts of [t.sources, t.targets]) {
        if (pts.length < 2) continue;
        polygonPath(ctx, view, pts, closed);
        cased(ctx, SIZES.thin, colour, dashOf(1));
      }
      t.targets.forEach(ring);
      t.sources.forEach((s, k) => {
        if (t.targets[k]) drawArrow(ctx, at(s), at(t.targets[k]), colour, { dashed: !!dash });
      });
    }
  });
  // Marks.
  list.forEach((t, i) => {
    const colour = kindColour(t.kind);
    if (t.kind === 'rigid' && t.sources && t.targets) {
      // Fitted squares over the targets: a good fit puts them inside the rings.
      t.targets.forEach((g, k) => targetMark(ctx, ...at(g), colour, isSel(i, ['targets', k])));
      const fitted = opts.fitted ? opts.fitted(i, t) : null;
      for (const f of fitted || []) drawMark(ctx, SHAPES.fitted, ...at(f), colour);
      t.sources.forEach((s, k) => sourceMark(ctx, ...at(s), colour, isSel(i, ['sources', k])));
      return;
    }
    if (t.target) targetMark(ctx, ...at(t.target), colour, isSel(i, ['target']));
    if (t.source) sourceMark(ctx, ...at(t.source), colour, isSel(i, ['source']));
  });
  // Labels: every mark and drawn arrow is an obstacle, then each label as it is placed.
  if (opts.labels !== false) {
    const obstacles = new Obstacles();
    const rs = SIZES.source_radius + SIZES.casing;
    const rt = SIZES.target_radius + SIZES.casing;
    const rf = SIZES.fitted_half * Math.SQRT2 + SIZES.casing;
    const hl = SIZES.line / 2 + SIZES.casing;
    const arrowObstacle = (a, b, toMark) => {
      const g = arrowGeometry(at(a), at(b), toMark);
      if (g) obstacles.segment(g.from, g.tip, hl);
    };
    const anchors = list.map((t, i) => {
      if (t.kind === 'rigid') {
        const [ss, ts] = [t.sources || [], t.targets || []];
        if (!ss.length || ss.length !== ts.length) return null;
        ss.forEach((s, k) => {
          obstacles.disc(at(s), rs);
          obstacles.disc(at(ts[k]), rt);
          arrowObstacle(s, ts[k], true);
        });
        for (const f of (opts.fitted ? opts.fitted(i, t) : null) || []) obstacles.disc(at(f), rf);
        return [ss[0], ts[0]];
      }
      if (!t.source) return null;
      if (t.kind === 'region' && (!t.polygon || t.polygon.length < 3)) return null;
      obstacles.disc(at(t.source), rs);
      let away = null;
      if (t.kind === 'point' && t.target) {
        obstacles.disc(at(t.target), rt);
        away = t.target;
        arrowObstacle(t.source, t.target, true);
      }
      if (t.kind === 'region' && !pointInPolygon(t.polygon, t.source)) away = centroid(t.polygon);
      if (t.kind === 'mask' && opts.mask) {
        const m = opts.mask(i, t);
        if (m && m.centre && !m.covers(t.source[0], t.source[1])) away = m.centre;
      }
      if (away && (t.kind === 'region' || t.kind === 'mask')) arrowObstacle(t.source, away, false);
      return [t.source, away];
    });
    if (opts.camera) drawZoneLabels(ctx, view, opts.camera, obstacles);
    anchors.forEach((a, i) => {
      if (a) drawLabel(ctx, view, at(a[0]), termLabel(list[i], i), { away: a[1] && at(a[1]), obstacles });
    });
  }
  ctx.restore();
}
