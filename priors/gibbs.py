"""Gibbs sampler for a VAR under an independent Normal / inverse-Wishart prior.

Model: ``Y = X B + E``, rows of E ~ N(0, Sigma); prior ``vec B ~ N(vec B0, diag(vec V))``
independent of ``Sigma ~ IW(S0, df)``. Dummy observations (sum-of-coefficients,
initial observation) are extra rows of (Y, X) with the same Sigma.

Each sweep draws the coefficients equation by equation and then Sigma:

- beta_i | beta_{-i}, Sigma, Y is Normal with precision ``V_i^-1 + w_ii X'X`` and
  right-hand side ``V_i^-1 b0_i + X'(w_ii y_i + sum_{j != i} w_ij e_j)``, w = Sigma^-1,
  e_j = y_j - X beta_j. This is the exact full conditional, i.e. the triangular
  algorithm of Carriero, Clark & Marcellino (2019) *as corrected* by Carriero, Chan,
  Clark & Marcellino (2022): equation i's coefficients enter the likelihood of every
  equation j >= i of the triangular system, so the precision carries
  ``(Sigma^-1)_ii = sum_{j>=i} a_ji^2 / d_j`` and not just ``1 / d_i`` (the uncorrected
  version; ``tests/priors/test_gibbs.py`` shows it fails the exactness test).
- With the prior variances fixed, ``V_i^1/2 X'X V_i^1/2 = Q_i diag(lam_i) Q_i'`` is
  computed once per equation. Then
  ``P_i^-1 = V_i^1/2 Q_i (I + w_ii diag(lam_i))^-1 Q_i' V_i^1/2``, so a draw costs two
  (k x k) products and no factorisation: O(n k^2) per sweep instead of O(n k^3)
  (O(n^4 p^3)). ``G = X'X B`` is kept up to date column by column, so the right-hand
  side needs no pass over the data.
- Sigma | B ~ IW(S0 + E'E, df + T), with E'E from the cross-products.

Several chains run in lockstep in one process, vectorised over chains (the k x k products
become (chains x k) x (k x k) products); each chain has its own random stream, so its
draws do not depend on how chains are grouped (up to floating-point rounding).

Shapes: B (C, k, n), Sigma (C, n, n) for C chains; stored draws (C, D, k, n).
"""

from __future__ import annotations

import dataclasses
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import NamedTuple

import numpy as np

from ._types import FloatArray
from .cancellation import checkpoint
from .data import Design
from .errors import NotPositiveDefiniteError, SpecificationError
from .hyper_mh import HyperSampler
from .outliers import (
    OutlierRows,
    draw_scales,
    low_rank_draw,
    outlier_rows,
    weighted_cross_products,
)
from .shrinkage import (
    MinnesotaHyper,
    ar_residual_variances,
    det_variances,
    dummy_observations,
    lag_variance_profile,
    prior_mean_block,
)

__all__ = [
    "GibbsDraws",
    "GibbsSettings",
    "GibbsState",
    "IndependentPrior",
    "Precomputed",
    "independent_minnesota_prior",
    "init_state",
    "draw_coefficients",
    "draw_sigma",
    "precompute",
    "run_chains",
    "sweep",
]

Progress = Callable[[int, int], None]


@dataclass(frozen=True)
class IndependentPrior:
    """Independent Normal prior on B and inverse-Wishart prior on Sigma.

    B0 : (k, n) prior means.  V : (k, n) prior variances (column i: equation i).
    S0 : (n, n) IW scale.  df : IW degrees of freedom.  Yd (T_d, n), Xd (T_d, k): dummy
    observations.
    """

    B0: FloatArray
    V: FloatArray
    S0: FloatArray
    df: float
    Yd: FloatArray
    Xd: FloatArray


