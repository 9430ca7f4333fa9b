// Talking to Fanfold's /v1 API from the page: the API key (kept in this tab's session
// storage, never in a URL), problem+json answers turned into plain words, job polling,
// and the curl command that repeats a request.

const KEY_STORE = "fanfold.apiKey";

export function apiKey() {
  return sessionStorage.getItem(KEY_STORE) || "";
}

export function setApiKey(value) {
  if (value) sessionStorage.setItem(KEY_STORE, value);
  else sessionStorage.removeItem(KEY_STORE);
}

/** An API answer that was not a success, with the server's words. */
export class ApiError extends Error {
  constructor(status, problem) {
    super(describeProblem(status, problem));
    this.status = status;
    this.problem = problem || {};
  }

  /** Field messages of a 422 problem: [{field, message}]. */
  get fields() {
    return Array.isArray(this.problem.errors) ? this.problem.errors : [];
  }
}

function describeProblem(status, problem) {
  if (status === 401) return "This server needs an API key: open \"API key\" at the top and paste yours.";
  if (status === 429) return "Too many requests for now; wait a few seconds and try again.";
  if (status === 413) return "The data is larger than this server accepts; send fewer rows or series.";
  if (status === 503) return "The server took too long; try fewer simulated paths or a shorter horizon.";
  const detail = problem && (problem.detail || problem.title);
  return detail ? String(detail) : `The server answered ${status}.`;
}

function headers(extra = {}) {
  const h = { Accept: "application/json", ...extra };
  const key = apiKey();
  if (key) h["X-API-Key"] = key;
  return h;
}

async function parse(response) {
  const text = await response.text();
  let body = null;
  try { body = text ? JSON.parse(text) : null; } catch { body = { detail: text.slice(0, 200) }; }
  if (!response.ok) throw new ApiError(response.status, body);
  return { status: response.status, body, headers: response.headers };
}

/** POST JSON; returns {status, body, headers}; throws ApiError. */
export async function postJson(path, payload, extraHeaders = {}) {
  const response = await fetch(path, {
    method: "POST",
    headers: headers({ "Content-Type": "application/json", ...extraHeaders }),
    body: JSON.stringify(payload),
  });
  return parse(response);
}

export async function getJson(path) {
  return parse(await fetch(path, { headers: headers() }));
}

/** GET a binary answer (an image) as a Blob. */
export async function getBlob(path) {
  const response = await fetch(path, { headers: headers({ Accept: "*/*" }) });
  if (!response.ok) await parse(response);
  return response.blob();
}

const sleep = (ms) => new Promise((resolve) => setTimeout(resolve, ms));

/** Poll a job until it ends; onProgress(share 0..1). Returns the finished job. */
export async function waitForJob(location, onProgress, { everyMs = 400, limitMs = 30 * 60 * 1000 } = {}) {
  const started = Date.now();
  for (;;) {
    const { body: job } = await getJson(location);
    onProgress(job.progress ?? 0);
    if (job.status === "succeeded") return job;
    if (job.status === "failed" || job.status === "cancelled") {
      throw new ApiError(422, job.problem || { detail: `The fit ${job.status}.` });
    }
    if (Date.now() - started > limitMs) throw new ApiError(503, { detail: "The fit is taking too long." });
    await sleep(everyMs);
  }
}

const shellQuote = (s) => "'" + String(s).replace(/'/g, "'\\''") + "'";

/** A curl command that sends the same request (the key as a variable, never pasted). */
export function curlCommand(path, payload) {
  const url = new URL(path, window.location.origin).href;
  const lines = [`curl -sS -X POST ${shellQuote(url)}`, "  -H 'Content-Type: application/json'"];
  if (apiKey()) lines.push('  -H "X-API-Key: $FANFOLD_API_KEY"');
  lines.push(`  -d ${shellQuote(JSON.stringify(payload))}`);
  return lines.join(" \\\n");
}
