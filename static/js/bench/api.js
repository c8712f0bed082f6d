// bench/api.js: talking to the server (JSON with the CSRF token) and error texts from answers.
// Expected refusals (409 conflict, 422 not fitting) come back as 200 with the real status in a
// header, so the browser does not log them as failed resources (app/api_errors.py).

import {csrf} from "./state.js";

export async function api(method, path, body) {
  const init = {method, credentials: "same-origin",
    headers: {"Accept": "application/json", "X-Treewright-Quiet-Refusal": "1"}};
  if (body !== undefined) {
    init.headers["Content-Type"] = "application/json";
    init.headers["X-CSRF-Token"] = csrf;
    init.body = JSON.stringify(body);
  }
  const resp = await fetch(path, init);
  let data = null;
  try { data = await resp.json(); } catch { data = null; }
  return {status: Number(resp.headers.get("X-Treewright-Status")) || resp.status, body: data};
}

export function errorText(body) {
  if (!body) return "no answer";
  if (typeof body.detail === "string") return body.detail;
  if (Array.isArray(body.detail)) return body.detail.map((d) => d.msg).join("; ");
  return JSON.stringify(body.detail);
}
