"""Time a rolling-origin backtest: scenario M (n=7, p=12, T=240), 24 origins, 12 steps,
marginal-likelihood tuning at every origin, 1000 draws, OLS VAR and random-walk
benchmarks on the same origins. Target (issue 6): under 60 s on 2 cores.

    python tests/benchmarks/run_backtest_benchmark.py [--out tests/benchmarks/results/backtest.md]
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

from run_benchmarks import (  # noqa: E402
    FIXED_CONFIG,
    cpu_model,
    repo_commit,
    simulate_var,
    write_report,
)

from priors.backtest import rolling_origin  # noqa: E402


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--origins", type=int, default=24)
    ap.add_argument("--horizon", type=int, default=12)
    ap.add_argument("--draws", type=int, default=1000)
    ap.add_argument("--out", default=str(HERE / "results" / "backtest.md"))
    args = ap.parse_args(argv)
    import scipy.linalg  # noqa: F401
    from threadpoolctl import threadpool_limits

    threadpool_limits(limits=1, user_api="blas")
    Y = simulate_var(7, 12, 240)
    start = time.perf_counter()
    # the workload of the earlier figures: the configuration from before the automatic one
    result = rolling_origin(Y, params={"lags": 12, **FIXED_CONFIG}, origins=args.origins,
                            horizon=args.horizon, draws=args.draws,
                            rng=np.random.default_rng(0))
    elapsed = time.perf_counter() - start
    rel = result.relative("ols_var", "crps")["model"].mean()
    lines = [
        "# Fanfold backtest benchmark", "",
        f"- commit {repo_commit('priors')}; {cpu_model()}; one BLAS thread, one process",
        f"- scenario M (n=7, p=12, T=240), {args.origins} origins, {args.horizon} steps, "
        f"{args.draws} draws, tightness tuned at each origin, OLS VAR and random walk "
        "on the same origins", "",
        "| wall time s | per origin s | target | pass | CRPS model / OLS VAR |",
        "|---|---|---|---|---|",
        f"| {elapsed:.2f} | {elapsed / args.origins:.3f} | < 60 s | "
        f"{'pass' if elapsed < 60 else 'FAIL'} | {rel:.3f} |",
    ]
    write_report("\n".join(lines) + "\n", args.out)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
