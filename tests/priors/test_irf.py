"""Impulse responses and FEVD: the statsmodels oracle on Lutkepohl's E1 data, Pesaran-Shin
identities, orderings, unit conversions, bad input and batching."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import statsmodels.tsa.api as tsa

from priors.errors import NotPositiveDefiniteError, SpecificationError
from priors.irf import (
    cumulative,
    impulse_responses,
    ma_coefficients,
    response_units,
    summarize_draws,
    variance_decomposition,
)
from priors.model import FanfoldVAR

E1 = Path(__file__).resolve().parents[1] / "data" / "e1.dat"
H = 10
TOL = {"rtol": 1e-8, "atol": 1e-10}


@pytest.fixture(scope="module")
def e1() -> pd.DataFrame:
    """Lutkepohl (2005) example E1 as in his sec. 3.2.3: log-differences of investment,
    income and consumption over 1960Q1-1978Q4 (75 rows), for a VAR(2) with constant."""
    levels = np.loadtxt(E1, skiprows=7)[:76]  # 1960Q1..1978Q4
    diffs = np.diff(np.log(levels), axis=0)
    index = pd.date_range("1960-04-01", periods=75, freq="QS")
    return pd.DataFrame(diffs, index=index, columns=["invest", "income", "cons"])


@pytest.fixture(scope="module")
def oracle(e1):
    """statsmodels' OLS VAR(2) with constant (test-only reference)."""
    return tsa.VAR(e1.to_numpy()).fit(2)


def _known(known_var):
    """(B, Sigma) of the conftest VAR(2) in project layout: constant row, lag 1, lag 2."""
    B = np.vstack([known_var.c[None], known_var.A[0].T, known_var.A[1].T])
    return B, known_var.Sigma


def _permute(B, Sigma, perm, n_det, lags):
    """The same VAR with its series physically reordered: new series a = old perm[a]."""
    rows = np.concatenate([np.arange(n_det)] + [n_det + l * len(perm) + np.asarray(perm)
                                                for l in range(lags)])
    return B[rows][:, perm], Sigma[np.ix_(perm, perm)]


def _draws(known_var, S=25, seed=7):
    """Perturbed (B, Sigma) draws around the known VAR (deterministic seed)."""
    rng = np.random.default_rng(seed)
    B, Sigma = _known(known_var)
    Bs = B + 0.05 * rng.standard_normal((S, *B.shape))
    W = 0.2 * rng.standard_normal((S, 3, 3))
    return Bs, Sigma + W @ np.swapaxes(W, 1, 2)


# ------------------------------------------------- Lutkepohl E1 against statsmodels
def test_ma_coefficients_match_statsmodels(oracle):
    # Lutkepohl (2005) eq. 2.1.22; statsmodels VARResults.ma_rep. statsmodels' params
    # are (k, n) with the constant first, then lag 1, lag 2: the project layout.
    Phi = ma_coefficients(oracle.params, 1, 2, H)
    assert Phi.shape == (H + 1, 3, 3)
    np.testing.assert_allclose(Phi, oracle.ma_rep(H), **TOL)


def test_recursive_irf_and_fevd_match_statsmodels(oracle):
    # Lutkepohl (2005) secs. 2.3.2-2.3.3 via statsmodels' orth_irfs (step, response,
    # shock) and fevd(h).decomp, which is (response, step, shock): transpose to ours.
    irf = impulse_responses(oracle.params, oracle.sigma_u, 1, 2, H)
    np.testing.assert_allclose(irf, oracle.irf(H).orth_irfs, **TOL)
    fevd = variance_decomposition(oracle.params, oracle.sigma_u, 1, 2, H)
    assert fevd.shape == (H, 3, 3)
    np.testing.assert_allclose(fevd, oracle.fevd(H).decomp.transpose(1, 0, 2), **TOL)


def test_facade_flat_prior_irfs_match_statsmodels(e1, oracle):
    # Lutkepohl (2005) E1 through FanfoldVAR: the flat-prior posterior mean is OLS, and
    # S / df = E'E / (T - k) is statsmodels' sigma_u.
    model = FanfoldVAR(prior="flat", lags=2).fit(e1)  # constant only, transforms none
    post, n_det = model.posterior_, model.design_.n_det
    assert n_det == 1 and model.lags_ == 2
    np.testing.assert_allclose(post.B, oracle.params, **TOL)
    Sigma = post.S / post.df
    np.testing.assert_allclose(Sigma, oracle.sigma_u, **TOL)
    irf = impulse_responses(post.B, Sigma, n_det, model.lags_, H)
    np.testing.assert_allclose(irf, oracle.irf(H).orth_irfs, **TOL)
    fevd = variance_decomposition(post.B, post.S, n_det, model.lags_, H)  # any scale
    np.testing.assert_allclose(fevd, oracle.fevd(H).decomp.transpose(1, 0, 2), **TOL)


