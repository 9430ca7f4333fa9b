"""The compiled kernels against plain numpy/scipy computations of the same quantities."""

from __future__ import annotations

import threading

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays
from scipy.linalg import solve_triangular

from priors._kernels import (
    bartlett_roots,
    gram_shock_step,
    select_quantiles,
    tightness_profile,
)
from priors.conjugate import posterior
from priors.data import Deterministics, future_exogenous_rows, load_series
from priors.forecast import draw_quantiles
from priors.predictive import simulate_paths

from .helpers import design_and_prior

LEVELS = np.array([0.01, 0.05, 0.1, 0.25, 0.5, 0.75, 0.9, 0.95, 0.99])


@pytest.mark.parametrize("size", [1, 2, 3, 10, 999, 2000])
def test_select_quantiles_equal_numpy_bit_for_bit(size):
    # Reference library: numpy's quantile, default "linear" method (Hyndman & Fan type 7)
    rng = np.random.default_rng(size)
    X = np.vstack([
        rng.standard_normal((4, size)),
        np.round(rng.standard_normal((2, size))),  # many ties
        np.zeros((1, size)),  # constant (a known ragged-edge cell)
        np.sort(rng.standard_normal((1, size))),  # sorted input
        -np.sort(rng.standard_normal((1, size))),  # reversed input
        rng.standard_t(1, (1, size)) * 1e300,  # huge values
    ])
    assert np.array_equal(select_quantiles(X, LEVELS), np.quantile(X, LEVELS, axis=1))


@pytest.mark.parametrize("seed", range(6))
def test_select_quantiles_every_order_statistic_pair(seed):
    # Reference library: numpy's quantile. Levels at every position (k + t) / (S - 1),
    # t in {0, 0.5}, so each pair of neighbouring order statistics is asked for, on
    # rows with few distinct values (the selection's ties) and with +-inf among them.
    rng = np.random.default_rng(seed)
    size = int(rng.integers(2, 60))
    levels = np.unique(np.clip(np.concatenate([np.arange(size), np.arange(size - 1) + 0.5])
                               / (size - 1), 0.0, 1.0))
    X = np.vstack([
        rng.integers(0, 3, (3, size)).astype(np.float64),
        rng.standard_normal((3, size)),
        np.where(rng.random((2, size)) < 0.2, np.inf, rng.standard_normal((2, size))),
        np.where(rng.random((2, size)) < 0.2, -np.inf, rng.standard_normal((2, size))),
    ])
    with np.errstate(invalid="ignore"):  # numpy's own interpolation meets inf - inf
        ref = np.quantile(X, levels, axis=1)
    np.testing.assert_array_equal(select_quantiles(X, levels), ref)


def _profile_reference(lam, e, G1, G2, base, B0WB0, const, df):
    # The formula of TightnessProfile written with numpy (slogdet for log|S|)
    kl, n = G1.shape
    out = []
    for t in lam:
        inv = 1.0 / t**2
        H = G1 + inv * G2
        S = base + inv * B0WB0 - (H / (e + inv)[:, None]).T @ H
        sign, logdet = np.linalg.slogdet(S)
        pd = sign > 0 and np.all(np.linalg.eigvalsh(S) > 0)
        out.append(const - n * kl * np.log(t) - 0.5 * n * np.sum(np.log(e + inv))
                   - 0.5 * df * logdet if pd else -np.inf)
    return np.array(out)


@pytest.mark.parametrize("n", [1, 3, 6])
def test_tightness_profile_equals_the_numpy_formula(n):
    rng = np.random.default_rng(n)
    kl = 4 * n
    A = rng.standard_normal((kl + 3, n))
    e = rng.gamma(2.0, size=kl)
    G1, G2 = rng.standard_normal((kl, n)), rng.standard_normal((kl, n))
    base = A.T @ A + 50.0 * np.eye(n)
    B0WB0 = np.diag(rng.gamma(2.0, size=n))
    lam = np.exp(np.linspace(np.log(1e-4), np.log(5.0), 40))
    got = tightness_profile(lam, e, G1, G2, base, B0WB0, -12.5, n + 90.0)
    ref = _profile_reference(lam, e, G1, G2, base, B0WB0, -12.5, n + 90.0)
    assert np.array_equal(np.isinf(got), np.isinf(ref))
    np.testing.assert_allclose(got[np.isfinite(ref)], ref[np.isfinite(ref)], rtol=1e-11)
    # a scale that is not positive definite (a negative eigenvalue) gives -inf
    bad = tightness_profile(lam[:3], e, G1 * 0, G2 * 0, -np.eye(n), 0 * B0WB0, 0.0, 5.0)
    assert np.all(bad == -np.inf)


