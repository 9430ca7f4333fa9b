"""Impulse responses, forecast error variance decompositions and posterior bands.

Every function takes one coefficient matrix ``B`` (k, n) or a stack of draws (S, k, n),
laid out as in :mod:`priors._types` (deterministic rows first, then the lag blocks), and
works on all draws at once. The lag-j matrix in equation-row form is
``A_j = B[m + (j-1) n : m + j n].T``, so ``y_t = c + sum_j A_j y_{t-j} + e_t``.

Responses are (S, h+1, n_response, n_shock): ``irf[s, i, r, j]`` is the response of
series r, i steps after the impact, to shock j (both in the series' original order).
Formulas: methods brief section 8; Lutkepohl (2005), sections 2.3.2-2.3.3; Pesaran &
Shin (1998).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np

from ._types import FloatArray
from .cancellation import checkpoint
from .errors import NotPositiveDefiniteError, SpecificationError
from .transforms import check_transforms

__all__ = [
    "IDENTIFICATIONS",
    "SHOCK_SIZES",
    "ResponseBands",
    "cumulative",
    "impulse_responses",
    "ma_coefficients",
    "response_units",
    "summarize_draws",
    "variance_decomposition",
]

IDENTIFICATIONS = ("recursive", "generalised")
SHOCK_SIZES = ("sd", "unit")


def _count(value: object, name: str, minimum: int) -> int:
    if isinstance(value, bool) or not isinstance(value, int | np.integer) or value < minimum:
        raise SpecificationError(f"{name} must be an integer >= {minimum}; got {value!r}")
    return int(value)


def _check_B(B: FloatArray, n_det: int, lags: int) -> tuple[FloatArray, bool]:
    """(S, k, n) float64 coefficients and whether a single (k, n) matrix was given."""
    n_det, lags = _count(n_det, "n_det", 0), _count(lags, "lags", 1)
    B = np.asarray(B, dtype=np.float64)
    if B.ndim not in (2, 3):
        raise SpecificationError(f"B must have shape (k, n) or (S, k, n); got shape {B.shape}")
    k, n = B.shape[-2:]
    if k != n_det + n * lags:
        raise SpecificationError(
            f"B has {k} rows but n_det + n * lags = {n_det} + {n} * {lags} = "
            f"{n_det + n * lags}; pass the model's n_det and lags")
    if not np.all(np.isfinite(B)):
        raise SpecificationError("B contains NaN or infinite values")
    return (B[None] if B.ndim == 2 else B), B.ndim == 2


def _check_sigma(Sigma: FloatArray, S: int, n: int) -> tuple[FloatArray, bool]:
    Sigma = np.asarray(Sigma, dtype=np.float64)
    batch_ok = Sigma.ndim == 2 or S == 1 or Sigma.shape[0] in (1, S)
    if Sigma.ndim not in (2, 3) or Sigma.shape[-2:] != (n, n) or not batch_ok:
        raise SpecificationError(
            f"Sigma must have shape ({n}, {n}) or ({S}, {n}, {n}) to match B; "
            f"got shape {Sigma.shape}")
    if not np.all(np.isfinite(Sigma)):
        raise SpecificationError("Sigma contains NaN or infinite values")
    return (Sigma[None] if Sigma.ndim == 2 else Sigma), Sigma.ndim == 2


def _ma(B: FloatArray, n_det: int, lags: int, horizon: int) -> FloatArray:
    """Phi (S, horizon+1, n, n) for checked (S, k, n) coefficients."""
    S, _, n = B.shape
    A = np.swapaxes(B[:, n_det:].reshape(S, lags, n, n), -1, -2)  # A[:, j-1] = A_j
    Phi = np.zeros((S, horizon + 1, n, n))
    Phi[:, 0] = np.eye(n)
    for i in range(1, horizon + 1):
        checkpoint()
        for j in range(1, min(i, lags) + 1):
            Phi[:, i] += Phi[:, i - j] @ A[:, j - 1]
    return Phi


def ma_coefficients(B: FloatArray, n_det: int, lags: int, horizon: int) -> FloatArray:
    """Moving-average (reduced-form impulse response) matrices of the VAR.

    ``Phi_0 = I`` and ``Phi_i = sum_{j=1}^{min(i, p)} Phi_{i-j} A_j`` (Lutkepohl 2005,
    eq. 2.1.22), so ``y_t = mu + sum_i Phi_i e_{t-i}``.

    Parameters
    ----------
    B : (S, k, n) or (k, n) coefficients, k = n_det + n * lags.
    n_det : number of deterministic/exogenous rows at the top of B.
    lags : lag order p.
    horizon : last step (>= 0).

    Returns
    -------
    (S, horizon+1, n, n), or (horizon+1, n, n) for a single B: ``Phi[i][r, c]`` is the
    response of series r at step i to a unit innovation in series c.
    """
    B3, single = _check_B(B, n_det, lags)
    Phi = _ma(B3, int(n_det), int(lags), _count(horizon, "horizon", 0))
    return Phi[0] if single else Phi


def _impact(Sigma: FloatArray, identification: str, shock_size: str,
            ordering: Sequence[int] | None) -> FloatArray:
    """Impact matrix G (S, n, n) with ``Theta_i = Phi_i G``; column j is shock j."""
    if identification not in IDENTIFICATIONS:
        raise SpecificationError(f"identification must be one of "
                                 f"{', '.join(IDENTIFICATIONS)}; got {identification!r}")
    if shock_size not in SHOCK_SIZES:
        raise SpecificationError(
            f"shock_size must be one of {', '.join(SHOCK_SIZES)}; got {shock_size!r}")
    n = Sigma.shape[-1]
    diag = np.diagonal(Sigma, axis1=-2, axis2=-1)
    if np.any(diag <= 0):
        raise NotPositiveDefiniteError("Sigma has a non-positive variance on its diagonal")
    if identification == "generalised":
        if ordering is not None:
            raise SpecificationError("generalised responses do not depend on the ordering; "
                                     "drop ordering or use identification='recursive'")
        scale = diag if shock_size == "unit" else np.sqrt(diag)
        return Sigma / scale[:, None, :]
    perm = np.arange(n) if ordering is None else np.asarray(ordering)
    if perm.shape != (n,) or not np.issubdtype(perm.dtype, np.integer) or not np.array_equal(
            np.sort(perm), np.arange(n)):
        raise SpecificationError(f"ordering must list each series index 0..{n - 1} exactly "
                                 f"once; got {ordering!r}")
    inv = np.argsort(perm)
    try:
        L = np.linalg.cholesky(Sigma[:, perm][:, :, perm])
    except np.linalg.LinAlgError as exc:
        raise NotPositiveDefiniteError("Sigma is not positive definite, so it has no "
                                       "Cholesky factor; check the covariance draws") from exc
    P = L[:, inv][:, :, inv]  # P P' = Sigma, triangular in the chosen order
    if shock_size == "unit":
        P = P / np.diagonal(P, axis1=-2, axis2=-1)[:, None, :]
    return P


def impulse_responses(
    B: FloatArray,
    Sigma: FloatArray,
    n_det: int,
    lags: int,
    horizon: int,
    *,
    identification: str = "recursive",
    shock_size: str = "sd",
    ordering: Sequence[int] | None = None,
) -> FloatArray:
    """Structural impulse responses ``Theta_i = Phi_i G``.

    - "recursive": ``G = P``, the Cholesky factor of Sigma with the series taken in
      ``ordering`` (a permutation of 0..n-1, default natural order; the first series is
      affected by no other shock on impact), mapped back to the original order, so
      ``P P' = Sigma`` (Lutkepohl 2005, sec. 2.3.2).
    - "generalised": ``psi_j(i) = sigma_jj^{-1/2} Phi_i Sigma e_j`` (Pesaran & Shin 1998);
      independent of the ordering (passing one raises). For the series ordered first it
      equals the recursive response.

    ``shock_size``: "sd" is one standard deviation of the shock; "unit" rescales each
    shock so the shocked series' own impact response is exactly 1 (recursive:
    ``Theta_i e_j / P_jj``; generalised: ``Phi_i Sigma e_j / sigma_jj``).

    Parameters
    ----------
    B : (S, k, n) or (k, n) coefficients.
    Sigma : (S, n, n) or (n, n) innovation covariances; one (n, n) is shared by all draws.
    n_det, lags, horizon : as in :func:`ma_coefficients`.
    identification : "recursive" or "generalised".
    shock_size : "sd" or "unit".
    ordering : recursive only; series indices in causal order, e.g. ``[2, 0, 1]``.

    Returns
    -------
    (S, horizon+1, n_response, n_shock); without the S axis if B and Sigma are single.
    """
    B3, single_b = _check_B(B, n_det, lags)
    Sig3, single_s = _check_sigma(Sigma, B3.shape[0], B3.shape[2])
    G = _impact(Sig3, identification, shock_size, ordering)
    Phi = _ma(B3, int(n_det), int(lags), _count(horizon, "horizon", 0))
    Theta = Phi @ G[:, None]
    return Theta[0] if single_b and single_s else Theta


def variance_decomposition(
    B: FloatArray,
    Sigma: FloatArray,
    n_det: int,
    lags: int,
    horizon: int,
    *,
    identification: str = "recursive",
    ordering: Sequence[int] | None = None,
) -> FloatArray:
    """Forecast error variance decomposition (Lutkepohl 2005, sec. 2.3.3).

    ``omega_ij(h) = sum_{s<h} (e_i' Theta_s e_j)^2 / sum_{s<h} e_i' Phi_s Sigma Phi_s' e_i``
    with the one-s.d. responses of :func:`impulse_responses`. For "recursive" the
    denominator equals the sum of the numerators over j (``P P' = Sigma``), so rows sum
    to 1. The generalised numerators (Pesaran & Shin 1998) do not sum to the
    denominator when shocks are correlated; they are normalised by their row sum here, so
    generalised rows also sum to 1 (shares, not the raw Pesaran-Shin ratios). Neither
    depends on the scale of Sigma.

    Parameters are as in :func:`impulse_responses`; ``horizon`` >= 1 is the longest
    forecast horizon h.

    Returns
    -------
    (S, horizon, n, n), without S for single inputs: ``[s, h-1, i, j]`` is the share of
    series i's h-step forecast error variance due to shock j, h = 1..horizon.
    """
    theta = impulse_responses(B, Sigma, n_det, lags, _count(horizon, "horizon", 1) - 1,
                              identification=identification, ordering=ordering)
    contrib = np.cumsum(theta**2, axis=-3)
    return contrib / contrib.sum(axis=-1, keepdims=True)


def _check_responses(responses: FloatArray) -> FloatArray:
    responses = np.asarray(responses, dtype=np.float64)
    if responses.ndim < 3:
        raise SpecificationError("responses must have shape (..., steps, n_response, "
                                 f"n_shock); got shape {responses.shape}")
    return responses


def cumulative(responses: FloatArray) -> FloatArray:
    """Running sum over the step axis of (..., h+1, n_response, n_shock) responses: the
    response of the level of a series whose differences were modelled."""
    responses = _check_responses(responses)
    return np.cumsum(responses, axis=-3)


def response_units(
    responses: FloatArray, transforms: str | Sequence[str]
) -> tuple[FloatArray, tuple[str, ...]]:
    """Responses in the user's units where that is exact, with a unit label per series.

    ``responses`` are (..., h+1, n_response, n_shock) in model units; axis -2 matches
    ``transforms``. The VAR is linear in model units, so a shock shifts the whole path
    of the model variable by the response, draw by draw, whatever the baseline:

    - "none": unchanged ("units").
    - "diff": the level is the running sum of the differences, so its shift is the
      cumulated response ("units").
    - "log": the level is multiplied by ``exp(r)``, so ``100 (exp(r) - 1)`` is the exact
      percent deviation from the no-shock path ("percent").
    - "logdiff": cumulate to the log level, then as "log" ("percent").
    - "log1p": unchanged ("log(1+units)"): the level changes by
      ``(1 + level) (exp(r) - 1)``, which depends on the baseline, so no exact conversion.

    Returns
    -------
    values : same shape as ``responses``. labels : tuple of n_response unit names.
    """
    responses = _check_responses(responses)
    names = check_transforms(transforms, responses.shape[-2])
    out = responses.copy()
    labels = []
    for r, t in enumerate(names):
        col = out[..., r, :]
        if t in ("diff", "logdiff"):
            col = np.cumsum(col, axis=-2)
        if t in ("log", "logdiff"):
            col = 100.0 * np.expm1(col)
        out[..., r, :] = col
        labels.append({"none": "units", "diff": "units", "log1p": "log(1+units)"}.get(
            t, "percent"))
    return out, tuple(labels)


@dataclass(frozen=True)
class ResponseBands:
    """Pointwise posterior summaries of response draws.

    ``median`` has the shape of one draw; ``quantiles[level]`` likewise, for each level.
    """

    median: FloatArray
    quantiles: Mapping[float, FloatArray]


def summarize_draws(draws: FloatArray,
                    levels: Sequence[float] = (0.05, 0.16, 0.84, 0.95)) -> ResponseBands:
    """Pointwise median and quantiles over axis 0 of (S, ...) draws.

    Each step/series/shock is summarised separately, so the median path is in general no
    single draw's response and the bands are not joint bands (Sims & Zha 1999).
    """
    draws = np.asarray(draws, dtype=np.float64)
    if draws.ndim < 1 or draws.shape[0] < 1:
        raise SpecificationError(f"draws must have shape (S, ...) with S >= 1; got {draws.shape}")
    q = np.asarray(levels, dtype=np.float64)
    if q.ndim != 1 or np.any(~((q > 0) & (q < 1))):
        raise SpecificationError(f"levels must be probabilities in (0, 1); got {levels!r}")
    values = np.quantile(draws, q, axis=0)
    return ResponseBands(np.median(draws, axis=0),
                         {float(lv): v for lv, v in zip(q, values, strict=True)})
