// Reading a planner's CSV: dates in the first column, one column of numbers per series.
// Pure functions; every problem names its column or row in plain words. The server checks
// again (its answer is shown the same way), this only catches what a spreadsheet export
// usually gets wrong before anything is sent.

export const MIN_ROWS = 3;
const NUMBER = /^[+-]?(\d+(\.\d*)?|\.\d+)([eE][+-]?\d+)?$/;
const ISO_DAY = /^(\d{4})-(\d{2})-(\d{2})(?:[T ].*)?$/;
const ISO_MONTH = /^(\d{4})-(\d{2})$/;

/** Split CSV text into rows of cells ("quoted, fields" and "" escapes allowed). */
export function splitCsv(text) {
  const clean = text.replace(/^\uFEFF/, "");
  const firstLine = clean.split(/\r?\n/, 1)[0] || "";
  const sep = !firstLine.includes(",") && firstLine.includes(";") ? ";" : ",";
  const rows = [];
  let row = [], cell = "", quoted = false;
  for (let i = 0; i < clean.length; i++) {
    const ch = clean[i];
    if (quoted) {
      if (ch === '"' && clean[i + 1] === '"') { cell += '"'; i++; }
      else if (ch === '"') quoted = false;
      else cell += ch;
    } else if (ch === '"') quoted = true;
    else if (ch === sep) { row.push(cell); cell = ""; }
    else if (ch === "\n" || ch === "\r") {
      if (ch === "\r" && clean[i + 1] === "\n") i++;
      row.push(cell); rows.push(row); row = []; cell = "";
    } else cell += ch;
  }
  if (cell !== "" || row.length) { row.push(cell); rows.push(row); }
  return rows.filter((r) => r.some((c) => c.trim() !== ""));
}

/** "2024-03-01" or "2024-03" -> "2024-03-01"; null when it is not a real date. */
export function parseDate(text) {
  const t = text.trim();
  let m = ISO_DAY.exec(t);
  let y, mo, d;
  if (m) [y, mo, d] = [+m[1], +m[2], +m[3]];
  else if ((m = ISO_MONTH.exec(t))) [y, mo, d] = [+m[1], +m[2], 1];
  else return null;
  const day = new Date(Date.UTC(y, mo - 1, d));
  if (day.getUTCFullYear() !== y || day.getUTCMonth() !== mo - 1 || day.getUTCDate() !== d) return null;
  return day.toISOString().slice(0, 10);
}

const quote = (s) => `"${s.length > 30 ? s.slice(0, 30) + "…" : s}"`;

/**
 * Parse and check a CSV text.
 * Returns {names, dates, values: {name: (number|null)[]}, problems, rows} where problems
 * are {where: "file"|"column"|"row", column?, row?, message} and rows keeps the raw cells
 * (row numbers as a spreadsheet shows them: the header is row 1).
 */
export function readTable(text) {
  const problems = [];
  const rows = splitCsv(text);
  if (!rows.length) {
    return { names: [], dates: [], values: {}, rows: [],
      problems: [{ where: "file", message: "The file is empty." }] };
  }
  const header = rows[0].map((h) => h.trim());
  const names = header.slice(1);
  const body = rows.slice(1);
  if (!names.length) {
    problems.push({ where: "file", message: "The file has only one column. Put the dates in the first column and one column of numbers per series after it." });
  }
  const seen = new Map();
  names.forEach((name, j) => {
    if (!name) problems.push({ where: "column", column: j, message: `Column ${j + 2} has no name in the first row.` });
    else if (seen.has(name)) problems.push({ where: "column", column: j, message: `The name "${name}" is used by two columns; give each series its own name.` });
    seen.set(name, j);
  });
  if (body.length < MIN_ROWS) {
    const n = body.length;
    problems.push({ where: "file", message: `The file has ${n} row${n === 1 ? "" : "s"} of data below the names; a forecast needs at least ${MIN_ROWS} periods, and two years or more of history work best.` });
  }
  const dates = [];
  const values = Object.fromEntries(names.map((n) => [n, []]));
  let previous = null;
  body.forEach((cells, i) => {
    const rowNo = i + 2;
    if (cells.length !== header.length) {
      problems.push({ where: "row", row: rowNo, message: `Row ${rowNo} has ${cells.length} cells; the first row has ${header.length} columns.` });
    }
    const rawDate = (cells[0] || "").trim();
    const date = rawDate ? parseDate(rawDate) : null;
    if (!rawDate) problems.push({ where: "row", row: rowNo, column: -1, message: `Row ${rowNo} has no date.` });
    else if (!date) problems.push({ where: "row", row: rowNo, column: -1, message: `Row ${rowNo}: ${quote(rawDate)} is not a date. Write dates as 2024-03-01 (or 2024-03 for a month).` });
    else if (previous && date <= previous) problems.push({ where: "row", row: rowNo, column: -1, message: `Row ${rowNo}: the date ${date} does not come after the row above (${previous}). Sort the rows by date, each date once.` });
    if (date) previous = date;
    dates.push(date);
    names.forEach((name, j) => {
      const cell = (cells[j + 1] ?? "").trim();
      if (cell === "") values[name].push(null);
      else if (NUMBER.test(cell)) values[name].push(Number(cell));
      else {
        values[name].push(undefined);
        problems.push({ where: "column", column: j, row: rowNo, message: `"${name}" has text in row ${rowNo}${date ? ` (${date})` : ""}: ${quote(cell)}. Use numbers only (no units or thousands separators).` });
      }
    });
  });
  names.forEach((name, j) => {
    const v = values[name];
    let last = v.length;
    while (last > 0 && v[last - 1] === null) last--;
    const gap = v.slice(0, last).findIndex((x) => x === null);
    if (gap >= 0) {
      problems.push({ where: "column", column: j, row: gap + 2, message: `"${name}" is empty in row ${gap + 2}${dates[gap] ? ` (${dates[gap]})` : ""}. Fill it in: only the last periods may be left empty (not known yet).` });
    }
    if (last === 0 && v.length) problems.push({ where: "column", column: j, message: `"${name}" has no numbers.` });
  });
  return { names, dates, values, rows: body, header, problems };
}

/** Sensible transform per series: log for demand that is always above zero, log(1+x)
 *  for counts with zeros, the plain values otherwise. */
export function defaultTransform(values) {
  const known = values.filter((x) => typeof x === "number");
  if (known.length && known.every((x) => x > 0)) return "log";
  if (known.length && known.every((x) => x >= 0)) return "log1p";
  return "none";
}

/** Least and greatest known value and how many are known. */
export function describe(values) {
  const known = values.filter((x) => typeof x === "number");
  return { count: known.length, min: Math.min(...known), max: Math.max(...known) };
}
