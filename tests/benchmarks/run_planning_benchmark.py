"""Time the planning products next to a plain forecast, and check how fast the range
sampler mixes.

1. Scenarios M (n=7, p=12, T=240) and L (n=20, p=13, T=400), 2000 draws, 12 steps: the
   unconditional forecast, a scenario fixing one series for all 12 steps, a scenario with
   3 ranges, impulse responses (24 steps, 1000 draws), the variance decomposition and
   replenishment advice for every series; wall time and the ratio to the forecast.
2. Mixing of the Gibbs sampler for ranges (priors.scenarios): with the parameters fixed,
   six ranges on consecutive steps of a persistent AR(1) (strongly correlated cells,
   0.15% of paths inside), the largest two-sample Kolmogorov-Smirnov distance over the
   cells between the Gibbs draws after k sweeps and exact rejection draws.

    python tests/benchmarks/run_planning_benchmark.py [--out tests/benchmarks/results/planning.md]
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
sys.path.insert(0, str(HERE.parents[1]))

from run_benchmarks import cpu_model, repo_commit, simulate_var, write_report  # noqa: E402

from priors import FanfoldVAR  # noqa: E402
from priors.inventory import replenishment_advice, window_totals  # noqa: E402
from priors.scenarios import Condition, conditional_paths, model_unit_conditions  # noqa: E402

SCENARIOS = {"M": (7, 12, 240), "L": (20, 13, 400)}


def _best(fn, repeats: int) -> float:
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return min(times)


def time_products(name: str, draws: int, repeats: int) -> list[str]:
    n, p, T = SCENARIOS[name]
    Y = simulate_var(n, p, T)
    model = FanfoldVAR(lags=p, tightness=0.2, transforms=None, seasonal=False, sum_coef=None,
                       initial=None).fit(Y)
    h = 12
    mean_path = model.forecast(h, rng=np.random.default_rng(0), draws=500).mean()
    fixed = [Condition(0, t, float(mean_path[t - 1, 0] + 1.0), float(mean_path[t - 1, 0] + 1.0))
             for t in range(1, h + 1)]
    ranges = [Condition(1, t, float(mean_path[t - 1, 1]), float(mean_path[t - 1, 1] + 2.0))
              for t in (2, 4, 6)]

    def rng() -> np.random.Generator:
        return np.random.default_rng(1)

    def advice() -> None:
        fc = model.forecast(3, rng=rng(), draws=draws)
        for j in range(n):
            replenishment_advice(window_totals(fc.paths, 1, 3)[:, j], on_hand=0.0,
                                 service_level=0.95)

    rows = [
        ("forecast (12 steps)", lambda: model.forecast(h, rng=rng(), draws=draws)),
        ("scenario, one series fixed for 12 steps",
         lambda: model.scenario(h, fixed, rng=rng(), draws=draws)),
        ("scenario, 3 ranges (25 sweeps)",
         lambda: model.scenario(h, ranges, rng=rng(), draws=draws)),
        ("impulse responses (24 steps, 1000 draws)",
         lambda: model.impulse_responses(24, rng=rng(), draws=1000)),
        ("variance decomposition (24 steps, 1000 draws)",
         lambda: model.variance_decomposition(24, rng=rng(), draws=1000)),
        ("replenishment advice, every series (3 steps)", advice),
    ]
    base = None
    out = []
    for label, fn in rows:
        t = _best(fn, repeats)
        base = base or t
        out.append(f"| {name} | {label} | {t:.3f} | {t / base:.1f} |")
    return out


def mixing(draws: int) -> list[str]:
    """KS distance between Gibbs draws after k sweeps and exact rejection draws."""
    from scipy import stats

    h, lo, hi, phi = 6, 0.6, 1.6, 0.95  # AR(1) from 0; every step inside [0.6, 1.6]
    rng = np.random.default_rng(99)
    kept, total = [], 0
    for _ in range(40):  # exact reference: rejection from 40 million paths
        e = rng.standard_normal((1_000_000, h))
        y = np.empty_like(e)
        prev = np.zeros(e.shape[0])
        for t in range(h):
            prev = phi * prev + e[:, t]
            y[:, t] = prev
        kept.append(y[np.all((y >= lo) & (y <= hi), axis=1)])
        total += e.shape[0]
    exact = np.concatenate(kept)
    B = np.repeat(np.array([[0.0], [phi]])[None], draws, axis=0)
    M = np.ones((draws, 1, 1))
    cs = model_unit_conditions([Condition(0, t, lo, hi) for t in range(1, h + 1)], ("none",),
                               np.array([0.0]), h)
    crit = 1.628 * np.sqrt(1 / draws + 1 / exact.shape[0])  # two-sample, alpha = 0.01
    lines = [f"AR(1) with coefficient {phi} from 0, every one of {h} steps kept inside "
             f"[{lo}, {hi}]. Exact reference: {exact.shape[0]} of {total} unconditional "
             f"paths accepted ({exact.shape[0] / total:.2%}); Gibbs: {draws} draws.", "",
             "| sweeps | max KS distance over the cells | smallest KS p-value | "
             "KS 1% critical value (one cell) |", "|---|---|---|---|"]
    for sweeps in (1, 2, 5, 10, 25, 50):
        g = conditional_paths(np.random.default_rng(sweeps), B, M, np.array([[0.0]]),
                              np.ones((h, 1)), cs, n_det=1, sweeps=sweeps).conditional[:, :, 0]
        res = [stats.ks_2samp(g[:, t], exact[:, t]) for t in range(h)]
        lines.append(f"| {sweeps} | {max(r.statistic for r in res):.4f} | "
                     f"{min(r.pvalue for r in res):.3g} | {crit:.4f} |")
    return lines


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--draws", type=int, default=2000)
    ap.add_argument("--repeats", type=int, default=3)
    ap.add_argument("--out", default=str(HERE / "results" / "planning.md"))
    args = ap.parse_args(argv)
    from threadpoolctl import threadpool_limits

    threadpool_limits(limits=1, user_api="blas")
    lines = [
        "# Fanfold planning benchmark", "",
        f"- commit {repo_commit('priors')}; {cpu_model()}; one BLAS thread, one process",
        f"- {args.draws} draws, best of {args.repeats}; ratio = time / the plain forecast's "
        "time in the same scenario", "",
        "| scenario | product | wall time s | ratio |", "|---|---|---|---|",
    ]
    for name in SCENARIOS:
        lines += time_products(name, args.draws, args.repeats)
    lines += ["", "## Mixing of the range sampler", ""] + mixing(args.draws * 10)
    write_report("\n".join(lines) + "\n", args.out)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
