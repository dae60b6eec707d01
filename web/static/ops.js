// Following a durable operation from a page: server-sent events from
// /api/operations/{id}/events, falling back to polling GET /api/operations/{id} when the browser
// has no EventSource or the stream breaks. `update(op)` gets every new state of the operation
// (the JSON of GET /api/operations/{id}); following ends by itself once `op.done`.
import { csrfToken } from './site.js';

const POLL_MS = 500;

/** Follows operation `id`; returns `{ stop() }` to stop following (the work goes on). */
export function followOperation(id, update) {
  let source = null;
  let timer = null;
  let over = false;
  const stop = () => {
    over = true;
    if (source) source.close();
    if (timer) clearTimeout(timer);
    source = null;
    timer = null;
  };
  const seen = (op) => {
    if (over) return;
    if (op.done) stop();
    update(op);
  };
  const poll = () => {
    if (over) return;
    timer = setTimeout(async () => {
      try {
        const resp = await fetch(`/api/operations/${encodeURIComponent(id)}`, { credentials: 'same-origin' });
        if (resp.ok) seen(await resp.json());
      } catch (_) { /* the network comes back; poll again */ }
      poll();
    }, POLL_MS);
  };
  if (window.EventSource) {
    source = new EventSource(`/api/operations/${encodeURIComponent(id)}/events`);
    source.addEventListener('operation', (e) => {
      try {
        seen(JSON.parse(e.data));
      } catch (_) { /* a malformed event is skipped */ }
    });
    source.onerror = () => {
      if (source) source.close();
      source = null;
      poll();
    };
  } else {
    poll();
  }
  return { stop };
}

/** Asks the server to stop operation `id`. */
export async function cancelOperation(id) {
  return fetch(`/api/operations/${encodeURIComponent(id)}/cancel`, {
    method: 'POST',
    headers: { 'X-CSRF-Token': csrfToken() },
    credentials: 'same-origin',
  });
}
