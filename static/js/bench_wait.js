// bench_wait.js: the Bench's waiting page. Asks every second where the sentence's parse stands
// in the parser's line (GET /api/bench/{id}/place, a read that never waits), shows the place,
// and loads the Bench again as soon as the parse is done.

const ASK_EVERY_MS = 1000;
const root = document.getElementById("bench-wait");
const place = document.getElementById("parse-place");
const sentenceId = root.dataset.sentenceId;

function show(ahead) {
  place.dataset.ahead = String(ahead);
  place.textContent = ahead > 0 ? `waiting: ${ahead} ahead` : "parsing now";
}

async function ask() {
  let again = ASK_EVERY_MS;
  try {
    const resp = await fetch(`/api/bench/${sentenceId}/place`, {
      credentials: "same-origin", headers: {"Accept": "application/json"}});
    if (resp.ok) {
      const body = await resp.json();
      if (body.ready) {
        window.location.reload();
        return;
      }
      show(body.ahead);
    } else {
      place.textContent = `the server answered ${resp.status}; asking again`;
      again = ASK_EVERY_MS * 3;
    }
  } catch {
    place.textContent = "no answer from the server; asking again";
    again = ASK_EVERY_MS * 3;
  }
  window.setTimeout(ask, again);
}

window.setTimeout(ask, ASK_EVERY_MS);
