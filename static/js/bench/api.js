// bench/api.js: talking to the server (JSON with the CSRF token) and error texts from answers.

import {csrf} from "./state.js";

export async function api(method, path, body) {
  const init = {method, headers: {"Accept": "application/json"}, credentials: "same-origin"};
  if (body !== undefined) {
    init.headers["Content-Type"] = "application/json";
    init.headers["X-CSRF-Token"] = csrf;
    init.body = JSON.stringify(body);
  }
  const resp = await fetch(path, init);
  let data = null;
  try { data = await resp.json(); } catch { data = null; }
  return {status: resp.status, body: data};
}

export function errorText(body) {
  if (!body) return "no answer";
  if (typeof body.detail === "string") return body.detail;
  if (Array.isArray(body.detail)) return body.detail.map((d) => d.msg).join("; ");
  return JSON.stringify(body.detail);
}