# ------------------------------------------------------------ identification identities
def test_generalised_first_shock_equals_recursive(known_var):
    # Pesaran & Shin (1998): the generalised response to the shock of the series ordered
    # first is the orthogonalised one; so for series j with j ordered first.
    B, Sigma = _known(known_var)
    gen = impulse_responses(B, Sigma, 1, 2, H, identification="generalised")
    rec = impulse_responses(B, Sigma, 1, 2, H)
    np.testing.assert_allclose(gen[..., 0], rec[..., 0], rtol=1e-13, atol=1e-15)
    rec2 = impulse_responses(B, Sigma, 1, 2, H, ordering=[2, 0, 1])
    np.testing.assert_allclose(gen[..., 2], rec2[..., 2], rtol=1e-13, atol=1e-15)


def test_generalised_does_not_depend_on_ordering(known_var):
    # Pesaran & Shin (1998): reorder the VAR's series; the responses only move with them.
    B, Sigma = _known(known_var)
    perm = [2, 0, 1]
    Bp, Sp = _permute(B, Sigma, perm, 1, 2)
    for size in ("sd", "unit"):
        gen = impulse_responses(B, Sigma, 1, 2, H, identification="generalised",
                                shock_size=size)
        genp = impulse_responses(Bp, Sp, 1, 2, H, identification="generalised",
                                 shock_size=size)
        np.testing.assert_allclose(gen[:, perm][:, :, perm], genp, rtol=1e-12, atol=1e-15)


def test_recursive_ordering_equals_physically_permuted_model(known_var):
    # Cholesky identification depends only on the order of the series (Lutkepohl 2005,
    # sec. 2.3.2): ordering=perm must equal the permuted model, mapped back.
    B, Sigma = _known(known_var)
    for perm in ([2, 0, 1], [1, 2, 0], [0, 2, 1]):
        Bp, Sp = _permute(B, Sigma, perm, 1, 2)
        ours = impulse_responses(B, Sigma, 1, 2, H, ordering=perm)
        theirs = impulse_responses(Bp, Sp, 1, 2, H)
        np.testing.assert_allclose(ours[:, perm][:, :, perm], theirs, rtol=1e-12, atol=1e-15)
        fevd = variance_decomposition(B, Sigma, 1, 2, H, ordering=perm)
        fevdp = variance_decomposition(Bp, Sp, 1, 2, H)
        np.testing.assert_allclose(fevd[:, perm][:, :, perm], fevdp, rtol=1e-12, atol=1e-15)


@pytest.mark.parametrize("identification", ["recursive", "generalised"])
def test_fevd_rows_sum_to_one_and_ignore_sigma_scale(known_var, identification):
    # Methods brief sec. 8 / Lutkepohl (2005) sec. 2.3.3: shares sum to 1; the ratio is
    # invariant to Sigma's divisor (T or T - k).
    B, Sigma = _draws(known_var)
    fevd = variance_decomposition(B, Sigma, 1, 2, H, identification=identification)
    assert fevd.shape == (25, H, 3, 3)
    np.testing.assert_allclose(fevd.sum(-1), 1.0, rtol=1e-14)
    assert np.all(fevd >= 0)
    scaled = variance_decomposition(B, 3.7 * Sigma, 1, 2, H, identification=identification)
    np.testing.assert_allclose(scaled, fevd, rtol=1e-12, atol=1e-15)


def test_recursive_fevd_at_one_step_is_triangular(known_var):
    # Lutkepohl (2005) sec. 2.3.3: at h = 1 the first series' error is its own shock only.
    B, Sigma = _known(known_var)
    fevd = variance_decomposition(B, Sigma, 1, 2, 1)
    np.testing.assert_allclose(np.triu(fevd[0], 1), 0.0, atol=1e-15)
    assert fevd[0, 0, 0] == pytest.approx(1.0)


