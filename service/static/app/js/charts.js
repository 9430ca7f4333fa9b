// Charts on the page, drawn with Chart.js (vendored: /app/vendor, see VENDORED.md).
// The fan chart has the look of service/output/charts.py (the API's fan-chart.svg and the CLI's
// --plot): history in near-black, the forecast origin dashed grey, nested bands in one
// hue at three lightnesses (widest lightest), the median darkest. A test keeps these
// colours equal to the Python ones.

export const BAND_SHADES = ["#c6dbef", "#6baed6", "#3182bd"]; // light to dark
export const MEDIAN_COLOUR = "#08306b";
export const HISTORY_COLOUR = "#252525";
export const ORIGIN_COLOUR = "#737373";
export const PLAN_COLOUR = "#bf5a00";
// Okabe & Ito's colour-blind-safe set (yellow left out: too faint on white)
const SERIES_COLOURS = ["#0072B2", "#E69F00", "#009E73", "#D55E00", "#CC79A7", "#56B4E9", "#000000"];

/** A dashed vertical line at the forecast origin (options.plugins.originLine.index). */
const originLine = {
  id: "originLine",
  afterDatasetsDraw(chart, _args, options) {
    if (options.index == null) return;
    const x = chart.scales.x.getPixelForValue(options.index);
    const { top, bottom } = chart.chartArea;
    const ctx = chart.ctx;
    ctx.save();
    ctx.strokeStyle = ORIGIN_COLOUR;
    ctx.lineWidth = 1;
    ctx.setLineDash([6, 4]);
    ctx.beginPath();
    ctx.moveTo(x, top);
    ctx.lineTo(x, bottom);
    ctx.stroke();
    ctx.restore();
  },
};

function chartLib() {
  if (!window.Chart) throw new Error("The chart library did not load; reload the page.");
  return window.Chart;
}

function shadesFor(coverages) {
  const wideFirst = [...coverages].sort((a, b) => b - a);
  const picks = wideFirst.length === 3 ? BAND_SHADES
    : wideFirst.length === 2 ? [BAND_SHADES[0], BAND_SHADES[2]] : [BAND_SHADES[1]];
  return wideFirst.map((c, i) => [c, picks[Math.min(i, picks.length - 1)]]);
}

const pad = (n, arr) => new Array(n).fill(null).concat(arr);
const compact = new Intl.NumberFormat(undefined, { maximumSignificantDigits: 4 });

function baseOptions(yTitle, originIndex) {
  return {
    animation: false,
    responsive: true,
    maintainAspectRatio: false,
    interaction: { mode: "index", intersect: false },
    scales: {
      x: { title: { display: true, text: "date" }, ticks: { autoSkip: true, maxTicksLimit: 7, maxRotation: 0 } },
      y: { title: { display: true, text: yTitle }, ticks: { callback: (v) => compact.format(v) } },
    },
    plugins: {
      originLine: { index: originIndex },
      legend: {
        position: "bottom",
        labels: { boxWidth: 18, usePointStyle: true, pointStyleWidth: 20, padding: 8, font: { size: 11 },
          filter: (item) => !item.text.startsWith("_") },
      },
      tooltip: {
        filter: (item) => !item.dataset.label.startsWith("_") && item.raw != null,
        callbacks: { label: (item) => `${item.dataset.label}: ${compact.format(item.raw)}` },
      },
    },
  };
}

/**
 * Draw (or redraw) one series' fan chart on `canvas`.
 * fan = {name, historyDates, history, dates, median, bands: {coverage: [lower, upper]},
 *        baseline?: median of the plain forecast, plan?: [{step, value, kind}]}
 */