def test_select_quantiles_nan_and_inf_as_numpy():
    x = np.linspace(0.0, 1.0, 101)
    X = np.vstack([x, x, x])
    X[0, 17] = np.nan
    X[1, 3] = np.inf
    X[2, 50] = -np.inf
    with np.errstate(invalid="ignore"):  # numpy's own interpolation meets inf - inf
        ref = np.quantile(X, LEVELS, axis=1)
    np.testing.assert_array_equal(select_quantiles(X, LEVELS), ref)


@settings(max_examples=60, deadline=None)
@given(arrays(np.float64, st.tuples(st.integers(1, 40), st.integers(1, 4), st.integers(1, 3)),
              elements=st.floats(-1e6, 1e6)),
       st.lists(st.floats(0.001, 0.999), min_size=1, max_size=6))
def test_draw_quantiles_equal_numpy_for_any_levels_and_shapes(paths, levels):
    # unsorted and repeated levels, any trailing shape: the values of np.quantile
    q = np.array(levels)
    assert np.array_equal(draw_quantiles(paths, q), np.quantile(paths, q, axis=0))


def test_bartlett_roots_equal_triangular_solve():
    # M = L_S A^-T (Smith & Hocking 1972), computed here with scipy's solve_triangular
    rng = np.random.default_rng(3)
    n, size = 6, 50
    C = rng.standard_normal((n, n))
    L_S = np.linalg.cholesky(C @ C.T + n * np.eye(n))
    diag = np.sqrt(rng.chisquare(20 - np.arange(n), (size, n)))
    below = rng.standard_normal((size, n * (n - 1) // 2))
    M = bartlett_roots(L_S, diag, below)
    for s in range(size):
        A = np.diag(diag[s])
        A[np.tril_indices(n, -1)] = below[s]
        ref = L_S @ solve_triangular(A, np.eye(n), lower=True).T
        np.testing.assert_allclose(M[:, :, s], ref, rtol=1e-12, atol=1e-12)


@pytest.mark.parametrize(("h", "k"), [(5, 9), (7, 3)])
def test_gram_shock_step_matches_cholesky_of_the_augmented_gram(h, k):
    # y_t = mean_t + M u_t with u = L W and L L' = [v_g'v_j] + I, the Cholesky factor
    # computed by numpy per draw; h > k makes the v_t linearly dependent.
    rng = np.random.default_rng(h * k)
    n, s, m = 2, 30, 1
    v = rng.standard_normal((h, k, s))
    W = rng.standard_normal((h, n, s))
    M = rng.standard_normal((n, n, s))
    mean_fix = rng.standard_normal(n)
    V, Lw = np.empty((h, k, s)), np.empty((h, h, s))
    out, scratch = np.empty((h, n, s)), np.empty((h + n + 2, s))
    for step in range(h):
        # the kernel adds G[n:] to rows m.. of v_fix and G[:n] to the mean
        G = np.vstack([np.full((n, s), 0.5), v[step, m:] - 1.0])
        v_fix = np.ones(k)
        v_fix[:m] = v[step, :m, 0]
        v[step, :m] = v_fix[:m, None]
        gram_shock_step(V, Lw, W, M, G, v_fix, mean_fix, out, step, m, scratch)
    np.testing.assert_allclose(V, v, rtol=0, atol=1e-15)
    for t in range(s):
        L = np.linalg.cholesky(v[:, :, t] @ v[:, :, t].T + np.eye(h))
        u = L @ W[:, :, t]  # (h, n)
        ref = mean_fix + 0.5 + u @ M[:, :, t].T
        np.testing.assert_allclose(out[:, :, t], ref, rtol=1e-10, atol=1e-10)
        # the work array holds L below the diagonal and 1 / L_gg on it (upper: unused)
        ref_work = np.tril(L, -1) + np.diag(1.0 / np.diag(L))
        np.testing.assert_allclose(np.tril(Lw[:, :, t]), ref_work, atol=1e-10)


def test_threads_forecasting_at_once_get_their_own_results(known_var, rng):
    # Each thread keeps its own work space and the kernels release the GIL: four
    # threads at once must give what each gives alone.
    y = known_var.simulate(rng, 80)
    design, prior = design_and_prior(y, lags=2)
    post = posterior(design, prior)
    series = load_series(y)
    exog = future_exogenous_rows(series, Deterministics(), 6)
    alone = [simulate_paths(np.random.default_rng(i), post, y[-2:], exog, 3000)
             for i in range(4)]
    together: list[np.ndarray | None] = [None] * 4

    def run(i: int) -> None:
        together[i] = simulate_paths(np.random.default_rng(i), post, y[-2:], exog, 3000)

    threads = [threading.Thread(target=run, args=(i,)) for i in range(4)]
    for t in threads:
        t.start()
    for t in threads:
        t.join(timeout=60)
    for a, b in zip(alone, together, strict=True):
        assert b is not None and np.array_equal(a, b)


@pytest.mark.parametrize(("size", "capacity"), [(1, 3), (2, 3), (5, 3), (29, 3), (64, 3),
                                                (2000, 33.5)])
def test_projection_blocks_cover_every_draw(known_var, rng, monkeypatch, size, capacity):
    # Work-space blocks far smaller than the draws: equal blocks, the last one padded;
    # every draw filled, finite, and each block's draws distinct from the others'.
    import priors.predictive as predictive

    y = known_var.simulate(rng, 60)
    design, prior = design_and_prior(y, lags=2)
    post = posterior(design, prior)
    exog = future_exogenous_rows(load_series(y), Deterministics(), 4)
    k, h = post.B.shape[0], exog.shape[0]
    # about ``capacity`` draws per block; 2000 / 33.5 rounds up to 60 blocks of 34 draws,
    # more than needed (the case that once broke at n=50, p=13)
    monkeypatch.setattr(predictive, "_BLOCK_BYTES", int(capacity * 8 * h * k))
    paths = simulate_paths(np.random.default_rng(1), post, y[-2:], exog, size)
    assert paths.shape == (size, h, post.n)
    assert np.all(np.isfinite(paths))
    assert len(np.unique(paths[:, 0, 0])) == size


def test_work_buffer_kept_per_thread_only_when_small(monkeypatch):
    import priors.predictive as predictive

    monkeypatch.setattr(predictive, "_local", threading.local())
    monkeypatch.setattr(predictive, "_KEEP_DOUBLES", 1000)
    small = predictive._workspace(800)
    assert predictive._workspace(500) is small  # reused
    big = predictive._workspace(5000)
    assert big.size == 5000 and predictive._local.buf is small  # not kept


def test_kernels_compile_without_a_cache_location():
    # numba refuses cache=True at decoration when it finds nowhere to write (e.g. a
    # read-only container); the decorator then compiles without the disk cache
    from numba.core.caching import NullCache

    from priors._kernels import _compiled

    namespace: dict[str, object] = {}
    exec(compile("def twice(x):\n    return 2.0 * x\n", "<not a file>", "exec"), namespace)
    fn = _compiled()(namespace["twice"])
    assert fn(2.5) == 5.0
    assert isinstance(fn._cache, NullCache)


def test_warm_up_compiles_what_the_samplers_use(known_var, rng):
    # After warm_up_kernels a forecast needs no new compiled signature, so a server that
    # warms up at start answers its first forecast without compiling.
    from priors import FanfoldVAR, warm_up_kernels
    from priors._kernels import _dot_rows

    warm_up_kernels()
    kernels = (gram_shock_step, bartlett_roots, select_quantiles, _dot_rows,
               tightness_profile)
    before = [len(k.signatures) for k in kernels]
    y = known_var.simulate(rng, 60)
    fc = FanfoldVAR(lags=2).fit(y).forecast(5, rng=np.random.default_rng(0), draws=300)
    fc.quantiles([0.1, 0.9])
    assert [len(k.signatures) for k in kernels] == before