def independent_minnesota_prior(
    design: Design,
    hyper: MinnesotaHyper,
    prior_mean: FloatArray,
    psi: FloatArray | None = None,
) -> IndependentPrior:
    """The full Minnesota pattern in independent form (Litterman 1986; Kadiyala &
    Karlsson 1997):

    - own lag l:          var = (tightness / l**decay)**2
    - lag l of series j:  var = (tightness * cross / l**decay)**2 * psi_i / psi_j
    - deterministic:      var = det_scale**2 * psi_i / rms(x)**2

    With ``cross = 1`` these are the conditional variances of the natural-conjugate prior
    at Sigma = diag(psi), so the two priors agree in scale. Sigma ~ IW(diag(psi) (df - n
    - 1), df) with df = n + 2 (E[Sigma] = diag(psi)).
    """
    n, m, p = design.n, design.n_det, design.lags
    psi = ar_residual_variances(design) if psi is None else np.asarray(psi, dtype=np.float64)
    B0 = np.zeros((design.k, n))
    B0[m:] = prior_mean_block(prior_mean, n, p)
    omega = np.concatenate([det_variances(design, hyper.det_scale, hyper.season_scale),
                            hyper.tightness**2 * lag_variance_profile(design, psi, hyper.decay)])
    V = omega[:, None] * psi[None, :]
    own = np.tile(np.eye(n, dtype=bool), (p, 1))  # (n p, n): lag row of series i in eq. i
    V[m:] = np.where(own, V[m:], V[m:] * hyper.cross**2)
    df = n + 2.0
    Yd, Xd = dummy_observations(design, hyper, prior_mean)
    return IndependentPrior(B0, V, np.diag(psi * (df - n - 1)), df, Yd, Xd)


@dataclass(frozen=True)
class Precomputed:
    """Data cross-products and the per-equation eigen-decompositions (fixed prior).

    XtX (k, k), XtY (k, n), YtY (n, n), nobs (rows incl. dummies); wh (n, k) = sqrt of V
    per equation; Q (n, k, k) and lam (n, k): eigen-decomposition of
    ``diag(wh_i) X'X diag(wh_i)``; prior_rhs (k, n) = B0 / V; out: the rows of known-date
    outlier periods, whose shock scale is sampled (None: constant volatility).
    """

    XtX: FloatArray
    XtY: FloatArray
    YtY: FloatArray
    nobs: int
    wh: FloatArray
    Q: FloatArray
    lam: FloatArray
    prior_rhs: FloatArray
    S0: FloatArray
    df: float
    out: OutlierRows | None = None


def precompute(design: Design, prior: IndependentPrior,
               outliers: Sequence[Sequence[int]] = ()) -> Precomputed:
    """Cross-products of the data plus dummies, and one eigh per equation.

    ``outliers``: for each outlier period, the rows of ``design`` it covers (each period
    gets its own shock scale, see :mod:`priors.outliers`)."""
    X = np.vstack([design.X, prior.Xd]) if prior.Xd.size else design.X
    Y = np.vstack([design.Y, prior.Yd]) if prior.Yd.size else design.Y
    XtX, XtY, YtY = X.T @ X, X.T @ Y, Y.T @ Y
    if np.any(prior.V <= 0) or not np.all(np.isfinite(prior.V)):
        raise SpecificationError("prior variances must be positive and finite")
    wh = np.sqrt(prior.V.T)  # (n, k)
    lam, Q = np.linalg.eigh(wh[:, :, None] * XtX[None] * wh[:, None, :])
    lam = np.maximum(lam, 0.0)  # X'X is PSD; clip rounding below zero
    out = None
    if any(len(r) for r in outliers):
        rows = [int(t) for r in outliers for t in r]
        period = [k for k, r in enumerate(outliers) for _ in r]
        if len(set(rows)) != len(rows) or min(rows) < 0 or max(rows) >= design.nobs:
            raise SpecificationError("outlier periods must be distinct rows of the sample")
        out = outlier_rows(design.X, design.Y, rows, period, Q, wh)
    return Precomputed(XtX, XtY, YtY, X.shape[0], wh, Q, lam, prior.B0 / prior.V,
                       prior.S0, prior.df, out)


def with_variances(pre: Precomputed, V: FloatArray, B0: FloatArray) -> Precomputed:
    """The same data with prior variances V (k, n): new eigendecompositions (n eigh)."""
    wh = np.sqrt(V.T)
    lam, Q = np.linalg.eigh(wh[:, :, None] * pre.XtX[None] * wh[:, None, :])
    out = pre.out
    if out is not None:
        out = dataclasses.replace(out, U=np.einsum("nkj,nk,rk->njr", Q, wh, out.Xo))
    return dataclasses.replace(pre, wh=wh, Q=Q, lam=np.maximum(lam, 0.0),
                               prior_rhs=B0 / V, out=out)


