// All network calls of the dashboard. Same origin only; the access token (when the server is shared on
// the network) travels as a cookie set by ?token=, and also as a header when the page URL carries it.

const pageToken = new URLSearchParams(location.search).get("token");

export class ApiProblem extends Error {
  constructor(status, body) {
    const err = (body && body.error) || {};
    super(err.message || `The server answered ${status}.`);
    this.status = status;
    this.code = err.code || "http_error";
    this.details = err.details || {};
  }
}

function withToken(url) {
  if (!pageToken) return url;
  const u = new URL(url, location.origin);
  u.searchParams.set("token", pageToken);
  return u.pathname + u.search;
}

// The name typed in "You are" (kept in localStorage by main.js): the audit log records it.
function whoName() {
  try { return (localStorage.getItem("scalewright.who") || "").trim(); } catch { return ""; }
}

async function call(method, url, { json, form, signal, headers: extra } = {}) {
  const headers = { ...extra };
  if (pageToken) headers["X-Scalewright-Token"] = pageToken;
  const who = whoName();
  if (who) headers["X-Scalewright-Who"] = encodeURIComponent(who); // for the audit log; UTF-8, percent-encoded
  let body;
  if (json !== undefined) {
    headers["Content-Type"] = "application/json";
    body = JSON.stringify(json);
  } else if (form) {
    body = form;
  }
  const res = await fetch(url, { method, headers, body, signal, credentials: "same-origin" });
  const text = await res.text();
  let data = null;
  try { data = text ? JSON.parse(text) : null; } catch { data = { error: { message: text.slice(0, 300) } }; }
  if (!res.ok) throw new ApiProblem(res.status, data);
  return data;
}

// A form upload through XMLHttpRequest (fetch reports no upload progress). onProgress({phase, loaded, total}):
// phase "sending" while the bytes travel, then "reading" once they are all sent and the server reads the file.
function sendForm(url, form, onProgress) {
  return new Promise((resolve, reject) => {
    const xhr = new XMLHttpRequest();
    xhr.open("POST", url);
    xhr.withCredentials = true;
    if (pageToken) xhr.setRequestHeader("X-Scalewright-Token", pageToken);
    const who = whoName();
    if (who) xhr.setRequestHeader("X-Scalewright-Who", encodeURIComponent(who));
    xhr.upload.onprogress = (e) => onProgress({ phase: "sending", loaded: e.loaded, total: e.lengthComputable ? e.total : null });
    xhr.upload.onload = () => onProgress({ phase: "reading", loaded: null, total: null });
    xhr.onload = () => {
      let data = null;
      try { data = xhr.responseText ? JSON.parse(xhr.responseText) : null; } catch { data = { error: { message: xhr.responseText.slice(0, 300) } }; }
      if (xhr.status >= 200 && xhr.status < 300) resolve(data); else reject(new ApiProblem(xhr.status, data));
    };
    xhr.onerror = () => reject(new Error("The file did not reach the server (the connection failed). Is Scalewright still running?"));
    xhr.onabort = () => reject(new Error("The upload was cancelled."));
    xhr.send(form);
  });
}

export const api = {
  health: () => call("GET", "/api/health"),
  options: () => call("GET", "/api/options"),
  listDatasets: () => call("GET", "/api/datasets"),
  getDataset: (id) => call("GET", `/api/datasets/${encodeURIComponent(id)}`),
  deleteDataset: (id) => call("DELETE", `/api/datasets/${encodeURIComponent(id)}`),
  upload: (form, onProgress) => (onProgress ? sendForm("/api/datasets", form, onProgress) : call("POST", "/api/datasets", { form })),
  openDemo: () => call("POST", "/api/demo"),
  demoRatings: async () => (await fetch(withToken("/api/demo/ratings"), { credentials: "same-origin" })).text(),
  // progressId: the page's id of this request; the server's stage messages on the live channel carry it back
  analyse: (id, body, signal, progressId) => call("POST", `/api/datasets/${encodeURIComponent(id)}/analysis`,
    { json: body, signal, headers: progressId ? { "X-Scalewright-Progress": progressId } : undefined }),
  residuals: (id, body) => call("POST", `/api/datasets/${encodeURIComponent(id)}/residuals`, { json: body }),
  listSnapshots: (id) => call("GET", `/api/datasets/${encodeURIComponent(id)}/snapshots`),
  saveSnapshot: (id, body) => call("POST", `/api/datasets/${encodeURIComponent(id)}/snapshots`, { json: body }),
  getSnapshot: (sid) => call("GET", `/api/snapshots/${encodeURIComponent(sid)}`),
  compareSnapshots: (a, b) => call("GET", `/api/snapshots/${encodeURIComponent(a)}/compare/${encodeURIComponent(b)}`),
  sideBySide: (a, b) => call("GET", `/api/snapshots/${encodeURIComponent(a)}/side-by-side/${encodeURIComponent(b)}`),
  sideBySideCurrent: (a, body) => call("POST", `/api/snapshots/${encodeURIComponent(a)}/side-by-side`, { json: body }),
  restoreSnapshot: (sid) => call("GET", `/api/snapshots/${encodeURIComponent(sid)}/restore`),
  reportUrl: (sid) => withToken(`/api/snapshots/${encodeURIComponent(sid)}/report`),
  scoringKeyUrl: (sid) => withToken(`/api/snapshots/${encodeURIComponent(sid)}/scoring-key`),
  responsesUrl: (sid, scored) => withToken(`/api/snapshots/${encodeURIComponent(sid)}/responses${scored ? "?scored=true" : ""}`),
  retest: (body) => call("POST", "/api/retest", { json: body }),
  confirm: (id, body) => call("POST", `/api/datasets/${encodeURIComponent(id)}/confirmation`, { json: body }),
  startRun: (id, body) => call("POST", `/api/datasets/${encodeURIComponent(id)}/resampling`, { json: body }),
  getRun: (runId) => call("GET", `/api/runs/${encodeURIComponent(runId)}`),
  cancelRun: (runId) => call("DELETE", `/api/runs/${encodeURIComponent(runId)}`),
  agreement: (body) => call("POST", "/api/agreement", { json: body }),
  agreementUpload: (form) => call("POST", "/api/agreement/upload", { form }),
  postEvent: (id, body) => call("POST", `/api/datasets/${encodeURIComponent(id)}/events`, { json: body }),
  audit: ({ dataset_id, limit } = {}) => {
    const q = new URLSearchParams();
    if (dataset_id) q.set("dataset_id", dataset_id);
    if (limit) q.set("limit", String(limit));
    return call("GET", `/api/audit${q.toString() ? `?${q}` : ""}`);
  },
  backupUrl: (who) => withToken(`/api/workspace/backup${who ? `?who=${encodeURIComponent(who)}` : ""}`),
  importWorkspace: (form) => call("POST", "/api/workspace/restore", { form }),
  events: (id) => new EventSource(withToken(`/api/datasets/${encodeURIComponent(id)}/events`)),
};
