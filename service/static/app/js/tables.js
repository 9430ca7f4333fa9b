// The quantile table and the quantiles CSV, from a forecast answer of the API
// ({forecasts: {series: {dates, mean, median, quantiles: {"0.05": [...]}}}}).

/** The quantile levels asked for: the bands 50/80/95 need 0.025..0.975. */
export const LEVELS = [0.025, 0.05, 0.1, 0.25, 0.5, 0.75, 0.9, 0.95, 0.975];
export const BANDS = { 95: ["0.025", "0.975"], 80: ["0.1", "0.9"], 50: ["0.25", "0.75"] };

const shown = new Intl.NumberFormat(undefined, { maximumFractionDigits: 1 });
const percent = (key) => `${+(Number(key) * 100).toFixed(1)}%`;

function cell(tag, text, attrs = {}) {
  const el = document.createElement(tag);
  el.textContent = text;
  for (const [k, v] of Object.entries(attrs)) el.setAttribute(k, v);
  return el;
}

/** Fill `table` with one row per forecast date: mean and every quantile. */
export function fillQuantileTable(table, caption, name, forecast) {
  const keys = Object.keys(forecast.quantiles);
  caption.textContent = `Forecast of ${name}: quantiles by date (in units)`;
  for (const el of [...table.querySelectorAll("thead, tbody")]) el.remove();
  const head = document.createElement("thead");
  const hr = document.createElement("tr");
  hr.append(cell("th", "date", { scope: "col" }), cell("th", "mean", { scope: "col" }));
  for (const k of keys) hr.append(cell("th", k === "0.5" ? "median (50%)" : percent(k), { scope: "col" }));
  head.append(hr);
  const body = document.createElement("tbody");
  forecast.dates.forEach((date, i) => {
    const tr = document.createElement("tr");
    tr.append(cell("th", date, { scope: "row" }), cell("td", fmt(forecast.mean[i])));
    for (const k of keys) tr.append(cell("td", fmt(forecast.quantiles[k][i]), { "data-q": k }));
    body.append(tr);
  });
  table.append(head, body);
}

const fmt = (v) => (v == null ? "–" : shown.format(v));

/** The quantiles of every series as CSV (long layout; numbers exactly as the API sent
 *  them: JavaScript writes the shortest text that reads back as the same double). */
export function quantilesCsv(forecasts) {
  const names = Object.keys(forecasts);
  const keys = Object.keys(forecasts[names[0]].quantiles);
  const lines = [["series", "date", "mean", ...keys.map((k) => `q${k}`)].join(",")];
  for (const name of names) {
    const f = forecasts[name];
    f.dates.forEach((date, i) => {
      const row = [csvText(name), date, num(f.mean[i]), ...keys.map((k) => num(f.quantiles[k][i]))];
      lines.push(row.join(","));
    });
  }
  return lines.join("\n") + "\n";
}

const num = (v) => (v == null ? "" : String(v));
const csvText = (s) => (/[",\n]/.test(s) ? `"${s.replace(/"/g, '""')}"` : s);

/** Offer `blob` as a file download named `filename`. */
export function download(blob, filename) {
  const url = URL.createObjectURL(blob);
  const a = document.createElement("a");
  a.href = url;
  a.download = filename;
  document.body.append(a);
  a.click();
  a.remove();
  setTimeout(() => URL.revokeObjectURL(url), 10_000);
}
