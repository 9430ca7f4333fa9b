"""Forecast quality of the defaults on the open-data corpus (tests/corpus.py).

For every set: rolling-origin forecasts of ``FanfoldVAR()`` on its defaults (the automatic
configuration) and of the benchmarks (seasonal naive, per-series damped Holt-Winters, the
OLS VAR, the random walk), scored by RMSE, CRPS and the coverage of the central 50% and
90% intervals (tests/evaluation.py). Relative scores are the model's over a benchmark's,
per series and horizon, averaged. Prints a table, checks the targets of the defaults and
writes ``results/corpus.md``:

- beat the seasonal naive forecast on every seasonal set (relative RMSE < 1);
- beat per-series Holt-Winters on average over the open sets (the demo left out);
- never worse than the OLS VAR by more than 2% on any set (relative RMSE <= 1.02);
- interval coverage within 5 percentage points of nominal.

    python tests/benchmarks/run_corpus_benchmark.py [--sets a,b] [--draws 1000] [--jobs 2]
        [--params '{"seasonal": false}']   (other settings than the defaults, to compare)

Not part of pass/fail; ``tests/priors/test_corpus_defaults.py`` asserts the targets on a
few sets.
"""

from __future__ import annotations

import argparse
import json
import sys
import time
from concurrent.futures import ProcessPoolExecutor
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
REPO = HERE.parent.parent
sys.path.insert(0, str(HERE))
sys.path.insert(0, str(REPO))

from run_benchmarks import cpu_model, repo_commit, write_report  # noqa: E402

from tests.corpus import LOADERS, load  # noqa: E402
from tests.evaluation import BENCHMARKS, score_set  # noqa: E402

TARGETS = {"seasonal_naive": 1.0, "ols_var": 1.02, "coverage_pp": 5.0}


def score_one(name: str, draws: int, params: dict[str, object]) -> dict[str, object]:
    cs = load(name)
    started = time.perf_counter()
    s = score_set(cs, params, draws=draws)
    row: dict[str, object] = {"set": name, "period": cs.period, "origins": cs.origins,
                              "horizon": cs.horizon, "source": cs.source,
                              "seconds": time.perf_counter() - started}
    for bench in BENCHMARKS:
        if bench in s.se:
            row[f"rmse_{bench}"] = s.relative("model", bench)
            row[f"crps_{bench}"] = s.relative("model", bench, "crps")
    for level in (0.5, 0.9):
        row[f"cov{int(level * 100)}"] = s.coverage("model", level)
    return row


def verdicts(rows: list[dict[str, object]]) -> list[str]:
    """The targets, one line each, with PASS or MISS."""
    out = []
    for r in rows:
        name = r["set"]
        if r["period"] and "rmse_seasonal_naive" in r:
            v = float(r["rmse_seasonal_naive"])  # type: ignore[arg-type]
            out.append(f"{'PASS' if v < 1 else 'MISS'} {name}: RMSE / seasonal naive {v:.3f} "
                       "(target < 1)")
        v = float(r["rmse_ols_var"])  # type: ignore[arg-type]
        out.append(f"{'PASS' if v <= 1.02 else 'MISS'} {name}: RMSE / OLS VAR {v:.3f} "
                   "(target <= 1.02)")
        for level in (50, 90):
            c = 100 * float(r[f"cov{level}"])  # type: ignore[arg-type]
            ok = abs(c - level) <= TARGETS["coverage_pp"]
            out.append(f"{'PASS' if ok else 'MISS'} {name}: {level}% interval covers "
                       f"{c:.1f}% (target {level} +- 5)")
    open_sets = [r for r in rows if r["set"] != "bike_demo"]
    mean_hw = float(np.mean([float(r["rmse_holt_winters"]) for r in open_sets]))  # type: ignore[arg-type]
    out.append(f"{'PASS' if mean_hw < 1 else 'MISS'} average over {len(open_sets)} open sets: "
               f"RMSE / Holt-Winters {mean_hw:.3f} (target < 1)")
    return out


def table(rows: list[dict[str, object]]) -> list[str]:
    head = ("| set | origins x h | RMSE / SN | RMSE / HW | RMSE / OLS | RMSE / RW | "
            "CRPS / SN | CRPS / HW | CRPS / OLS | CRPS / RW | cov 50 | cov 90 | s |")
    lines = [head, "|" + "---|" * 13]

    def cell(r: dict[str, object], key: str) -> str:
        v = r.get(key)
        return "-" if v is None else f"{float(v):.3f}"  # type: ignore[arg-type]

    for r in rows:
        lines.append(
            f"| {r['set']} | {r['origins']} x {r['horizon']} | "
            + " | ".join(cell(r, f"{m}_{b}") for m in ("rmse", "crps") for b in BENCHMARKS)
            + f" | {float(r['cov50']):.2f} | {float(r['cov90']):.2f} | "  # type: ignore[arg-type]
            f"{float(r['seconds']):.0f} |")  # type: ignore[arg-type]
    return lines


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--sets", default=",".join(LOADERS))
    ap.add_argument("--draws", type=int, default=1000)
    ap.add_argument("--jobs", type=int, default=2)
    ap.add_argument("--params", default="{}", help="FanfoldVAR settings as JSON (default: "
                    "none, i.e. the defaults)")
    ap.add_argument("--out", default=str(HERE / "results" / "corpus.md"))
    args = ap.parse_args(argv)
    names = [s for s in args.sets.split(",") if s]
    params = json.loads(args.params)
    started = time.perf_counter()
    with ProcessPoolExecutor(max_workers=args.jobs) as pool:
        rows = list(pool.map(score_one, names, [args.draws] * len(names),
                             [params] * len(names)))
    title = "the defaults" if not params else f"FanfoldVAR(**{params})"
    lines = [f"# Forecast quality of {title} on the open-data corpus", "",
             f"commit {repo_commit('priors', 'service', 'tests')}, {cpu_model()}, "
             f"{args.draws} draws, "
             f"{time.perf_counter() - started:.0f} s in all", "",
             "Relative scores: the default's over the benchmark's, per series and horizon, "
             "averaged (below 1: the default is better). SN seasonal naive, HW per-series "
             "damped Holt-Winters (statsmodels ETSModel), OLS the flat-prior VAR (lags by "
             "BIC, seasonal dummies on seasonal sets), RW random walk.", "",
             *table(rows), "", "Targets:", "", *(f"- {v}" for v in verdicts(rows)), "",
             "Sources:", "", *(f"- {r['set']}: {r['source']}" for r in rows)]
    write_report("\n".join(lines), args.out)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
