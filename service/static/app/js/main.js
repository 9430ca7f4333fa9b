// The planner page: wires the panels together and keeps what was fitted.

import { apiKey, curlCommand, getBlob, setApiKey } from "./api.js";
import { drawFan } from "./charts.js";
import { describeFit, fitFacts, fitModel, forecastModel, prepareSettings, readSettings } from "./fitting.js";
import { readDemo, readFile, showTable } from "./loading.js";
import { buildPlanRow, describePlan, readPlan, readReorder, reorderFacts, runReorder, runScenario } from "./planning.js";
import { BANDS, download, fillQuantileTable, quantilesCsv } from "./tables.js";
import { $, busy, el, fillSelect, showProblems, status } from "./view.js";

const state = {
  table: null, // the loaded data (data.js readTable)
  model: null, // the stored model resource
  output: null, // the output settings of the last fit (horizon, draws, seed, quantiles)
  shown: null, // {path, payload, answer} of what the charts show: forecast or plan
  plan: null, // {series, kind, conditions} when a plan is shown
};

function panels(visible) {
  for (const id of ["settings-panel", "forecast-panel", "scenario-panel", "reorder-panel"]) {
    $(id).hidden = !visible.includes(id);
  }
}

async function load(read, source) {
  const table = await read();
  state.table = table;
  state.model = null;
  if (showTable(table, source)) {
    prepareSettings(table);
    panels(["settings-panel"]);
    status(`${source} loaded: ${table.names.length} series. Choose the settings and fit.`);
  } else {
    panels([]);
    status("");
  }
}

function fanOf(name) {
  const { answer } = state.shown;
  const f = answer.forecasts[name];
  const table = state.table;
  const keep = 36;
  const first = Math.max(0, table.dates.length - keep);
  const known = table.values[name].slice(first);
  let end = known.length;
  while (end > 0 && known[end - 1] === null) end--;
  const bands = {};
  for (const [cov, [lo, hi]] of Object.entries(BANDS)) bands[cov] = [f.quantiles[lo], f.quantiles[hi]];
  const fan = { name, historyDates: table.dates.slice(first, first + end), history: known.slice(0, end),
    dates: f.dates, median: f.median, bands };
  if (answer.baseline) {
    fan.baseline = answer.baseline[name].median;
    if (state.plan && state.plan.series === name) {
      fan.plan = state.plan.conditions.map((c) => ({ step: c.step, value: c[state.plan.kind], kind: state.plan.kind }));
    }
  }
  return fan;
}

function describeChart(fan) {
  const last = fan.dates.length - 1;
  const [lo, hi] = fan.bands[95];
  return `Fan chart of ${fan.name}: history to ${fan.historyDates.at(-1) ?? "the start"}, forecast to ` +
    `${fan.dates[last]}; median then ${Math.round(fan.median[last])}, 95% band ${Math.round(lo[last])} to ` +
    `${Math.round(hi[last])}. The table below lists every value.`;
}

function renderCharts() {
  const box = $("fan-charts");
  box.replaceChildren();
  for (const name of Object.keys(state.shown.answer.forecasts)) {
    const fan = fanOf(name);
    const canvas = el("canvas", { role: "img", "aria-label": describeChart(fan) });
    const conditioned = state.plan && state.plan.series === name;
    const card = el("figure", { class: conditioned ? "chart-card conditioned" : "chart-card", "data-series": name },
      el("h3", { text: conditioned ? `${name} (your plan)` : name }), el("div", { class: "chart-box" }, canvas));
    box.append(card);
    drawFan(canvas, fan);
  }
  renderTable();
  $("curl-text").value = curlCommand(state.shown.path, state.shown.payload);
  const banner = $("scenario-banner");
  banner.hidden = !state.plan;
  banner.textContent = state.plan
    ? `Showing your plan for ${state.plan.series}; the dashed grey line is the median without it.` : "";
}

function renderTable() {
  const name = $("table-series").value;
  fillQuantileTable($("quantile-table"), $("quantile-caption"), name, state.shown.answer.forecasts[name]);
}

function renderFit(model, answer) {
  const note = $("fit-note");
  note.replaceChildren(...describeFit(model, answer).map((t) => el("p", { text: t })));
  $("fit-facts").replaceChildren(...fitFacts(model, answer).flatMap(([k, v]) => [el("dt", { text: k }), el("dd", { text: v })]));
  const names = Object.keys(answer.forecasts);
  for (const id of ["table-series", "scenario-series", "reorder-series"]) fillSelect($(id), names);
  preparePlan();
}

function preparePlan() {
  const name = $("scenario-series").value;
  const base = state.baseline.forecasts[name];
  buildPlanRow(base.dates, base.median);
}

