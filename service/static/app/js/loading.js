// Panel 1, "Your data": a CSV file or the demo data, checked, listed and plotted.

import { drawSeries } from "./charts.js";
import { describe, readTable } from "./data.js";
import { $, el, showProblems } from "./view.js";

const round = new Intl.NumberFormat(undefined, { maximumFractionDigits: 2 });

/** Show the table (or its problems); returns true when it can be fitted. */
export function showTable(table, source) {
  const ok = table.problems.length === 0;
  const fileWide = table.problems.filter((p) => p.where === "file").map((p) => p.message);
  const lead = ok ? "" : `${source} cannot be used yet. Fix these in the file and load it again; nothing was sent to the server.`;
  const elsewhere = table.problems.length - fileWide.length;
  const note = elsewhere === 1 ? ["1 problem is marked below, next to its column or row."]
    : elsewhere ? [`${elsewhere} problems are marked below, next to their column or row.`] : [];
  showProblems($("data-problems"), ok ? [] : fileWide.concat(note), lead);
  $("data-summary").hidden = table.names.length === 0;
  const known = table.dates.filter(Boolean);
  $("data-caption").textContent = table.names.length
    ? `${source}: ${table.names.length} series, ${table.rows.length} rows` +
      (known.length ? `, ${known[0]} to ${known[known.length - 1]}.` : ".")
    : "";
  listColumns(table);
  listRows(table);
  if (known.length) drawSeries($("data-chart"), table.dates, table.names, table.values);
  return ok;
}

function listColumns(table) {
  const list = $("column-list");
  list.replaceChildren();
  table.names.forEach((name, j) => {
    const problems = table.problems.filter((p) => p.where === "column" && p.column === j);
    const item = el("li", problems.length ? { class: "bad" } : {});
    item.append(el("span", { class: "name", text: name || `(column ${j + 2})` }));
    const d = describe(table.values[name] || []);
    if (d.count) item.append(` ${d.count} values, ${round.format(d.min)} to ${round.format(d.max)}`);
    for (const p of problems) item.append(el("span", { class: "problem", text: p.message }));
    list.append(item);
  });
}

function listRows(table) {
  const rowProblems = table.problems.filter((p) => p.row != null);
  const box = $("row-problems");
  box.hidden = rowProblems.length === 0;
  const t = $("row-problem-table");
  t.replaceChildren();
  if (!rowProblems.length) return;
  const head = el("tr", {}, el("th", { scope: "col", text: "row" }),
    ...table.header.map((h) => el("th", { scope: "col", text: h })), el("th", { scope: "col", text: "problem" }));
  t.append(el("thead", {}, head));
  const body = el("tbody");
  for (const p of rowProblems.slice(0, 20)) {
    const cells = table.rows[p.row - 2] || [];
    const tr = el("tr", { class: "bad" }, el("th", { scope: "row", text: String(p.row) }));
    table.header.forEach((_, c) => {
      const bad = (p.column === -1 && c === 0) || (p.column != null && p.column >= 0 && c === p.column + 1);
      tr.append(el("td", bad ? { class: "bad" } : {}, (cells[c] ?? "").trim()));
    });
    tr.append(el("td", { text: p.message }));
    body.append(tr);
  }
  t.append(body);
}

export async function readFile(file) {
  return readTable(await file.text());
}

export async function readDemo() {
  const response = await fetch("/app/demo.csv");
  return readTable(await response.text());
}
