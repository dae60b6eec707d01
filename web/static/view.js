// The frame ↔ screen mapping shared by the editor and the comparison view.
//
// Convention (docs/conventions.md): the centre of the top-left frame pixel is (0, 0), so a frame of width
// W spans x in [-0.5, W - 0.5]. The frame is drawn with its left edge at canvas CSS x = px and
// each frame pixel z CSS pixels wide, so pixel i covers [px + i·z, px + (i+1)·z] and its centre
// is at px + (i + 0.5)·z. Hence a canvas position cx is the frame point x = (cx − px)/z − 0.5.

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

/** Colours of the term kinds on the canvas (the same hues mark the term list). */
export const KIND_COLOUR = {
  point: '#f2b01e',
  region: '#2bb3b9',
  mask: '#a277e0',
  rigid: '#f07a3c',
  learned: '#9aa8b0',
};

export function arrow(ctx, x0, y0, x1, y1, colour, width, dashed) {
  const dx = x1 - x0;
  const dy = y1 - y0;
  const len = Math.hypot(dx, dy);
  ctx.save();
  ctx.lineCap = 'round';
  if (dashed) ctx.setLineDash([6, 5]);
  // A dark casing keeps the arrow visible on bright and dark frames alike.
  for (const [c, w] of [['rgba(10,14,16,.85)', width + 3], [colour, width]]) {
    ctx.strokeStyle = c;
    ctx.lineWidth = w;
    ctx.beginPath();
    ctx.moveTo(x0, y0);
    ctx.lineTo(x1, y1);
    ctx.stroke();
  }
  if (len > 8) {
    const ux = dx / len;
    const uy = dy / len;
    const h = Math.min(12, len / 2);
    ctx.setLineDash([]);
    ctx.fillStyle = colour;
    ctx.strokeStyle = 'rgba(10,14,16,.85)';
    ctx.lineWidth = 1.5;
    ctx.beginPath();
    ctx.moveTo(x1, y1);
    ctx.lineTo(x1 - ux * h - uy * h * 0.5, y1 - uy * h + ux * h * 0.5);
    ctx.lineTo(x1 - ux * h + uy * h * 0.5, y1 - uy * h - ux * h * 0.5);
    ctx.closePath();
    ctx.fill();
    ctx.stroke();
  }
  ctx.restore();
}

/** Source marker: a filled disc. Target marker: a ring with a cross. */
export function sourceMark(ctx, x, y, colour, selected) {
  ctx.save();
  ctx.fillStyle = colour;
  ctx.strokeStyle = selected ? '#fff6aa' : 'rgba(10,14,16,.9)';
  ctx.lineWidth = selected ? 3 : 2;
  ctx.beginPath();
  ctx.arc(x, y, selected ? 6.5 : 5, 0, Math.PI * 2);
  ctx.fill();
  ctx.stroke();
  ctx.restore();
}

export function targetMark(ctx, x, y, colour, selected) {
  ctx.save();
  ctx.lineWidth = selected ? 3 : 2;
  for (const [c, w] of [['rgba(10,14,16,.9)', ctx.lineWidth + 2.5], [selected ? '#fff6aa' : colour, ctx.lineWidth]]) {
    ctx.strokeStyle = c;
    ctx.lineWidth = w;
    ctx.beginPath();
    ctx.arc(x, y, 8, 0, Math.PI * 2);
    ctx.moveTo(x - 4, y);
    ctx.lineTo(x + 4, y);
    ctx.moveTo(x, y - 4);
    ctx.lineTo(x, y + 4);
    ctx.stroke();
  }
  ctx.restore();
}

export function polygonPath(ctx, view, pts) {
  ctx.beginPath();
  pts.forEach(([x, y], k) => {
    const [cx, cy] = view.toCanvas(x, y);
    if (k === 0) ctx.moveTo(cx, cy);
    else ctx.lineTo(cx, cy);
  });
  ctx.closePath();
}

/** The camera's safe zone (dashed light outline) and no-go zones (hatched clay). */
export function drawZones(ctx, view, camera) {
  if (!camera) return;
  ctx.save();
  for (const zone of camera.no_go_zones || []) {
    polygonPath(ctx, view, zone);
    ctx.fillStyle = 'rgba(190, 70, 30, 0.28)';
    ctx.fill();
    ctx.save();
    ctx.clip();
    ctx.strokeStyle = 'rgba(230, 110, 60, 0.75)';
    ctx.lineWidth = 1.5;
    const [x0, y0] = view.toCanvas(-0.5, -0.5);
    const [x1, y1] = view.toCanvas(view.W - 0.5, view.H - 0.5);
    ctx.beginPath();
    for (let s = x0 - (y1 - y0); s < x1; s += 10) {
      ctx.moveTo(s, y1);
      ctx.lineTo(s + (y1 - y0), y0);
    }
    ctx.stroke();
    ctx.restore();
    polygonPath(ctx, view, zone);
    ctx.strokeStyle = '#e8743f';
    ctx.lineWidth = 2;
    ctx.stroke();
  }
  if (camera.safe_zone) {
    polygonPath(ctx, view, camera.safe_zone);
    ctx.setLineDash([8, 6]);
    ctx.strokeStyle = 'rgba(255,255,255,.85)';
    ctx.lineWidth = 1.5;
    ctx.stroke();
  }
  ctx.restore();
}

/** Draws a goal document's terms (used by the comparison view). */
export function drawTerms(ctx, view, terms, dashed) {
  for (const t of terms || []) {
    const c = KIND_COLOUR[t.kind] || '#ccc';
    if (t.kind === 'region' && t.polygon) {
      polygonPath(ctx, view, t.polygon);
      ctx.save();
      if (dashed) ctx.setLineDash([6, 5]);
      ctx.fillStyle = 'rgba(43,179,185,.16)';
      ctx.fill();
      ctx.strokeStyle = c;
      ctx.lineWidth = 2;
      ctx.stroke();
      ctx.restore();
    }
    const pairs = [];
    if (t.source && t.target) pairs.push([t.source, t.target]);
    if (t.sources && t.targets) t.sources.forEach((s, k) => pairs.push([s, t.targets[k]]));
    if (t.source && !t.target) pairs.push([t.source, null]);
    for (const [s, g] of pairs) {
      const [sx, sy] = view.toCanvas(s[0], s[1]);
      if (g) {
        const [gx, gy] = view.toCanvas(g[0], g[1]);
        arrow(ctx, sx, sy, gx, gy, c, 2, dashed);
        targetMark(ctx, gx, gy, c, false);
      }
      sourceMark(ctx, sx, sy, c, false);
    }
  }
}
