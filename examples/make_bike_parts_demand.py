"""Generate the Fanfold demo dataset: monthly unit demand at a bicycle-parts wholesaler.

The data are invented for demos and tests. The scenario, the product lines and every
number below are made up; they do not come from any real company.

Scenario
--------
A wholesaler sells five product lines to bike shops. Demand (units shipped per month)
is seasonal -- it peaks in late spring / early summer, the cycling season, and dips a
little in winter -- and the lines feed each other with a one-month delay:

* tyres -> inner_tubes (+0.80, strong): shops that restock tyres restock tubes next month.
* tyres -> brake_pads (+0.30, moderate): a tyre-service month is followed by brake jobs.
* chains -> cassettes (+0.25): worn chains wear out cassettes, which are replaced later.
* brake_pads -> chains (-0.10, small): a weak crowding-out of workshop time; deliberately
  below the "recoverable" threshold used by ``known_cross_effects``.

Data-generating process
-----------------------
Levels, no transform. With y_t the 5-vector (tyres, inner_tubes, brake_pads, chains,
cassettes) and m(t) the calendar month of t (1..12):

    y_t = c + s_m(t) + A_1 y_{t-1} + A_2 y_{t-2} + e_t,    e_t ~ N(0, Sigma) i.i.d.

    c        = INTERCEPT                   (constant, units per month)
    s_m      = SEASONAL[m - 1]             (seasonal intercepts; mean 0 over the 12 months)
    A_1, A_2 = LAG_MATRICES                (A_l[i, j] = effect of series j at lag l on i)
    Sigma    = INNOVATION_COV              (= D R D with D = INNOVATION_SD, R = INNOVATION_CORR)

The process is stationary: the companion matrix has spectral radius < 0.9 (asserted at
import). The unconditional mean is mu = (I - A_1 - A_2)^{-1} c = tyres 1200,
inner_tubes 2000, brake_pads 800, chains 600, cassettes 300 units per month. The
simulation starts at mu, runs BURN_IN months that are discarded, and keeps the next
``n_months``. Values are rounded to whole units and clipped at 0.

Run ``python examples/make_bike_parts_demand.py`` to (re)write ``bike_parts_demand.csv``
next to this script; ``--out`` and ``--seed`` override the defaults.
"""

from __future__ import annotations

import argparse
from pathlib import Path

import numpy as np
import pandas as pd

SERIES: tuple[str, ...] = ("tyres", "inner_tubes", "brake_pads", "chains", "cassettes")
DEFAULT_SEED = 20260101
BURN_IN = 100
RECOVERABLE_THRESHOLD = 0.15

#: Constant c (units per month).
INTERCEPT = np.array([420.0, 140.0, 40.0, 320.0, 30.0])

#: A_1 and A_2; rows = equation (affected series), columns = lagged series.
LAG_MATRICES: list[np.ndarray] = [
    np.array(
        [
            # tyres inner_tubes brake_pads chains cassettes
            [0.50, 0.00, 0.00, 0.00, 0.00],  # tyres
            [0.80, 0.35, 0.00, 0.00, 0.00],  # inner_tubes
            [0.30, 0.00, 0.40, 0.00, 0.00],  # brake_pads
            [0.00, 0.00, -0.10, 0.45, 0.00],  # chains
            [0.00, 0.00, 0.00, 0.25, 0.30],  # cassettes
        ]
    ),
    np.diag([0.15, 0.10, 0.10, 0.15, 0.10]),
]

#: Seasonal shape (Jan..Dec): sharp cycling-season peak, smaller winter dip, sums to 0.
SEASONAL_PROFILE = np.array([-0.5, -0.3, 0.2, 0.6, 1.0, 0.9, 0.4, -0.1, -0.4, -0.5, -0.7, -0.6])
#: Peak seasonal intercept per series (units per month).
SEASONAL_AMPLITUDE = np.array([120.0, 60.0, 20.0, 30.0, 8.0])
#: s_m, shape (12, n): additive seasonal intercepts, mean 0 over the months.
SEASONAL = np.outer(SEASONAL_PROFILE, SEASONAL_AMPLITUDE)

