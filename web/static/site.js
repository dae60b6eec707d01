// Small helpers shared by every page: frame uploads by drag-and-drop or file picker, and
// selecting a once-shown secret for copying. Each widget owns its own elements.

export function csrfToken() {
  const m = document.querySelector('meta[name="csrf-token"]');
  return m ? m.content : '';
}

/** A readable sentence from an API error response. */
export async function apiErrorText(resp) {
  try {
    const body = await resp.json();
    if (body && body.error && body.error.message) return body.error.message;
  } catch (_) { /* not JSON */ }
  return `the server answered ${resp.status}`;
}

/**
 * A drop zone with a file picker in `form`: `send(file, say)` gets the chosen or dropped file
 * and a function that writes a status line (`say(text, isError)`).
 */
function dropZone(form, send) {
  const zone = form.querySelector('[data-dropzone]');
  const input = form.querySelector('input[type=file]');
  const status = form.querySelector('.upload-status');
  const say = (text, error) => {
    status.textContent = text;
    status.classList.toggle('error', !!error);
  };
  const go = (file) => {
    if (file) send(file, say);
  };
  input.addEventListener('change', () => go(input.files[0]));
  form.addEventListener('submit', (e) => {
    e.preventDefault();
    go(input.files[0]);
  });
  zone.addEventListener('dragover', (e) => {
    e.preventDefault();
    zone.classList.add('over');
  });
  zone.addEventListener('dragleave', () => zone.classList.remove('over'));
  zone.addEventListener('drop', (e) => {
    e.preventDefault();
    zone.classList.remove('over');
    go(e.dataTransfer.files[0]);
  });
}

function initUpload(form) {
  const camera = form.dataset.uploadCamera;
  const limit = Number(form.dataset.limitMb || 64) * 1024 * 1024;
  dropZone(form, async (file, say) => {
    if (!/^image\/(png|jpeg)$/.test(file.type)) {
      say(`“${file.name}” is not a PNG or JPEG image.`, true);
      return;
    }
    if (file.size > limit) {
      say(`“${file.name}” is larger than the ${form.dataset.limitMb} MiB a frame may have.`, true);
      return;
    }
    say(`Uploading ${file.name}…`);
    const resp = await fetch(`/api/cameras/${camera}/frames`, {
      method: 'POST',
      headers: { 'Content-Type': file.type, 'X-CSRF-Token': csrfToken() },
      body: file,
      credentials: 'same-origin',
    });
    if (resp.ok) {
      const frame = await resp.json();
      say(resp.status === 201 ? 'Uploaded.' : 'This frame was already stored; showing it.');
      window.location.assign(`/?uploaded=${encodeURIComponent(frame.id)}`);
    } else {
      say(`Not uploaded: ${await apiErrorText(resp)}`, true);
    }
  });
}

/** The content type of a demonstration file, from its type or else its name; null if neither. */
function demoType(file) {
  if (file.type === 'image/gif' || /\.gif$/i.test(file.name)) return 'image/gif';
  if (/zip/.test(file.type) || /\.zip$/i.test(file.name)) return 'application/zip';
  return null;
}

function initDemoUpload(form) {
  const camera = form.dataset.demoCamera;
  const limit = Number(form.dataset.limitMb || 512) * 1024 * 1024;
  dropZone(form, async (file, say) => {
    const type = demoType(file);
    if (!type) {
      say(`“${file.name}” is neither a ZIP of frames nor an animated GIF.`, true);
      return;
    }
    if (file.size > limit) {
      say(`“${file.name}” is larger than the ${form.dataset.limitMb} MiB a demonstration may have.`, true);
      return;
    }
    say(`Uploading ${file.name} and reading its frames…`);
    // The file's name, without its extension, names the demo.
    const name = file.name.replace(/\.(zip|gif)$/i, '').trim().slice(0, 200);
    const query = name ? `?name=${encodeURIComponent(name)}` : '';
    const resp = await fetch(`/api/cameras/${camera}/demos${query}`, {
      method: 'POST',
      headers: { 'Content-Type': type, 'X-CSRF-Token': csrfToken() },
      body: file,
      credentials: 'same-origin',
    });
    if (resp.ok) {
      const demo = await resp.json();
      say(`Stored ${demo.frame_count} frames.`);
      window.location.assign(`/demos/${encodeURIComponent(demo.id)}`);
    } else {
      say(`Not uploaded: ${await apiErrorText(resp)}`, true);
    }
  });
}

function init() {
  document.querySelectorAll('form[data-upload-camera]').forEach(initUpload);
  document.querySelectorAll('form[data-demo-camera]').forEach(initDemoUpload);
  document.querySelectorAll('[data-select-all]').forEach((el) => {
    el.addEventListener('focus', () => el.select());
  });
}

if (document.readyState === 'loading') document.addEventListener('DOMContentLoaded', init);
else init();
