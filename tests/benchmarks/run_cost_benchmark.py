"""Estimated against measured seconds of the service's work (not a pytest module).

Usage::

    python tests/benchmarks/run_cost_benchmark.py [--out tests/benchmarks/results/costs.md]

:mod:`service.compute.limits` estimates, before a request runs, how many seconds of one core its
computation takes: admission refuses work that cannot finish within the request timeout
and charges the rate limit by the estimate. This script runs each kind of work (one-shot
fits, forecasts, scenarios with ranges, impulse responses, Gibbs fits) at several sizes
on the demo data (5 series) and on 10 series built from it, with one BLAS thread, and
prints the estimate, the measured median of 3 runs and their ratio. Ratios above 1 are
on the safe side (refusing a little early); the admission check needs them to stay
within a small factor of 1 on the reference machine, and the ``cost_scale`` setting
corrects a machine that is uniformly faster or slower (the median ratio tells by how
much).
"""

from __future__ import annotations

import argparse
import statistics
import sys
import time
import warnings
from pathlib import Path

import numpy as np
import pandas as pd
from threadpoolctl import threadpool_limits

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

from priors import FanfoldVAR  # noqa: E402
from service.compute.limits import (  # noqa: E402
    Shape,
    fit_seconds,
    forecast_seconds,
    scenario_seconds,
    shocks_seconds,
)
from service.schemas import ModelSettings  # noqa: E402


def _median_seconds(work, runs: int = 3) -> float:  # noqa: ANN001
    times = []
    for _ in range(runs):
        start = time.perf_counter()
        work()
        times.append(time.perf_counter() - start)
    return statistics.median(times)


def _data() -> dict[str, pd.DataFrame]:
    demo = pd.read_csv(ROOT / "examples" / "bike_parts_demand.csv", index_col=0,
                       parse_dates=True)
    wide = pd.concat([demo, demo.rolling(2, min_periods=1).mean().add_suffix("_avg")], axis=1)
    return {"5 series": demo, "10 series": wide}


def rows() -> list[tuple[str, str, float, float]]:
    out = []
    for label, data in _data().items():
        n, T = data.shape[1], data.shape[0]
        for lags in (2, 4):
            spec = ModelSettings(lags=lags, seasonal=False, transforms="none")
            fit = lambda: FanfoldVAR(lags=lags, seasonal=False, transforms="none").fit(data)  # noqa: E731, B023
            out.append((label, f"conjugate fit, lags {lags}", fit_seconds(spec, n, T),
                        _median_seconds(fit)))
            model = fit()
            shape = Shape.of_model(model)
            for draws, horizon in ((1000, 12), (4000, 52), (10_000, 104)):
                est = forecast_seconds(shape, draws=draws, horizon=horizon)
                run = lambda: model.forecast(horizon, rng=np.random.default_rng(0),  # noqa: E731, B023
                                             draws=draws)  # noqa: B023
                out.append((label, f"forecast lags {lags}, {draws} x {horizon}", est,
                            _median_seconds(run)))
            for draws, horizon in ((1000, 24), (2000, 104)):
                est = shocks_seconds(shape, draws=draws, horizon=horizon)
                run = lambda: model.impulse_responses(horizon, rng=np.random.default_rng(0),  # noqa: E731, B023
                                                      draws=draws)  # noqa: B023
                out.append((label, f"impulse responses lags {lags}, {draws} x {horizon}",
                            est, _median_seconds(run)))
            for draws, sweeps, ranges, horizon in ((1000, 25, 4, 12), (2000, 50, 12, 24),
                                                   (1000, 100, 24, 52)):
                conds = [model.condition(data.columns[i % n], 1 + i // n, lower=-1e9,
                                         upper=1e9, horizon=horizon) for i in range(ranges)]
                est = scenario_seconds(shape, draws=draws, horizon=horizon,
                                       conditions=ranges, ranges=ranges, sweeps=sweeps)
                run = lambda: model.scenario(horizon, conds, rng=np.random.default_rng(0),  # noqa: E731, B023
                                             draws=draws, sweeps=sweeps)  # noqa: B023
                out.append((label, f"scenario lags {lags}, {draws} draws, {sweeps} sweeps, "
                                   f"{ranges} ranges, {horizon} steps", est,
                            _median_seconds(run, runs=1)))
        spec = ModelSettings(lags=2, seasonal=False, transforms="none", prior="independent",
                             chains=2, burn=200, keep=300)
        gibbs = lambda: FanfoldVAR(lags=2, seasonal=False, transforms="none",  # noqa: E731, B023
                                   prior="independent", chains=2, burn=200, keep=300).fit(
            data, rng=np.random.default_rng(0))  # noqa: B023
        out.append((label, "Gibbs fit, lags 2, 2 chains x 500 sweeps", fit_seconds(spec, n, T),
                    _median_seconds(gibbs, runs=1)))
        spec = ModelSettings(lags=4, max_lags=4)  # the automatic configuration
        auto = lambda: FanfoldVAR(max_lags=4).fit(data)  # noqa: E731, B023
        out.append((label, "automatic configuration, up to lags 4", fit_seconds(spec, n, T),
                    _median_seconds(auto, runs=1)))
    return out


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--out", type=Path, default=None)
    args = parser.parse_args()
    with threadpool_limits(limits=1, user_api="blas"), warnings.catch_warnings():
        warnings.simplefilter("ignore")
        table = rows()
    lines = ["# Estimated against measured seconds (service.compute.limits)", "",
             "One BLAS thread; median of 3 runs (1 for scenarios and samplers). Ratio above 1: "
             "the estimate is on the safe side.", "",
             "| data | work | estimated s | measured s | estimated / measured |",
             "|---|---|---|---|---|"]
    ratios = []
    for label, work, est, meas in table:
        ratios.append(est / meas)
        lines.append(f"| {label} | {work} | {est:.3g} | {meas:.3g} | {est / meas:.2f} |")
    lines += ["", f"Median ratio {statistics.median(ratios):.2f}, range "
                  f"{min(ratios):.2f} to {max(ratios):.2f} over {len(ratios)} workloads."]
    text = "\n".join(lines) + "\n"
    print(text)
    if args.out:
        args.out.write_text(text)


if __name__ == "__main__":
    main()
