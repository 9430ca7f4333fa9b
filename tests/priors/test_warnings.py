"""ShortHistoryWarning: a model fitted on a history short for its lag order says so."""

from __future__ import annotations

import warnings
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from priors import FanfoldVAR, ShortHistoryWarning
from priors.data import Deterministics, build_design, check_history, load_series
from priors.model import default_max_lags

DEMO_CSV = Path(__file__).resolve().parents[2] / "examples" / "bike_parts_demand.csv"


def _frame(rows: int, n: int, freq: str = "MS", seed: int = 3) -> pd.DataFrame:
    values = 10.0 + np.random.default_rng(seed).standard_normal((rows, n))
    index = pd.date_range("2000-01-01", periods=rows, freq=freq)
    return pd.DataFrame(values, index=index, columns=[f"s{j}" for j in range(n)])


def _shorts(caught: list[warnings.WarningMessage]) -> list[warnings.WarningMessage]:
    return [w for w in caught if issubclass(w.category, ShortHistoryWarning)]


def test_ten_rows_three_series_var3_warns_with_counts_and_advice():
    """The user trial: it used to fit silently."""
    with pytest.warns(ShortHistoryWarning) as caught:
        FanfoldVAR(lags=3, tightness=0.2).fit(_frame(10, 3))
    (w,) = _shorts(list(caught))
    text = str(w.message)
    assert "short history for 3 lag(s): 7 estimation rows for 10 coefficients" in text
    assert "3 series x 3 lag(s) + 1 deterministic/exogenous term(s)" in text
    assert "at least 18 rows" in text and "shrinkage" in text
    assert ("Use fewer lags (lags=1 meets the rule), fewer series or 11 more period(s) "
            "of history") in text
    assert w.filename == __file__  # points at the caller's fit, not into priors


@pytest.mark.parametrize(("rows", "n", "freq", "lags", "seasonal"), [
    (120, 5, "MS", 1, False),   # the demo's shape, the lag order it chooses
    (120, 5, "MS", 2, True),    # ... with monthly dummies
    (120, 3, "MS", 4, False),
    (200, 7, "QS", 8, False),   # quarterly macro data, up to 8 lags
    (76, 5, "QS", 4, True),     # constant and 3 seasonal dummies
])
def test_ordinary_shapes_pass_the_rule(rows, n, freq, lags, seasonal):
    series = load_series(_frame(rows, n, freq))
    design = build_design(series, lags, Deterministics(seasonal=seasonal))
    assert check_history(design) is None


def test_the_rule_is_rows_below_coefficients_or_two_per_lag_coefficient():
    series = load_series(_frame(40, 2))
    # 2 series: 2 n p binds; T = 40 - p rows against max(1 + 2p + 1, 4p)
    assert check_history(build_design(series, 8, Deterministics())) is None  # 32 >= 32
    assert check_history(build_design(series, 9, Deterministics())) is not None  # 31 < 36
    # many deterministic terms: k + 1 binds (3 series, 1 lag, constant and 11 monthly
    # dummies: k = 15 coefficients, 2 n p = 6)
    monthly = load_series(_frame(16, 3))
    message = check_history(build_design(monthly, 1, Deterministics(seasonal=True)))
    assert message is not None
    assert "15 estimation rows for 15 coefficients" in message and "at least 16 rows" in message
    assert "Use fewer series, fewer deterministic/exogenous terms or 1 more" in message


def test_when_no_lag_order_fits_fewer_lags_is_not_offered():
    series = load_series(_frame(8, 4))
    message = check_history(build_design(series, 1, Deterministics()))
    assert message is not None and "fewer lags" not in message
    assert "Use fewer series or 1 more period(s) of history" in message


def test_demo_data_with_default_settings_does_not_warn():
    """The lag search tries orders that would warn (13 lags of 5 series on 107 rows);
    only the chosen model is checked, and it passes."""
    demo = pd.read_csv(DEMO_CSV, index_col=0, parse_dates=True)
    series = load_series(demo)
    p_max = default_max_lags("monthly")
    assert check_history(build_design(series, p_max, Deterministics())) is not None
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        model = FanfoldVAR().fit(demo)
    assert not _shorts(caught), [str(w.message) for w in _shorts(caught)]
    assert check_history(model.design_) is None