@pytest.mark.parametrize("identification", ["recursive", "generalised"])
def test_unit_shock_has_unit_own_impact(known_var, identification):
    # Definition of shock_size="unit": the shocked series moves by exactly 1 on impact;
    # the response is the sd response rescaled.
    B, Sigma = _draws(known_var)
    unit = impulse_responses(B, Sigma, 1, 2, H, identification=identification,
                             shock_size="unit")
    np.testing.assert_allclose(np.diagonal(unit[:, 0], axis1=-2, axis2=-1), 1.0, rtol=1e-14)
    sd = impulse_responses(B, Sigma, 1, 2, H, identification=identification)
    own = np.diagonal(sd[:, 0], axis1=-2, axis2=-1)[:, None, None, :]
    np.testing.assert_allclose(unit * own, sd, rtol=1e-12, atol=1e-15)


def test_ma_coefficients_of_var1_are_matrix_powers():
    # By construction: for a VAR(1), Phi_i = A^i (Lutkepohl 2005, sec. 2.1.2).
    A = np.array([[0.5, 0.2], [-0.1, 0.3]])
    B = np.vstack([[0.1, 0.2], A.T])
    Phi = ma_coefficients(B, 1, 1, 5)
    for i in range(6):
        np.testing.assert_allclose(Phi[i], np.linalg.matrix_power(A, i), rtol=1e-14)


# -------------------------------------------------------------------------- user units
def test_diff_level_response_equals_levels_var():
    # By construction: Delta y_t = A Delta y_{t-1} + e_t is exactly the levels VAR(2)
    # y_t = (I + A) y_{t-1} - A y_{t-2} + e_t, so the "diff" level response (cumulated)
    # must equal the levels VAR's response; "logdiff" is then 100 (exp - 1) of it.
    A = np.array([[0.4, 0.1], [0.2, 0.3]])
    Sigma = np.array([[1.0, 0.4], [0.4, 2.0]])
    B_diff = np.vstack([[0.0, 0.0], A.T])
    B_lev = np.vstack([[0.0, 0.0], (np.eye(2) + A).T, (-A).T])
    irf_diff = impulse_responses(B_diff, Sigma, 1, 1, H)
    irf_lev = impulse_responses(B_lev, Sigma, 1, 2, H)
    values, labels = response_units(irf_diff, ("diff", "diff"))
    np.testing.assert_allclose(values, irf_lev, rtol=1e-12, atol=1e-14)
    np.testing.assert_allclose(cumulative(irf_diff), irf_lev, rtol=1e-12, atol=1e-14)
    assert labels == ("units", "units")
    values, labels = response_units(irf_diff, ("logdiff", "none"))
    np.testing.assert_allclose(values[:, 0], 100 * (np.exp(irf_lev[:, 0]) - 1), rtol=1e-12)
    np.testing.assert_allclose(values[:, 1], irf_diff[:, 1], rtol=0)
    assert labels == ("percent", "units")


def test_response_units_by_hand():
    # By construction, hand-computed: a log response of log(1.1) is +10 percent; log1p
    # stays in model units; diff cumulates 1, 2, 3 -> 1, 3, 6. Batched leading axis kept.
    r = np.zeros((2, 3, 3, 1))
    r[:, :, 0, 0] = np.log(1.1)
    r[:, :, 1, 0] = [1.0, 2.0, 3.0]
    r[:, :, 2, 0] = 0.5
    values, labels = response_units(r, ["log", "diff", "log1p"])
    np.testing.assert_allclose(values[:, :, 0, 0], 10.0, rtol=1e-13)
    np.testing.assert_allclose(values[:, :, 1, 0], [[1, 3, 6]] * 2)
    np.testing.assert_allclose(values[:, :, 2, 0], 0.5)
    assert labels == ("percent", "units", "log(1+units)")
    np.testing.assert_allclose(r[:, :, 1, 0], [[1, 2, 3]] * 2)  # input untouched


def test_summarize_draws_pointwise():
    # Pointwise quantiles over axis 0 (methods brief sec. 8; Sims & Zha 1999).
    x = np.arange(101, dtype=np.float64)[:, None, None] * np.ones((1, 2, 3))
    bands = summarize_draws(x, levels=(0.05, 0.95))
    np.testing.assert_allclose(bands.median, 50.0)
    assert set(bands.quantiles) == {0.05, 0.95}
    np.testing.assert_allclose(bands.quantiles[0.05], 5.0)
    np.testing.assert_allclose(bands.quantiles[0.95], 95.0)
    assert summarize_draws(x).quantiles[0.16].shape == (2, 3)