export function drawFan(canvas, fan) {
  const Chart = chartLib();
  Chart.getChart(canvas)?.destroy();
  const h = fan.history.length;
  const origin = h ? h - 1 : null;
  // the fan opens at the last observation, so it starts where the history ends
  const lead = h ? h - 1 : 0;
  const start = h ? [fan.history[h - 1]] : [];
  const future = (arr) => pad(lead, start.concat(arr));
  const datasets = [];
  if (h) {
    datasets.push({ label: "history", pointStyle: "line", data: fan.history, borderColor: HISTORY_COLOUR,
      backgroundColor: HISTORY_COLOUR, borderWidth: 1.5, pointRadius: 0 });
    datasets.push({ label: "forecast origin", pointStyle: "line", data: [], borderColor: ORIGIN_COLOUR,
      backgroundColor: "#ffffff", borderDash: [6, 4], borderWidth: 1.5 });
  }
  for (const [cov, shade] of shadesFor(Object.keys(fan.bands).map(Number))) {
    const [lower, upper] = fan.bands[cov];
    datasets.push({ label: `_${cov} lower`, data: future(lower), borderWidth: 0, pointRadius: 0, fill: false });
    datasets.push({ label: `${cov}% band`, data: future(upper), borderWidth: 0, pointRadius: 0,
      backgroundColor: shade, borderColor: shade, fill: "-1", pointStyle: "rect" });
  }
  datasets.push({ label: "median", pointStyle: "line", data: future(fan.median), borderColor: MEDIAN_COLOUR,
    backgroundColor: MEDIAN_COLOUR, borderWidth: 2, pointRadius: 0 });
  if (fan.baseline) {
    datasets.push({ label: "median without the plan", pointStyle: "line", data: future(fan.baseline), borderColor: ORIGIN_COLOUR,
      backgroundColor: ORIGIN_COLOUR, borderDash: [4, 3], borderWidth: 1.5, pointRadius: 0 });
  }
  if (fan.plan && fan.plan.length) {
    const points = new Array(h + fan.dates.length).fill(null);
    for (const p of fan.plan) points[h + p.step - 1] = p.value;
    const shape = { value: "circle", lower: "triangle", upper: "triangle" }[fan.plan[0].kind];
    datasets.push({ label: "your plan", data: points, showLine: false, pointStyle: shape,
      rotation: fan.plan[0].kind === "upper" ? 180 : 0, pointRadius: 5,
      borderColor: PLAN_COLOUR, backgroundColor: PLAN_COLOUR });
  }
  // Chart.js draws the first dataset on top: reverse, so the median lies over the bands
  // (each band then fills to its lower edge, the dataset after it), and list the
  // legend in reverse to read in the order above
  const drawn = datasets.reverse().map((d) => (d.fill === "-1" ? { ...d, fill: "+1" } : d));
  const options = baseOptions(`${fan.name} (units)`, origin);
  options.plugins.legend.reverse = true;
  options.plugins.tooltip.itemSort = (a, b) => b.datasetIndex - a.datasetIndex;
  return new Chart(canvas, {
    type: "line",
    data: { labels: dateLabels(fan.historyDates.concat(fan.dates)), datasets: drawn },
    options,
    plugins: [originLine],
  });
}

/** Month-start dates read as "2024-03"; other dates stay whole. */
function dateLabels(dates) {
  const months = dates.every((d) => d == null || d.endsWith("-01"));
  return dates.map((d) => (d == null ? "?" : months ? d.slice(0, 7) : d));
}

/** All series of the loaded data in one chart, one colour each. */
export function drawSeries(canvas, dates, names, values) {
  const Chart = chartLib();
  Chart.getChart(canvas)?.destroy();
  const datasets = names.map((name, i) => ({
    label: name,
    data: values[name].map((v) => (typeof v === "number" ? v : null)),
    borderColor: SERIES_COLOURS[i % SERIES_COLOURS.length],
    backgroundColor: SERIES_COLOURS[i % SERIES_COLOURS.length],
    borderWidth: 1.5, pointRadius: 0, pointStyle: "line",
    borderDash: i >= SERIES_COLOURS.length ? [5, 3] : [],
  }));
  return new Chart(canvas, {
    type: "line",
    data: { labels: dateLabels(dates), datasets },
    options: baseOptions("units", null),
    plugins: [originLine],
  });
}
