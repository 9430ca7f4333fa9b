// Panel 2, "Model settings", and the requests behind a fit: store a model (a job with a
// progress bar when the server runs it in the background), then forecast from it.

import { getJson, postJson, waitForJob } from "./api.js";
import { defaultTransform } from "./data.js";
import { LEVELS } from "./tables.js";
import { $, el } from "./view.js";

const TRANSFORMS = [
  ["log", "log (changes in percent)"],
  ["log1p", "log(1 + x) (counts with zeros)"],
  ["none", "plain values"],
  ["diff", "changes from period to period"],
  ["logdiff", "growth rates"],
  ["auto", "let the model choose"],
];

/** Lag choices and one transform selector per series, with sensible defaults. */
export function prepareSettings(table) {
  const lags = $("lags");
  lags.replaceChildren(el("option", { value: "auto", text: "Let the model choose" }));
  for (let p = 1; p <= 13; p++) lags.append(el("option", { value: String(p), text: String(p) }));
  const list = $("transform-list");
  list.replaceChildren();
  table.names.forEach((name, j) => {
    const id = `transform-${j}`;
    const select = el("select", { id, "data-series": name });
    for (const [value, text] of TRANSFORMS) select.append(el("option", { value, text }));
    select.value = defaultTransform(table.values[name]);
    list.append(el("div", { class: "field" }, el("label", { for: id, text: name }), select));
  });
  if (!$("seed").value) $("seed").value = String(Math.floor(Math.random() * 1e6));
}

function number(id, fallback) {
  const v = $(id).value.trim();
  return v === "" ? fallback : Number(v);
}

/** The settings of the form, checked; throws an Error with plain words. */
export function readSettings(table) {
  const horizon = number("horizon", 12);
  if (!Number.isInteger(horizon) || horizon < 1 || horizon > 104) {
    throw new Error("Periods to forecast: give a whole number from 1 to 104.");
  }
  const draws = number("draws", 2000);
  if (!Number.isInteger(draws) || draws < 100 || draws > 10000) {
    throw new Error("Simulated paths: give a whole number from 100 to 10000.");
  }
  const seed = number("seed", 0);
  if (!Number.isInteger(seed) || seed < 0) throw new Error("Random seed: give a whole number, 0 or more.");
  const tightness = number("tightness", "auto");
  if (tightness !== "auto" && !(tightness > 0)) throw new Error("Tightness: give a number above 0, or leave it blank.");
  const transforms = {};
  for (const select of $("transform-list").querySelectorAll("select")) transforms[select.dataset.series] = select.value;
  const all = Object.values(transforms);
  const lags = $("lags").value;
  const seasonal = $("seasonal").value;
  const model = {
    name: $("name").value.trim() || null,
    series: table.values,
    dates: table.dates,
    lags: lags === "auto" ? "auto" : Number(lags),
    prior: $("prior").value,
    tightness,
    seasonal: seasonal === "auto" ? "auto" : seasonal === "true",
    transforms: all.every((t) => t === "auto") ? "auto" : all.includes("auto") ? undefined : transforms,
  };
  if (model.transforms === undefined) {
    throw new Error("Let the model choose the transform of every series, or of none: pick one for each.");
  }
  if (model.prior === "independent") model.seed = seed;
  const output = { horizon, quantiles: LEVELS, draws, seed, reject_explosive: $("reject-explosive").checked };
  return { model, output };
}

/** Store the model; onProgress(share or null). Returns the model resource. */
export async function fitModel(model, onProgress) {
  const key = crypto.randomUUID ? crypto.randomUUID() : String(Date.now()) + Math.random();
  const answer = await postJson("/v1/models", model, { "Idempotency-Key": key });
  if (answer.status === 201) return answer.body;
  onProgress(0);
  const job = await waitForJob(answer.headers.get("Location") || `/v1/jobs/${answer.body.id}`, onProgress);
  return (await getJson(job.result)).body;
}

export async function forecastModel(modelId, output) {
  const path = `/v1/models/${modelId}/forecasts`;
  return { path, payload: output, answer: (await postJson(path, output)).body };
}

const pct = (x) => `${+(100 * x).toFixed(1)}%`;

/** What the fit chose and how trustworthy it looks, in plain words. */
export function describeFit(model, forecast) {
  const notes = [];
  const warnings = [...new Set([...(model.warnings || []), ...(forecast.warnings || [])])];
  const conv = model.diagnostics;
  const share = forecast.rejected_explosive_share;
  if (!warnings.length && (!conv || conv.ok !== false)) {
    notes.push("The fit looks sound: no warnings about the data or the model.");
  } else {
    notes.push("Read these before using the numbers:");
    notes.push(...warnings);
  }
  if (conv) {
    notes.push(conv.ok ? "The sampler's chains agree (convergence checks passed)."
      : "The sampler's chains do not agree yet: run longer chains before trusting the numbers.");
  }
  if (share != null) {
    notes.push(share === 0 ? "No simulated parameter draw was explosive."
      : `${pct(share)} of the parameter draws were explosive (growing without bound) and were left out.` +
        (share > 0.1 ? " That is a lot: check the data for breaks, or use a transform such as log." : ""));
  }
  return notes;
}

/** The chosen settings as [term, description] pairs. */
export function fitFacts(model, forecast) {
  const facts = [
    ["Data used", `${model.span.start} to ${model.span.end} (${model.span.observations} periods)`],
    ["Lags", String(model.lags)],
  ];
  if (model.configuration) {
    facts.push(["Automatic choices", model.configuration.summary]);
    for (const reason of model.configuration.reasons || []) facts.push(["Why", reason]);
  }
  for (const [k, v] of Object.entries(model.hyperparameters || {})) {
    if (v != null) facts.push([k.replace(/_/g, " "), String(+Number(v).toPrecision(4))]);
  }
  facts.push(["Simulated paths, seed", `${forecast.draws}, ${forecast.seed}`]);
  facts.push(["Model id", model.id]);
  return facts;
}