# --------------------------------------------------------------------------- bad input
@pytest.mark.parametrize(("kwargs", "match"), [
    ({"identification": "sign"}, "identification must be one of"),
    ({"shock_size": "big"}, "shock_size must be one of"),
    ({"ordering": [0, 0, 1]}, "ordering must list each series"),
    ({"ordering": [0, 1]}, "ordering must list each series"),
    ({"ordering": [0, 1, 3]}, "ordering must list each series"),
    ({"ordering": [0.0, 1.0, 2.0]}, "ordering must list each series"),
    ({"identification": "generalised", "ordering": [0, 1, 2]}, "drop ordering"),
    ({"horizon": -1}, "horizon must be an integer >= 0"),
    ({"horizon": 2.5}, "horizon must be an integer >= 0"),
    ({"lags": 3}, "pass the model's n_det and lags"),
    ({"Sigma": np.eye(2)}, "Sigma must have shape"),
])
def test_bad_input(known_var, kwargs, match):
    B, Sigma = _known(known_var)
    args = {"B": B, "Sigma": Sigma, "n_det": 1, "lags": 2, "horizon": H} | kwargs
    with pytest.raises(SpecificationError, match=match):
        impulse_responses(**args)


def test_bad_input_other_functions(known_var):
    B, Sigma = _known(known_var)
    with pytest.raises(SpecificationError, match="horizon must be an integer >= 1"):
        variance_decomposition(B, Sigma, 1, 2, 0)
    with pytest.raises(SpecificationError, match="drop ordering"):
        variance_decomposition(B, Sigma, 1, 2, 4, identification="generalised", ordering=[0])
    with pytest.raises(SpecificationError, match="B must have shape"):
        ma_coefficients(B.ravel(), 1, 2, 3)
    with pytest.raises(SpecificationError, match="NaN"):
        ma_coefficients(np.full_like(B, np.nan), 1, 2, 3)
    with pytest.raises(NotPositiveDefiniteError):
        impulse_responses(B, -np.eye(3) + 2 * np.ones((3, 3)), 1, 2, 3)
    with pytest.raises(SpecificationError, match="unknown transform"):
        response_units(np.zeros((2, 3, 3)), ("none", "sqrt", "log"))
    with pytest.raises(SpecificationError, match="one per series"):
        response_units(np.zeros((2, 3, 3)), ("none", "log"))
    with pytest.raises(SpecificationError, match="levels must be probabilities"):
        summarize_draws(np.zeros((4, 2)), levels=(0.5, 1.0))


# -------------------------------------------------------------------------- batching
@pytest.mark.parametrize("identification", ["recursive", "generalised"])
def test_batch_equals_one_draw_at_a_time(known_var, identification):
    # Vectorisation: the (S, ...) result equals stacking single-draw results, also for
    # posterior draws from the facade.
    B, Sigma = _draws(known_var, S=6)
    ordering = [1, 2, 0] if identification == "recursive" else None
    kw = {"identification": identification, "ordering": ordering}
    batch = impulse_responses(B, Sigma, 1, 2, H, shock_size="unit", **kw)
    loop = np.stack([impulse_responses(b, s, 1, 2, H, shock_size="unit", **kw)
                     for b, s in zip(B, Sigma, strict=True)])
    np.testing.assert_allclose(batch, loop, rtol=1e-14, atol=1e-16)
    fevd = variance_decomposition(B, Sigma, 1, 2, H, **kw)
    loop = np.stack([variance_decomposition(b, s, 1, 2, H, **kw)
                     for b, s in zip(B, Sigma, strict=True)])
    np.testing.assert_allclose(fevd, loop, rtol=1e-14, atol=1e-16)
    Phi = ma_coefficients(B, 1, 2, H)
    np.testing.assert_allclose(Phi, np.stack([ma_coefficients(b, 1, 2, H) for b in B]))
    # one Sigma shared by every B draw broadcasts
    shared = impulse_responses(B, Sigma[0], 1, 2, H, **kw)
    np.testing.assert_allclose(shared[0], impulse_responses(B[0], Sigma[0], 1, 2, H, **kw))


def test_batch_from_posterior_draws(e1):
    # Vectorisation on FanfoldVAR.sample draws (seeded): batch equals a loop.
    model = FanfoldVAR(prior="flat", lags=2).fit(e1)
    d = model.sample(8, rng=np.random.default_rng(3))
    batch = impulse_responses(d.B, d.Sigma, model.design_.n_det, model.lags_, H)
    assert batch.shape == (8, H + 1, 3, 3)
    loop = np.stack([impulse_responses(b, s, 1, 2, H)
                     for b, s in zip(d.B, d.Sigma, strict=True)])
    np.testing.assert_allclose(batch, loop, rtol=1e-14, atol=1e-16)
    bands = summarize_draws(batch)
    assert bands.median.shape == (H + 1, 3, 3)