class GibbsState(NamedTuple):
    """What the next sweep needs: B (C, k, n), Sigma (C, n, n), G = X'X B (C, k, n) and,
    with outlier periods, v = 1 / scale^2 (C, K)."""

    B: FloatArray
    Sigma: FloatArray
    G: FloatArray
    v: FloatArray | None = None


def init_state(pre: Precomputed, B: FloatArray, Sigma: FloatArray) -> GibbsState:
    """State from starting values B (C, k, n) and Sigma (C, n, n); scales start at 1."""
    B = np.array(B, dtype=np.float64)
    v = None if pre.out is None else np.ones((B.shape[0], pre.out.K))
    return GibbsState(B, np.array(Sigma, dtype=np.float64), np.matmul(pre.XtX, B), v)


def _iw_batch(rngs: Sequence[np.random.Generator], S: FloatArray, df: float) -> FloatArray:
    """One IW(S_c, df) draw per chain, (C, n, n), by the Bartlett decomposition: with
    A lower triangular, A_jj ~ sqrt(chi2(df - j)), A_jl ~ N(0, 1), Sigma = L A^-T A^-1 L'
    where L L' = S (Smith & Hocking 1972)."""
    C, n, _ = S.shape
    A = np.zeros((C, n, n))
    low = np.tril_indices(n, -1)
    for c, rng in enumerate(rngs):
        A[c, np.arange(n), np.arange(n)] = np.sqrt(rng.chisquare(df - np.arange(n)))
        A[c][low] = rng.standard_normal(low[0].size)
    try:
        L = np.linalg.cholesky(S)
    except np.linalg.LinAlgError as exc:
        raise NotPositiveDefiniteError("the posterior scale of Sigma is not positive "
                                       "definite; check the data for collinear series") from exc
    # numpy's LAPACK only: scipy ships another OpenBLAS whose threads compete for the
    # cores in this hot loop (measured 7 ms per 20 x 20 solve instead of microseconds)
    M = L @ np.linalg.inv(A).transpose(0, 2, 1)  # L A^-T
    return M @ M.transpose(0, 2, 1)


def draw_coefficients(z: FloatArray, B: FloatArray, G: FloatArray, W: FloatArray,
                      pre: Precomputed, XtY: FloatArray | None = None,
                      d: FloatArray | None = None) -> tuple[FloatArray, FloatArray]:
    """Draw beta_1, ..., beta_n in turn from their exact full conditionals given Sigma^-1
    = W (C, n, n), with z (C, n, k) standard normals; returns new (B, G = X'X B).

    With outlier rows, ``d`` (C, r) = 1 - v of each outlier row, ``XtY`` (C, k, n) the
    weighted X~'Y and G = X~'X~ B (see :mod:`priors.outliers`)."""
    B, G = B.copy(), G.copy()
    XtY = pre.XtY if XtY is None else XtY
    out = pre.out if d is not None else None
    for i in range(B.shape[2]):
        w = W[:, :, i]  # (C, n)
        c = w[:, i][:, None]  # (C, 1): (Sigma^-1)_ii
        rhs = (pre.prior_rhs[:, i] + ((XtY - G) @ w[:, :, None])[:, :, 0]
               + c * G[:, :, i])
        Qi, wh = pre.Q[i], pre.wh[i]
        Dc = 1.0 + c * pre.lam[i]  # (C, k)
        if out is None:
            u = ((rhs * wh) @ Qi) / Dc + z[:, i] / np.sqrt(Dc)
        else:
            u = low_rank_draw((rhs * wh) @ Qi, z[:, i], Dc, c, out.U[i], d)
        beta = (u @ Qi.T) * wh
        B[:, :, i] = beta
        G[:, :, i] = beta @ pre.XtX
        if out is not None:
            G[:, :, i] -= ((beta @ out.Xo.T) * d) @ out.Xo
    return B, G


