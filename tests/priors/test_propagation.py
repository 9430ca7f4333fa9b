"""Shock propagation on the facade: draws, units, bands, tables (the formulas themselves
are checked against statsmodels and Pesaran & Shin (1998) in test_irf.py)."""

from __future__ import annotations

import numpy as np
import pytest

from priors.errors import SpecificationError
from priors.irf import impulse_responses
from priors.model import FanfoldVAR

from .helpers import two_lines


def _frame():
    return two_lines(80, 4, "2018-01-01")


def test_responses_are_the_draws_responses_in_user_units():
    model = FanfoldVAR(lags=2, tightness=0.2, transforms={"inner_tubes": "log"}).fit(_frame())
    res = model.impulse_responses(6, rng=np.random.default_rng(1), draws=50)
    draws = model.sample(50, rng=np.random.default_rng(1))
    raw = impulse_responses(draws.B, draws.Sigma, model.design_.n_det, 2, 6)
    np.testing.assert_allclose(res.draws[:, :, 0], raw[:, :, 0])  # tyres: units
    np.testing.assert_allclose(res.draws[:, :, 1], 100 * np.expm1(raw[:, :, 1]))  # percent
    assert res.units == ("units", "percent")
    cum = model.impulse_responses(6, rng=np.random.default_rng(1), draws=50, cumulative=True)
    np.testing.assert_allclose(cum.draws, np.cumsum(res.draws, axis=1))
    assert cum.units[0] == "units, summed over steps"


def test_bands_are_nested_and_the_table_is_tidy():
    model = FanfoldVAR(lags=2, tightness=0.2).fit(_frame())
    res = model.impulse_responses(4, rng=np.random.default_rng(2), draws=300)
    b = res.bands((68, 90))
    med = res.median()
    assert np.all(b[90.0][0] <= b[68.0][0] + 1e-12) and np.all(b[68.0][0] <= med + 1e-12)
    assert np.all(med <= b[68.0][1] + 1e-12) and np.all(b[68.0][1] <= b[90.0][1] + 1e-12)
    table = res.to_frame()
    assert len(table) == 2 * 2 * 5
    assert list(table.columns) == ["shock", "response", "step", "median", "lower68",
                                   "upper68", "lower90", "upper90", "unit"]
    shares = model.variance_decomposition(4, rng=np.random.default_rng(2), draws=300)
    np.testing.assert_allclose(shares.draws.sum(axis=-1), 1.0)
    assert shares.to_frame()["step"].min() == 1


def test_ordering_is_by_name_and_checked():
    model = FanfoldVAR(lags=1, tightness=0.2).fit(_frame())
    res = model.impulse_responses(2, rng=np.random.default_rng(0), draws=20,
                                  ordering=["inner_tubes", "tyres"])
    # inner tubes first: the tyre shock does not move inner tubes on impact
    np.testing.assert_allclose(res.draws[:, 0, 1, 0], 0.0, atol=1e-12)
    with pytest.raises(SpecificationError, match="unknown series"):
        model.impulse_responses(2, rng=np.random.default_rng(0), draws=5,
                                ordering=["chains", "tyres"])
    with pytest.raises(SpecificationError, match="exactly once"):
        model.impulse_responses(2, rng=np.random.default_rng(0), draws=5, ordering=["tyres"])
