// The Grammars page: follow unfinished versions (queued, training, or ready but still
// refreshing suggestions) by polling the JSON API, update their status, progress and message
// in place, and reload once one finishes (so the figures, the active marker and the learning
// curve are drawn by the server again).

const POLL_MS = 1000;

function unfinished(status, progress) {
  return status === "queued" || status === "training" || (status === "ready" && progress < 1);
}

async function poll() {
  const rows = [...document.querySelectorAll("tr[data-version]")]
    .filter((row) => unfinished(row.dataset.status, Number(row.dataset.progress)));
  if (rows.length === 0) return;
  let finished = false;
  for (const row of rows) {
    let v;
    try {
      const resp = await fetch(`/api/grammars/${row.dataset.version}`);
      if (!resp.ok) continue;
      v = await resp.json();
    } catch (err) {
      continue; // the service may be restarting; try again on the next tick
    }
    const status = row.querySelector('[data-field="status"]');
    status.textContent = v.status;
    status.className = `gv-status gv-status-${v.status}`;
    const bar = row.querySelector('[data-field="progress"]');
    if (bar) {
      bar.value = v.progress;
      bar.textContent = `${Math.round(v.progress * 100)}%`;
    }
    row.querySelector('[data-field="message"]').textContent = v.message;
    row.dataset.status = v.status;
    row.dataset.progress = String(v.progress);
    if (!unfinished(v.status, v.progress)) finished = true;
  }
  if (finished) {
    window.location.reload();
    return;
  }
  setTimeout(poll, POLL_MS);
}

setTimeout(poll, POLL_MS);
