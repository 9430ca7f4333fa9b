"""Properties of fitted models and forecasts over many small random data sets (hypothesis).

Data are simulated from a stable VAR(1) whose own-lag coefficients and seed hypothesis
draws, so every example is well-posed; raw random arrays are used only where any finite
numbers will do (summaries of given paths).
"""

from __future__ import annotations

import warnings

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays

from priors import ConvergenceWarning, FanfoldVAR, Forecast

FAST = settings(max_examples=25, deadline=None)
LEVELS = (0.025, 0.1, 0.25, 0.5, 0.75, 0.9, 0.975)


@st.composite
def var_data(draw) -> np.ndarray:
    """(T, n) data from y_t = c + A y_{t-1} + e_t, diag(A) in [-0.7, 0.7], weak coupling."""
    n = draw(st.integers(1, 3))
    T = draw(st.integers(30, 60))
    own = draw(arrays(np.float64, n, elements=st.floats(-0.7, 0.7)))
    seed = draw(st.integers(0, 2**32 - 1))
    rng = np.random.default_rng(seed)
    A = np.diag(own) + 0.1 * rng.uniform(-1, 1, (n, n)) * (1 - np.eye(n))
    c = rng.uniform(-1, 1, n)
    y = np.zeros((T + 50, n))
    for t in range(1, T + 50):
        y[t] = c + A @ y[t - 1] + rng.standard_normal(n)
    return y[50:]