async function fit(event) {
  event.preventDefault();
  const progress = $("fit-progress");
  const text = $("fit-progress-text");
  await busy($("fit"), $("fit-problems"), async () => {
    const { model: spec, output } = readSettings(state.table);
    progress.hidden = false;
    progress.removeAttribute("value");
    text.textContent = "Fitting the model…";
    status("Fitting the model…");
    let background = false;
    try {
      const model = await fitModel(spec, (share) => {
        background = true;
        progress.value = share;
        text.textContent = `Fitting in the background: ${Math.round(100 * share)}%`;
      });
      text.textContent = "Forecasting…";
      const shown = await forecastModel(model.id, output);
      Object.assign(state, { model, output, shown, plan: null, baseline: shown.answer });
      $("forecast-panel").dataset.modelId = model.id;
      renderFit(model, shown.answer);
      panels(["settings-panel", "forecast-panel", "scenario-panel", "reorder-panel"]);
      renderCharts();
      $("forecast-title").focus();
      $("forecast-panel").scrollIntoView({ block: "start" });
      status(`Forecast ready: ${output.horizon} periods for ${Object.keys(shown.answer.forecasts).length} series ` +
        `(seed ${shown.answer.seed}${background ? "; fitted as a background job" : ""}).`);
    } finally {
      progress.hidden = true;
      text.textContent = "";
    }
  });
}

async function applyPlan() {
  await busy($("scenario-apply"), $("scenario-problems"), async () => {
    const plan = readPlan();
    status("Working out the plan…");
    const shown = await runScenario(state.model.id, state.output, plan.conditions);
    Object.assign(state, { shown, plan });
    renderCharts();
    $("scenario-note").replaceChildren(...describePlan(shown.answer).map((t) => el("p", { text: t })));
    status(`Showing the plan for ${plan.series}: every series' chart and the table now follow it.`);
  });
}

function clearPlan() {
  if (!state.model) return;
  state.shown = { path: `/v1/models/${state.model.id}/forecasts`, payload: state.output, answer: state.baseline };
  state.plan = null;
  $("scenario-note").replaceChildren();
  preparePlan();
  renderCharts();
  status("Back to the plain forecast.");
}

async function reorder(event) {
  event.preventDefault();
  await busy($("reorder-run"), $("reorder-problems"), async () => {
    const item = readReorder();
    const { answer } = await runReorder(state.model.id, state.output.seed, state.output.draws, item);
    const result = $("reorder-result");
    result.replaceChildren(...reorderFacts(answer).flatMap(([k, v]) => [el("dt", { text: k }), el("dd", { text: v })]));
    result.hidden = false;
    $("reorder-note").textContent = `Demand from ${answer.window.first} to ${answer.window.last} ` +
      `from ${answer.draws} simulated paths (seed ${answer.seed}). Review before committing purchases.`;
    status("Reorder advice ready.");
  });
}

function stem() {
  return (state.model.name || "forecast").replace(/[^A-Za-z0-9_-]+/g, "_");
}

async function downloadImage(fmt) {
  const o = state.output;
  const query = new URLSearchParams({ horizon: o.horizon, draws: o.draws, seed: o.seed, history: 36 });
  const blob = await getBlob(`/v1/models/${state.model.id}/fan-chart.${fmt}?${query}`);
  download(blob, `${stem()}-fan-chart.${fmt}`);
  $("download-note").textContent = state.plan
    ? "The picture shows the plain forecast (without your plan), drawn by the server." : "";
}

function wire() {
  const key = $("api-key");
  key.value = apiKey();
  key.addEventListener("change", () => setApiKey(key.value.trim()));
  $("csv-file").addEventListener("change", (e) => {
    const file = e.target.files[0];
    if (file) load(() => readFile(file), `The file ${file.name}`);
  });
  $("use-demo").addEventListener("click", () => load(readDemo, "The bicycle-parts demo data"));
  $("fit-form").addEventListener("submit", fit);
  $("table-series").addEventListener("change", renderTable);
  $("scenario-series").addEventListener("change", preparePlan);
  $("scenario-apply").addEventListener("click", applyPlan);
  $("scenario-clear").addEventListener("click", clearPlan);
  $("reorder-form").addEventListener("submit", reorder);
  $("download-csv").addEventListener("click", () => {
    download(new Blob([quantilesCsv(state.shown.answer.forecasts)], { type: "text/csv" }), `${stem()}-quantiles.csv`);
  });
  for (const fmt of ["png", "svg"]) {
    $(`download-${fmt}`).addEventListener("click", () =>
      downloadImage(fmt).catch((e) => showProblems($("fit-problems"), [e.message])));
  }
  $("copy-curl").addEventListener("click", async () => {
    const text = $("curl-text").value;
    $("curl-box").open = true;
    try {
      await navigator.clipboard.writeText(text);
      status("The curl command is on the clipboard.");
    } catch {
      $("curl-text").select();
      status("Select and copy the command below (the browser did not allow copying).");
    }
  });
}

wire();