def draw_sigma(rngs: Sequence[np.random.Generator], B: FloatArray, G: FloatArray,
               pre: Precomputed, XtY: FloatArray | None = None,
               YtY: FloatArray | None = None) -> FloatArray:
    """Sigma | B ~ IW(S0 + E'E, df + T) per chain, E'E from the cross-products (weighted
    ones, per chain, with outlier periods)."""
    Bt = B.transpose(0, 2, 1)
    BtXtY = Bt @ (pre.XtY if XtY is None else XtY)  # batched matmul: BLAS, unlike einsum
    EtE = ((pre.YtY if YtY is None else YtY) - BtXtY - BtXtY.transpose(0, 2, 1)
           + Bt @ G)
    EtE = 0.5 * (EtE + EtE.transpose(0, 2, 1))
    return _iw_batch(rngs, pre.S0 + EtE, pre.df + pre.nobs)


def sweep(rngs: Sequence[np.random.Generator], state: GibbsState, pre: Precomputed
          ) -> GibbsState:
    """One Gibbs sweep for every chain: B equation by equation, then Sigma."""
    C, k, n = state.B.shape
    z = np.stack([rng.standard_normal((n, k)) for rng in rngs])  # (C, n, k)
    W = np.linalg.inv(state.Sigma)
    out = pre.out
    if out is None or state.v is None:
        B, G = draw_coefficients(z, state.B, state.G, W, pre)
        return GibbsState(B, draw_sigma(rngs, B, G, pre), G)
    d = 1.0 - state.v[:, out.period]  # (C, r)
    XtY, YtY = weighted_cross_products(pre.XtX, pre.XtY, pre.YtY, out, d)
    # G = X~'X~ B for this sweep's weights
    G = pre.XtX @ state.B - np.einsum("rk,cr,crn->ckn", out.Xo, d, out.Xo[None] @ state.B)
    B, G = draw_coefficients(z, state.B, G, W, pre, XtY, d)
    Sigma = draw_sigma(rngs, B, G, pre, XtY, YtY)
    return GibbsState(B, Sigma, G, draw_scales(rngs, B, Sigma, out))


@dataclass(frozen=True)
class GibbsSettings:
    """chains, burn (sweeps discarded per chain), keep (draws kept per chain), thin (sweeps
    per kept draw), workers (processes; chains are split among them)."""

    chains: int = 4
    burn: int = 500
    keep: int = 1000
    thin: int = 1
    workers: int = 1

    def __post_init__(self) -> None:
        for name, low in (("chains", 1), ("burn", 0), ("keep", 1), ("thin", 1),
                          ("workers", 1)):
            v = getattr(self, name)
            if isinstance(v, bool) or not isinstance(v, int | np.integer) or v < low:
                raise SpecificationError(f"{name} must be an integer >= {low}; got {v!r}")

    @property
    def sweeps(self) -> int:
        return self.burn + self.keep * self.thin


@dataclass(frozen=True)
class GibbsDraws:
    """Kept draws: B (C, D, k, n), Sigma (C, D, n, n) and, with outlier periods, their
    shock scales (C, D, K); stored as float32 (computation is float64; float32 keeps 7
    significant digits, far below Monte Carlo error)."""

    B: np.ndarray
    Sigma: np.ndarray
    settings: GibbsSettings
    scales: np.ndarray | None = None  # (C, D, K) shock scales s_k of outlier periods
    hyper: np.ndarray | None = None  # (C, D, 2) sampled tightness and cross tightness
    volatility: np.ndarray | None = None  # (C, D, 3) common SV: h_T, phi, sigma_eta^2

    @property
    def chains(self) -> int:
        return self.B.shape[0]

    @property
    def size(self) -> int:
        return self.B.shape[0] * self.B.shape[1]

    def flat(self) -> tuple[FloatArray, FloatArray]:
        """All draws as float64, chains concatenated: B (C*D, k, n), Sigma (C*D, n, n)."""
        k, n = self.B.shape[2:]
        return (self.B.reshape(-1, k, n).astype(np.float64),
                self.Sigma.reshape(-1, n, n).astype(np.float64))