def _fit(y: np.ndarray, lags: int, **kwargs) -> FanfoldVAR:
    """Fit with the default prior; the tightness may legitimately end at its search bound."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        return FanfoldVAR(lags=lags, **kwargs).fit(y)


paths_strategy = arrays(
    np.float64,
    st.tuples(st.integers(1, 40), st.integers(1, 6), st.integers(1, 3)),
    elements=st.floats(-1e6, 1e6, allow_subnormal=False),
)


# ---------------------------------------------------------------- fitted models


@FAST
@given(y=var_data(), lags=st.sampled_from([1, 2]), h=st.integers(1, 6),
       seed=st.integers(0, 2**32 - 1))
def test_forecast_shape_finite_and_reproducible(y, lags, h, seed):
    model = _fit(y, lags)
    fc = model.forecast(h, rng=np.random.default_rng(seed), draws=200)
    assert fc.paths.shape == (200, h, y.shape[1])
    assert np.all(np.isfinite(fc.paths))
    again = model.forecast(h, rng=np.random.default_rng(seed), draws=200)
    assert np.array_equal(fc.paths, again.paths)


@FAST
@given(y=var_data(), lags=st.sampled_from([1, 2]), data=st.data())
def test_permuting_series_permutes_the_posterior(y, lags, data):
    n = y.shape[1]
    perm = np.array(data.draw(st.permutations(range(n))), dtype=int)
    # fixed hyperparameters keep the comparison exact: tuning stops at a tolerance, and
    # the tuned dummy weights differed by 1.5e-8 between orders on one drawn example;
    # the dummy priors themselves are in (sum-of-coefficients and initial observation)
    fixed = {"lags": lags, "tightness": 0.2, "sum_coef": 1.0, "initial": 1.0,
             "transforms": "none"}
    base = FanfoldVAR(**fixed).fit(y)
    swapped = FanfoldVAR(**fixed).fit(y[:, perm])
    # rows of B: const, then lag blocks of n series each
    rows = np.concatenate([[0], 1 + (np.arange(lags)[:, None] * n + perm).ravel()])
    np.testing.assert_allclose(swapped.posterior_.B, base.posterior_.B[rows][:, perm],
                               rtol=1e-8, atol=1e-8)
    np.testing.assert_allclose(swapped.posterior_.S, base.posterior_.S[perm][:, perm],
                               rtol=1e-8, atol=1e-8)

    draws = 2000
    f1 = base.forecast(3, rng=np.random.default_rng(1), draws=draws)
    f2 = swapped.forecast(3, rng=np.random.default_rng(2), draws=draws)
    diff = f2.mean() - f1.mean()[:, perm]
    se = np.sqrt((f1.paths.var(axis=0)[:, perm] + f2.paths.var(axis=0)) / draws)
    assert np.all(np.abs(diff) <= 6 * se)


@FAST
@given(y=var_data())
def test_permuting_series_with_tuned_tightness(y):
    n = y.shape[1]
    perm = np.roll(np.arange(n), 1)
    base, swapped = _fit(y, 1), _fit(y[:, perm], 1)
    np.testing.assert_allclose(swapped.hyper_.tightness, base.hyper_.tightness, rtol=1e-5)
    np.testing.assert_allclose(swapped.posterior_.B, base.posterior_.B[np.r_[0, 1 + perm]][:, perm],
                               rtol=1e-5, atol=1e-6)


# ---------------------------------------------------------------- summaries of paths


@FAST
@given(paths=paths_strategy)
def test_quantiles_are_monotone_in_the_level(paths):
    q = Forecast(paths, tuple(f"s{j}" for j in range(paths.shape[2])), None).quantiles(LEVELS)
    assert q.shape == (len(LEVELS), *paths.shape[1:])
    assert np.all(np.diff(q, axis=0) >= 0)


@FAST
@given(paths=paths_strategy)
def test_fan_bands_are_nested(paths):
    bands = Forecast(paths, ("a",) * paths.shape[2], None).bands((50, 80, 95))
    assert list(bands) == [50.0, 80.0, 95.0]
    for narrow, wide in ((50.0, 80.0), (80.0, 95.0)):
        assert np.all(bands[wide][0] <= bands[narrow][0])
        assert np.all(bands[narrow][1] <= bands[wide][1])
    assert np.all(bands[50.0][0] <= bands[50.0][1])


@FAST
@given(paths=paths_strategy, coverages=st.lists(st.integers(1, 99), min_size=1, max_size=4))
def test_bands_are_keyed_by_the_coverages_asked_for(paths, coverages):
    # keys used to be 100 * (c / 100), e.g. 28.999999999999996 for 29
    bands = Forecast(paths, ("a",) * paths.shape[2], None).bands(coverages)
    assert list(bands) == sorted({float(c) for c in coverages})


@FAST
@given(paths=paths_strategy)
def test_cumulative_last_step_is_the_sum_path_by_path(paths):
    fc = Forecast(paths, ("a",) * paths.shape[2], None)
    cum = fc.cumulative()
    np.testing.assert_allclose(cum.paths[:, -1], paths.sum(axis=1), rtol=1e-12, atol=1e-6)
    assert cum.paths.shape == paths.shape


@FAST
@given(y=var_data(), h=st.integers(1, 5))
def test_to_frame_has_one_row_per_series_and_step(y, h):
    fc = _fit(y, 1).forecast(h, rng=np.random.default_rng(0), draws=100)
    table = fc.to_frame((0.1, 0.5, 0.9))
    n = y.shape[1]
    assert list(table.columns) == ["series", "date", "step", "mean", "median",
                                   "q0.1", "q0.9"]  # 0.5 is the median column
    assert len(table) == n * h
    assert not table.duplicated(["series", "step"]).any()
    assert set(table["step"]) == set(range(1, h + 1))
    first = table[(table["series"] == "y1") & (table["step"] == 1)].iloc[0]
    assert first["mean"] == fc.mean()[0, 0] and first["median"] == fc.median()[0, 0]


# ---------------------------------------------------------------- arbitrary inputs

raw_data = arrays(
    np.float64,
    st.tuples(st.integers(1, 40), st.integers(1, 4)),
    elements=st.one_of(st.floats(-1e6, 1e6, allow_subnormal=False),
                       st.integers(-5, 50).map(float)),
)


@settings(max_examples=80, deadline=None)
@given(y=raw_data, lags=st.sampled_from([1, 2, "auto"]), h=st.integers(1, 4))
def test_arbitrary_finite_data_fit_or_raise_a_documented_error(y, lags, h):
    """Any finite (T, n) array: the default model either fits and forecasts finite
    numbers, or raises one of the documented exceptions (priors.errors), never anything
    else (a LinAlgError, an IndexError, a numpy warning turned error...)."""
    from priors.errors import PriorsError

    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)  # tuning at a bound: advice
        try:
            model = FanfoldVAR(lags=lags).fit(y, warn=False)
            paths = model.forecast(h, rng=np.random.default_rng(0), draws=50).paths
        except PriorsError:
            return
    assert paths.shape == (50, h, y.shape[1])
    assert np.isfinite(paths).all()
