// Panels 4 and 5: a plan for one series (the API's scenario) and reorder advice (its
// replenishment answer).

import { postJson } from "./api.js";
import { $, el } from "./view.js";

/** One editable row: an input per forecast date of the chosen series. */
export function buildPlanRow(dates, median) {
  const table = $("scenario-table");
  table.replaceChildren();
  const head = el("tr", {}, el("th", { scope: "col", text: "date" }));
  const row = el("tr", {}, el("th", { scope: "row", text: "plan" }));
  const hint = el("tr", {}, el("th", { scope: "row", text: "forecast median" }));
  dates.forEach((date, i) => {
    const id = `plan-${i + 1}`;
    head.append(el("th", { scope: "col" }, el("label", { for: id, text: date })));
    row.append(el("td", {}, el("input", { id, type: "number", step: "any", "data-step": String(i + 1),
      "aria-label": `plan for ${date}` })));
    hint.append(el("td", { text: median[i] == null ? "–" : String(Math.round(median[i])) }));
  });
  table.append(el("thead", {}, head), el("tbody", {}, row, hint));
}

/** The conditions typed in the row, checked; throws an Error in plain words. */
export function readPlan() {
  const series = $("scenario-series").value;
  const kind = $("scenario-mode").value;
  const conditions = [];
  for (const input of $("scenario-table").querySelectorAll("input")) {
    const text = input.value.trim();
    if (text === "") continue;
    const value = Number(text);
    if (!Number.isFinite(value)) throw new Error(`The plan for step ${input.dataset.step} is not a number.`);
    conditions.push({ series, step: Number(input.dataset.step), [kind]: value });
  }
  if (!conditions.length) throw new Error(`Type at least one value for ${series} in the row.`);
  return { series, kind, conditions };
}

export async function runScenario(modelId, output, conditions) {
  const path = `/v1/models/${modelId}/scenarios`;
  const payload = { ...output, conditions };
  return { path, payload, answer: (await postJson(path, payload)).body };
}

const share = (p) => (p > 0.995 ? "more than 99%" : p < 0.005 ? "less than 1%" : `${Math.round(100 * p)}%`);

/** How plausible each condition was before it was imposed, in plain words. */
export function describePlan(answer) {
  const lines = [];
  for (const c of answer.conditions) {
    const p = c.prior_probability;
    if (p == null) continue;
    if (c.kind === "value") {
      const tail = p < 0.05 || p > 0.95;
      lines.push(`${c.series} on ${c.date}: the plain forecast put ${share(p)} of its outcomes below this value` +
        (tail ? " — far from what the data suggest." : "."));
    } else {
      lines.push(`${c.series} on ${c.date}: the plain forecast met this range with probability ${share(p)}.`);
    }
  }
  return lines;
}

const whole = new Intl.NumberFormat(undefined, { maximumFractionDigits: 0 });
const pct = (x) => `${+(100 * x).toFixed(1)}%`;

export function readReorder() {
  const num = (id) => Number($(id).value);
  const leadTime = num("lead-time");
  const level = num("service-level");
  const onHand = num("on-hand");
  const onOrder = num("on-order");
  if (!Number.isInteger(leadTime) || leadTime < 1 || leadTime > 104) throw new Error("Lead time: a whole number of periods from 1 to 104.");
  if (!(level > 0 && level < 100)) throw new Error("Service level: a percentage above 0 and below 100.");
  if (!(onHand >= 0) || !(onOrder >= 0)) throw new Error("On hand and on order: 0 or more.");
  return { leadTime, level: level / 100, onHand, onOrder };
}

export async function runReorder(modelId, seed, draws, item) {
  const path = `/v1/models/${modelId}/replenishment`;
  const payload = {
    lead_time: item.leadTime, seed, draws: Math.max(draws, 100),
    items: [{ series: $("reorder-series").value, on_hand: item.onHand, on_order: item.onOrder,
      service_level: item.level }],
  };
  return { path, payload, answer: (await postJson(path, payload)).body };
}

/** The advice as [term, value] pairs. */
export function reorderFacts(answer) {
  const a = answer.items[0];
  return [
    ["Reorder point", whole.format(a.reorder_point)],
    ["Safety stock", whole.format(a.safety_stock)],
    ["Chance of a stock-out before an order placed now arrives", pct(a.stockout_probability)],
    ["Suggested order now", whole.format(a.suggested_order)],
    ["Expected demand over the lead time", whole.format(a.mean_demand)],
    ["Stock position (on hand + on order)", whole.format(a.inventory_position)],
  ];
}
