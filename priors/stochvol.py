"""Common stochastic volatility for the conjugate Minnesota VAR (Carriero, Clark &
Marcellino 2016).

Model: ``e_t = exp(h_t / 2) u_t`` with u_t ~ N(0, Sigma) and one log-volatility for all
series, ``h_t = phi h_{t-1} + sigma_eta eta_t``, h_0 = 0 (so Sigma is the covariance at
normal volatility). Given h, dividing row t of (Y, X) by exp(h_t / 2) gives the
constant-volatility VAR, so the natural-conjugate posterior of (B, Sigma) stays
Normal-inverse-Wishart (the Kronecker structure is kept) and (B, Sigma) are drawn
exactly, jointly, with one QR per sweep (:mod:`priors.conjugate`, :mod:`priors.sampling`).

Gibbs blocks per sweep:

1. (B, Sigma) | h: exact NIW draw on the reweighted data.
2. h | B, Sigma, phi, sigma_eta: independence Metropolis-Hastings with a Gaussian
   proposal at the mode of the full conditional, whose precision is tridiagonal
   (Chan & Hsiao 2014; band matrices as in Chan & Jeliazkov 2009): Newton steps to the
   mode, one banded Cholesky, an O(T) draw.
3. phi | h, sigma_eta: Normal (prior N(0.9, 0.2^2)) truncated to (-1, 1); sigma_eta^2 |
   h, phi: inverse-Gamma (prior IG(3, 0.1), mean 0.05). Both conjugate; these prior
   values are our weakly informative choice for monthly demand data, not from a paper.

Shapes: T rows (dummies excluded); h (T,) per chain.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
from scipy import special
from scipy.linalg import cho_solve_banded, cholesky_banded, solve_banded

from ._types import FloatArray
from .cancellation import checkpoint
from .conjugate import posterior
from .data import Design
from .sampling import sample_posterior
from .shrinkage import NIWPrior

__all__ = ["SVDraws", "SVPrior", "run_sv_chains", "simulate_log_volatility"]


@dataclass(frozen=True)
class SVPrior:
    """Priors of the log-volatility process: phi ~ N(phi_mean, phi_sd^2) on (-1, 1),
    sigma_eta^2 ~ IG(shape, scale)."""

    phi_mean: float = 0.9
    phi_sd: float = 0.2
    shape: float = 3.0
    scale: float = 0.1


@dataclass(frozen=True)
class SVDraws:
    """Kept draws per chain: B (C, D, k, n), Sigma (C, D, n, n), h (C, D, T), phi and
    sig2 (C, D), and the MH acceptance rate of the h step per chain (C,)."""

    B: np.ndarray
    Sigma: np.ndarray
    h: np.ndarray
    phi: np.ndarray
    sig2: np.ndarray
    acceptance: FloatArray


def _prior_precision(phi: float, sig2: float, T: int) -> FloatArray:
    """Tridiagonal precision of h_1..T under h_t = phi h_{t-1} + eta_t, h_0 = 0, in
    symmetric lower band form (2, T): row 0 the diagonal, row 1 the sub-diagonal."""
    diag = np.full(T, 1.0 + phi**2)
    diag[-1] = 1.0
    band = np.zeros((2, T))
    band[0] = diag / sig2
    band[1, :-1] = -phi / sig2
    return band


def _band_matvec(band: FloatArray, x: FloatArray) -> FloatArray:
    out = band[0] * x
    out[:-1] += band[1, :-1] * x[1:]
    out[1:] += band[1, :-1] * x[:-1]
    return out


def _log_target(h: FloatArray, q: FloatArray, n: int, band: FloatArray) -> float:
    return float(np.sum(-0.5 * n * h - 0.5 * q * np.exp(-h))
                 - 0.5 * h @ _band_matvec(band, h))


def _gaussian_approx(q: FloatArray, n: int, band: FloatArray, h0: FloatArray
                     ) -> tuple[FloatArray, FloatArray]:
    """Mode of the full conditional of h and the banded Cholesky factor of minus its
    Hessian there (Newton's method; the target is strictly concave)."""
    h = h0.copy()
    for _ in range(30):
        g = -0.5 * n + 0.5 * q * np.exp(-h) - _band_matvec(band, h)
        K = band.copy()
        K[0] += 0.5 * q * np.exp(-h)
        step = cho_solve_banded((cholesky_banded(K, lower=True), True), g)
        h = h + step
        if np.max(np.abs(step)) < 1e-8:
            break
    K = band.copy()
    K[0] += 0.5 * q * np.exp(-h)
    return h, cholesky_banded(K, lower=True)


def _draw_h(rng: np.random.Generator, h: FloatArray, q: FloatArray, n: int,
            band: FloatArray) -> tuple[FloatArray, bool]:
    """Independence MH: propose from N(mode, K^-1), accept by the ratio of
    target / proposal densities."""
    mode, L = _gaussian_approx(q, n, band, h)
    # x = mode + L'^-1 z has precision L L' = K
    upper = np.zeros_like(L)
    upper[0, 1:] = L[1, :-1]
    upper[1] = L[0]
    z = rng.standard_normal(h.size)
    prop = mode + solve_banded((0, 1), upper, z)

    def log_q(x: FloatArray) -> float:
        d = x - mode
        Kd = L[0] * d  # L' d in band form, then |L' d|^2
        Kd[:-1] += L[1, :-1] * d[1:]
        return -0.5 * float(Kd @ Kd)

    log_ratio = (_log_target(prop, q, n, band) - _log_target(h, q, n, band)
                 + log_q(h) - log_q(prop))
    if np.log(rng.random()) < log_ratio:
        return prop, True
    return h, False


def _draw_phi_sig2(rng: np.random.Generator, h: FloatArray, phi: float, prior: SVPrior
                   ) -> tuple[float, float]:
    lag = np.concatenate([[0.0], h[:-1]])
    resid = h - phi * lag
    sig2 = 1.0 / rng.gamma(prior.shape + h.size / 2.0,
                           1.0 / (prior.scale + 0.5 * resid @ resid))
    prec = 1.0 / prior.phi_sd**2 + lag @ lag / sig2
    mean = (prior.phi_mean / prior.phi_sd**2 + lag @ h / sig2) / prec
    sd = 1.0 / np.sqrt(prec)
    a, b = special.ndtr((-1.0 - mean) / sd), special.ndtr((1.0 - mean) / sd)
    u = a + rng.random() * (b - a)
    phi_new = mean + sd * special.ndtri(np.clip(u, 1e-300, 1.0 - 1e-16))
    return float(np.clip(phi_new, -0.9999, 0.9999)), float(sig2)


def run_sv_chains(
    rngs: list[np.random.Generator],
    design: Design,
    prior: NIWPrior,
    *,
    burn: int,
    keep: int,
    thin: int = 1,
    sv_prior: SVPrior = SVPrior(),
    progress: Callable[[int, int], None] | None = None,
    workers: int = 1,
) -> SVDraws:
    """Run one Gibbs chain per generator (see the module notes); kept draws. With
    ``workers > 1`` the chains are split among that many spawned processes (one BLAS
    thread each); ``progress`` is then called as groups finish."""
    if workers > 1 and len(rngs) > 1:
        return _run_sv_parallel(rngs, design, prior, burn, keep, thin, sv_prior, progress,
                                min(workers, len(rngs)))
    C, T, n, k = len(rngs), design.nobs, design.n, design.k
    sweeps = burn + keep * thin
    out_B = np.empty((C, keep, k, n), dtype=np.float32)
    out_S = np.empty((C, keep, n, n), dtype=np.float32)
    out_h = np.empty((C, keep, T), dtype=np.float32)
    out_phi = np.empty((C, keep), dtype=np.float32)
    out_sig2 = np.empty((C, keep), dtype=np.float32)
    accepted = np.zeros(C)
    every = max(1, sweeps // 100)
    for c, rng in enumerate(rngs):
        h, phi, sig2 = np.zeros(T), sv_prior.phi_mean, sv_prior.scale / (sv_prior.shape - 1)
        for s in range(sweeps):
            checkpoint()
            w = np.exp(-0.5 * h)[:, None]
            reweighted = Design(design.Y * w, design.X * w, design.lags, design.n_det,
                                design.labels, design.names)
            draw = sample_posterior(rng, posterior(reweighted, prior), 1)
            B, Sigma = draw.B[0], draw.Sigma[0]
            E = design.Y - design.X @ B
            q = np.einsum("tn,nm,tm->t", E, np.linalg.inv(Sigma), E)
            h, ok = _draw_h(rng, h, q, n, _prior_precision(phi, sig2, T))
            accepted[c] += ok
            phi, sig2 = _draw_phi_sig2(rng, h, phi, sv_prior)
            kept = s - burn
            if kept >= 0 and (kept + 1) % thin == 0:
                d = kept // thin
                out_B[c, d], out_S[c, d], out_h[c, d] = B, Sigma, h
                out_phi[c, d], out_sig2[c, d] = phi, sig2
            if progress is not None and ((s + 1) % every == 0 or s + 1 == sweeps):
                progress(c * sweeps + s + 1, C * sweeps)
    return SVDraws(out_B, out_S, out_h, out_phi, out_sig2, accepted / sweeps)


def simulate_log_volatility(rng: np.random.Generator, h_last: FloatArray, phi: FloatArray,
                            sig2: FloatArray, steps: int) -> FloatArray:
    """Future log-volatility paths (S, steps) from the AR(1), one per draw (S,)."""
    out = np.empty((h_last.size, steps))
    cur = h_last.astype(np.float64)
    for j in range(steps):
        cur = phi * cur + np.sqrt(sig2) * rng.standard_normal(h_last.size)
        out[:, j] = cur
    return out


def _sv_worker(args: tuple) -> SVDraws:
    from threadpoolctl import threadpool_limits

    rngs, design, prior, burn, keep, thin, sv_prior = args
    with threadpool_limits(limits=1, user_api="blas"):
        return run_sv_chains(rngs, design, prior, burn=burn, keep=keep, thin=thin,
                             sv_prior=sv_prior)


def _run_sv_parallel(rngs: list[np.random.Generator], design: Design, prior: NIWPrior,
                     burn: int, keep: int, thin: int, sv_prior: SVPrior,
                     progress: Callable[[int, int], None] | None, workers: int) -> SVDraws:
    import multiprocessing as mp
    from concurrent.futures import ProcessPoolExecutor

    groups = [list(g) for g in np.array_split(np.arange(len(rngs)), workers)]
    total = len(rngs) * (burn + keep * thin)
    with ProcessPoolExecutor(max_workers=workers, mp_context=mp.get_context("spawn")) as pool:
        futures = [pool.submit(_sv_worker, ([rngs[c] for c in g], design, prior, burn, keep,
                                            thin, sv_prior)) for g in groups]
        parts, done = [], 0
        for fut, g in zip(futures, groups, strict=True):
            parts.append(fut.result())
            done += len(g) * (burn + keep * thin)
            if progress is not None:
                progress(done, total)
    return SVDraws(*(np.concatenate([getattr(p, f) for p in parts])
                     for f in ("B", "Sigma", "h", "phi", "sig2", "acceptance")))