def _run_group(rngs: list[np.random.Generator], pre: Precomputed, B0: FloatArray,
               Sigma0: FloatArray, settings: GibbsSettings,
               progress: Progress | None = None, offset: int = 0, total: int = 0,
               hyper: HyperSampler | None = None, hyper_start: tuple[float, float] = (0, 0),
               ) -> tuple[np.ndarray, ...]:
    """Run a group of chains in lockstep; kept draws (C, D, k, n), (C, D, n, n), the
    outlier scales (C, D, K) or None, and the sampled hyperparameters (C, D, 2) or None."""
    if hyper is not None:
        return _run_group_hyper(rngs, pre, B0, Sigma0, settings, progress, offset, total,
                                hyper, hyper_start)
    C = len(rngs)
    state = init_state(pre, np.repeat(B0[None], C, axis=0), np.repeat(Sigma0[None], C, axis=0))
    k, n = B0.shape
    keep_B = np.empty((C, settings.keep, k, n), dtype=np.float32)
    keep_S = np.empty((C, settings.keep, n, n), dtype=np.float32)
    keep_s = None if pre.out is None else np.empty((C, settings.keep, pre.out.K),
                                                   dtype=np.float32)
    every = max(1, settings.sweeps // 100)
    for s in range(settings.sweeps):
        checkpoint()
        state = sweep(rngs, state, pre)
        kept = s - settings.burn
        if kept >= 0 and (kept + 1) % settings.thin == 0:
            d = kept // settings.thin
            keep_B[:, d] = state.B
            keep_S[:, d] = state.Sigma
            if keep_s is not None and state.v is not None:
                keep_s[:, d] = 1.0 / np.sqrt(state.v)
        if progress is not None and ((s + 1) % every == 0 or s + 1 == settings.sweeps):
            progress(offset + (s + 1) * C, total)
    return keep_B, keep_S, keep_s, None


def _run_group_hyper(rngs: list[np.random.Generator], pre: Precomputed, B0: FloatArray,
                     Sigma0: FloatArray, settings: GibbsSettings, progress: Progress | None,
                     offset: int, total: int, hyper: HyperSampler,
                     hyper_start: tuple[float, float]) -> tuple[np.ndarray, ...]:
    """Chains with the tightness and cross tightness sampled (Metropolis within Gibbs):
    each chain has its own prior variances, so chains are swept one by one."""
    C = len(rngs)
    k, n = B0.shape
    lam = np.full(C, float(hyper_start[0]))
    theta = np.full(C, float(hyper_start[1]))
    first = with_variances(pre, hyper.variances(lam[0], theta[0]), hyper.B0)
    pres = [first] * C
    states = [init_state(first, B0[None], Sigma0[None]) for _ in range(C)]
    keep_B = np.empty((C, settings.keep, k, n), dtype=np.float32)
    keep_S = np.empty((C, settings.keep, n, n), dtype=np.float32)
    keep_s = None if pre.out is None else np.empty((C, settings.keep, pre.out.K),
                                                   dtype=np.float32)
    keep_h = np.empty((C, settings.keep, 2), dtype=np.float32)
    every = max(1, settings.sweeps // 100)
    for s in range(settings.sweeps):
        checkpoint()
        states = [sweep([rngs[c]], states[c], pres[c]) for c in range(C)]
        B = np.concatenate([st.B for st in states])
        lam, theta, accepted = hyper.step_all(rngs, B, lam, theta)
        for c in np.flatnonzero(accepted):
            pres[c] = with_variances(pre, hyper.variances(lam[c], theta[c]), hyper.B0)
        kept = s - settings.burn
        if kept >= 0 and (kept + 1) % settings.thin == 0:
            d = kept // settings.thin
            keep_B[:, d] = B
            keep_S[:, d] = np.concatenate([st.Sigma for st in states])
            keep_h[:, d, 0], keep_h[:, d, 1] = lam, theta
            if keep_s is not None:
                keep_s[:, d] = 1.0 / np.sqrt(np.concatenate([st.v for st in states]))
        if progress is not None and ((s + 1) % every == 0 or s + 1 == settings.sweeps):
            progress(offset + (s + 1) * C, total)
    return keep_B, keep_S, keep_s, keep_h


def _worker(args: tuple) -> tuple[np.ndarray, ...]:
    """A group of chains in a worker process, with one BLAS thread (the processes are
    the parallelism; BLAS threads on top would fight over the same cores)."""
    from threadpoolctl import threadpool_limits

    with threadpool_limits(limits=1, user_api="blas"):
        return _run_group(*args)


def run_chains(
    rng: np.random.Generator,
    pre: Precomputed,
    start_B: FloatArray,
    start_Sigma: FloatArray,
    settings: GibbsSettings = GibbsSettings(),
    *,
    progress: Progress | None = None,
    hyper: HyperSampler | None = None,
    hyper_start: tuple[float, float] = (0.2, 1.0),
) -> GibbsDraws:
    """Run ``settings.chains`` chains from (start_B, start_Sigma) with independent streams
    ``rng.spawn(chains)``; kept draws as :class:`GibbsDraws`.

    With ``workers > 1`` the chains are split into that many groups, each run in a spawned
    process; ``progress(done, total)`` (chain-sweeps) is then called as groups finish.
    With ``hyper``, the tightness and cross tightness are sampled too (Metropolis within
    Gibbs, :mod:`priors.hyper_mh`), starting from ``hyper_start``.
    """
    rngs = rng.spawn(settings.chains)
    total = settings.chains * settings.sweeps
    workers = min(settings.workers, settings.chains)
    if workers == 1:
        B, S, sc, hy = _run_group(rngs, pre, start_B, start_Sigma, settings, progress, 0,
                                  total, hyper, hyper_start)
        return GibbsDraws(B, S, settings, sc, hy)
    import multiprocessing as mp
    from concurrent.futures import ProcessPoolExecutor

    groups = [list(g) for g in np.array_split(np.arange(settings.chains), workers)]
    parts: list[tuple[np.ndarray, ...] | None] = [None] * len(groups)
    done = 0
    with ProcessPoolExecutor(max_workers=workers, mp_context=mp.get_context("spawn")) as pool:
        futures = {pool.submit(_worker, ([rngs[c] for c in g], pre, start_B, start_Sigma,
                                         settings, None, 0, 0, hyper, hyper_start)): j
                   for j, g in enumerate(groups)}
        from concurrent.futures import as_completed

        for fut in as_completed(futures):
            j = futures[fut]
            parts[j] = fut.result()
            done += len(groups[j]) * settings.sweeps
            if progress is not None:
                progress(done, total)
    done_parts = [p for p in parts if p is not None]
    B = np.concatenate([p[0] for p in done_parts])
    S = np.concatenate([p[1] for p in done_parts])
    sc = None if pre.out is None else np.concatenate([p[2] for p in done_parts])
    hy = None if hyper is None else np.concatenate([p[3] for p in done_parts])
    return GibbsDraws(B, S, settings, sc, hy)


def gibbs_convergence(draws: GibbsDraws, design: Design):  # -> ConvergenceReport | None
    """R-hat, bulk/tail ESS and MCSE of every coefficient and every distinct element of
    Sigma (see :func:`priors.convergence.chain_diagnostics`); None with one chain
    (split R-hat across chains needs two or more)."""
    from .convergence import chain_diagnostics

    if draws.chains < 2 or draws.B.shape[1] < 4:
        return None
    names, labels = design.names, design.labels
    k, n = draws.B.shape[2:]
    rows, cols = np.triu_indices(n)
    variables = {"B": draws.B.astype(np.float64),
                 "Sigma": draws.Sigma[:, :, rows, cols].astype(np.float64)}
    tags = {"B": [f"{labels[r]} -> {names[i]}" for r in range(k) for i in range(n)],
            "Sigma": [f"Sigma[{names[a]}, {names[b]}]" for a, b in zip(rows, cols,
                                                                       strict=True)]}
    # the sampled hyperparameters, outlier scales and volatility parameters too
    if draws.hyper is not None:
        variables["hyper"] = draws.hyper.astype(np.float64)
        tags["hyper"] = ["tightness", "cross"]
    if draws.scales is not None:
        variables["scale"] = draws.scales.astype(np.float64)
        tags["scale"] = [f"outlier period {j + 1} scale" for j in range(draws.scales.shape[2])]
    if draws.volatility is not None:
        variables["volatility"] = draws.volatility[:, :, 1:].astype(np.float64)
        tags["volatility"] = ["log-volatility AR(1) phi", "log-volatility innovation var"]
    return chain_diagnostics(variables, labels=tags)
