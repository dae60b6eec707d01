// The comparison view: both revisions on the frame, the older dashed.
import { View, drawTerms, drawZones } from './view.js';

function init() {
  const canvas = document.getElementById('compare-canvas');
  if (!canvas) return;
  const data = JSON.parse(canvas.dataset.compare);
  const img = new Image();
  img.onload = () => {
    const cssW = canvas.clientWidth || 600;
    const view = new View(data.frame.width, data.frame.height);
    const cssH = Math.round((cssW * data.frame.height) / data.frame.width);
    const dpr = window.devicePixelRatio || 1;
    canvas.width = Math.round(cssW * dpr);
    canvas.height = Math.round(cssH * dpr);
    canvas.style.height = `${cssH}px`;
    view.z = cssW / data.frame.width;
    const ctx = canvas.getContext('2d');
    ctx.setTransform(dpr, 0, 0, dpr, 0, 0);
    ctx.drawImage(img, 0, 0, cssW, cssH);
    drawZones(ctx, view, data.camera);
    drawTerms(ctx, view, data.a.terms, true);
    drawTerms(ctx, view, data.b.terms, false);
  };
  img.src = `/api/frames/${data.frame.id}/image`;
}

if (document.readyState === 'loading') document.addEventListener('DOMContentLoaded', init);
else init();