#: Innovation standard deviations (units per month).
INNOVATION_SD = np.array([96.0, 100.0, 40.0, 40.0, 15.0])
#: Innovation correlations: a common "shop traffic" shock moves all lines together a bit.
INNOVATION_CORR = np.array(
    [
        [1.0, 0.3, 0.2, 0.1, 0.1],
        [0.3, 1.0, 0.2, 0.1, 0.1],
        [0.2, 0.2, 1.0, 0.2, 0.1],
        [0.1, 0.1, 0.2, 1.0, 0.3],
        [0.1, 0.1, 0.1, 0.3, 1.0],
    ]
)
#: Sigma = D R D.
INNOVATION_COV = INNOVATION_SD[:, None] * INNOVATION_CORR * INNOVATION_SD[None, :]


def companion_matrix() -> np.ndarray:
    """Companion matrix of the VAR(2) lag polynomial, shape (2n, 2n)."""
    n = len(SERIES)
    top = np.hstack(LAG_MATRICES)
    bottom = np.hstack([np.eye(n), np.zeros((n, n))])
    return np.vstack([top, bottom])


def unconditional_mean() -> np.ndarray:
    """Mean of y_t averaged over the year: (I - A_1 - A_2)^{-1} c."""
    return np.linalg.solve(np.eye(len(SERIES)) - sum(LAG_MATRICES), INTERCEPT)


def known_cross_effects() -> dict[tuple[str, str], int]:
    """Map (from_series, to_series) -> sign for each recoverable lag-1 cross-effect."""
    a1 = LAG_MATRICES[0]
    return {
        (SERIES[j], SERIES[i]): int(np.sign(a1[i, j]))
        for i in range(len(SERIES))
        for j in range(len(SERIES))
        if i != j and abs(a1[i, j]) >= RECOVERABLE_THRESHOLD
    }


def simulate(seed: int, n_months: int = 120, start: str = "2016-01-01") -> pd.DataFrame:
    """Simulate the true process; integer units, DatetimeIndex ``date`` with freq MS."""
    rng = np.random.default_rng(seed)
    index = pd.date_range(start, periods=n_months, freq="MS", name="date")
    total = BURN_IN + n_months
    # Calendar month (0..11) of every simulated period, burn-in included.
    months = (np.arange(-BURN_IN, n_months) + pd.Timestamp(start).month - 1) % 12
    # e_t = L z_t with L L' = Sigma: explicit Cholesky keeps draws identical across BLAS builds.
    shocks = rng.standard_normal((total, len(SERIES))) @ np.linalg.cholesky(INNOVATION_COV).T
    a1, a2 = LAG_MATRICES
    mean = unconditional_mean()
    prev1, prev2 = mean, mean
    y = np.empty((total, len(SERIES)))
    for t in range(total):
        y[t] = INTERCEPT + SEASONAL[months[t]] + a1 @ prev1 + a2 @ prev2 + shocks[t]
        prev1, prev2 = y[t], prev1
    units = np.clip(np.rint(y[BURN_IN:]), 0, None).astype(np.int64)
    return pd.DataFrame(units, index=index, columns=list(SERIES))


def _check_truth() -> None:
    radius = np.max(np.abs(np.linalg.eigvals(companion_matrix())))
    assert radius < 0.9, f"companion spectral radius {radius:.3f} >= 0.9"
    assert SEASONAL.shape == (12, len(SERIES))
    assert np.allclose(SEASONAL.mean(axis=0), 0.0)
    assert np.all(np.linalg.eigvalsh(INNOVATION_COV) > 0)


_check_truth()


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument(
        "--out",
        type=Path,
        default=Path(__file__).with_name("bike_parts_demand.csv"),
        help="output CSV path (default: bike_parts_demand.csv next to this script)",
    )
    parser.add_argument("--seed", type=int, default=DEFAULT_SEED, help="RNG seed")
    args = parser.parse_args(argv)
    frame = simulate(args.seed)
    frame.to_csv(args.out, date_format="%Y-%m-%d")
    print(f"wrote {len(frame)} rows to {args.out}")


if __name__ == "__main__":
    main()
