"""Inventory quantities from simulated demand paths (methods brief, sec. 12).

Lead-time demand is summed path by path, D = sum_{h=start}^{end} y_{T+h}, from paths
of shape (S, h, n) already in the user's units, so correlation across steps and series
is kept rather than assumed away. The reorder point, expected shortage and fill-rate
reorder point are then read off the S draws of D (shape (S,)) as an empirical
distribution; :func:`lead_time_covariance` gives the plug-in Var(D | B, Sigma) of a VAR
in levels, the check for the simulation.

Quantile method: numpy's ``"inverted_cdf"`` (Hyndman & Fan type 1), the smallest draw
d with F_S(d) >= P1. It is the textbook reorder point for discrete demand (Silver, Pyke
& Thomas 2017) applied to the empirical distribution, so the cycle service level
achieved on the draws is never below the target. It differs from the linear (type 7)
quantiles of :mod:`priors.forecast` by less than one gap between order statistics.

Reference: Silver, Pyke & Thomas (2017), *Inventory and Production Management in
Supply Chains*, 4th ed., ch. 6 (reorder points, G_u(k), fill rate).
"""

from __future__ import annotations

import math
import operator
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from ._types import FloatArray
from .errors import SpecificationError
from .irf import ma_coefficients

__all__ = [
    "ReplenishmentAdvice",
    "exceedance_probabilities",
    "expected_shortage",
    "fill_rate_reorder_point",
    "lead_time_covariance",
    "reorder_point",
    "replenishment_advice",
    "window_totals",
]

_QUANTILE_METHOD = "inverted_cdf"


def _array(x: object, name: str, ndim: int, *, allow_nan: bool = False) -> FloatArray:
    """x as float64; SpecificationError unless it is non-empty, ndim-D and finite."""
    a = np.asarray(x, dtype=np.float64)
    if a.ndim != ndim or a.size == 0:
        raise SpecificationError(f"{name} must be a non-empty {ndim}-D array; got shape "
                                 f"{a.shape}")
    bad = np.isinf(a) if allow_nan else ~np.isfinite(a)
    if bad.any():
        raise SpecificationError(f"{name} must be finite; found {int(bad.sum())} bad values")
    return a


def _totals(totals: object) -> FloatArray:
    d = np.asarray(totals, dtype=np.float64)
    if d.ndim != 1:
        raise SpecificationError(f"totals must be the (S,) draws of one lead-time demand; "
                                 f"got shape {d.shape}: pass one column, or use "
                                 f"window_totals(paths, weights=...) to add series")
    return _array(d, "totals", 1)


def _probability(value: float, name: str) -> float:
    v = float(value)
    if not 0.0 < v < 1.0:
        raise SpecificationError(f"{name} must lie strictly between 0 and 1 (e.g. 0.95); "
                                 f"got {value}")
    return v


def _nonnegative(value: float, name: str) -> float:
    v = float(value)
    if not (math.isfinite(v) and v >= 0.0):
        raise SpecificationError(f"{name} must be a finite number >= 0; got {value}")
    return v


def window_totals(paths: FloatArray, start: int = 1, end: int | None = None,
                  weights: FloatArray | None = None) -> FloatArray:
    """Total demand over steps ``start..end`` of each path: (S, n), or (S,) with weights.

    D^(s)_i = sum_{h=start}^{end} y^(s)_{T+h,i}; with weights w, D^(s) = sum_i w_i D^(s)_i.
    Sums are taken per path, so the draws of D carry the dependence across steps and
    series (methods brief sec. 12). For periodic review sum over R + L steps.

    Parameters
    ----------
    paths : (S, h, n) simulated paths in the user's units.
    start, end : 1-based, inclusive steps; ``end`` defaults to h.
    weights : (n,) optional, e.g. 1 for the series to add and 0 for the rest, or unit
        conversions (pieces -> kg).
    """
    y = _array(paths, "paths (S, h, n)", 3)
    h, n = y.shape[1:]
    start = operator.index(start)
    end = h if end is None else operator.index(end)
    if not 1 <= start <= end <= h:
        raise SpecificationError(f"the window must satisfy 1 <= start <= end <= h = {h} "
                                 f"(the forecast horizon); got start={start}, end={end}")
    total = y[:, start - 1 : end].sum(axis=1)
    if weights is None:
        return total
    w = _array(weights, "weights", 1)
    if w.size != n:
        raise SpecificationError(f"weights must have one entry per series (n = {n}); "
                                 f"got {w.size}")
    return total @ w


def reorder_point(totals: FloatArray, service_level: float) -> float:
    """Reorder point at cycle service level P1: s = Q_{P1}(D), the P1 quantile.

    Uses numpy's ``"inverted_cdf"`` quantile: the smallest draw d with
    #{D <= d} / S >= P1, so P(D <= s) >= P1 on the draws (see the module docstring).

    Parameters
    ----------
    totals : (S,) draws of lead-time demand.  service_level : P1 in (0, 1).
    """
    d = _totals(totals)
    p = _probability(service_level, "service_level")
    return float(np.quantile(d, p, method=_QUANTILE_METHOD))


def _tail_sums(d: FloatArray) -> tuple[FloatArray, float, FloatArray]:
    """Sorted draws x, centre c and tail[i] = sum_{j >= i} (x_j - c), i = 0..S.

    Centring at the mean keeps the cumulative sums small, so E[(D - s)^+] computed from
    them loses no digits to cancellation.
    """
    x = np.sort(d)
    c = float(x.mean())
    tail = np.zeros(x.size + 1)
    tail[:-1] = np.cumsum((x - c)[::-1])[::-1]
    return x, c, tail


def expected_shortage(totals: FloatArray, stock: float | FloatArray) -> float | FloatArray:
    """Expected shortage E[(D - s)^+] = (1/S) sum_i max(D_i - s, 0) over the draws.

    For normal demand this is sigma_L G_u((s - mu_L) / sigma_L) with
    G_u(k) = phi(k) - k (1 - Phi(k)) (Silver, Pyke & Thomas 2017). Computed from sorted
    draws and tail sums: O(S log S) once, then O(log S) per stock level.

    Parameters
    ----------
    totals : (S,) draws of lead-time demand.
    stock : a stock level s, or an array of them.

    Returns
    -------
    float for scalar ``stock``, else an array of the shape of ``stock``.
    """
    d = _totals(totals)
    s = np.asarray(stock, dtype=np.float64)
    if not np.all(np.isfinite(s)):
        raise SpecificationError("stock levels must be finite")
    x, c, tail = _tail_sums(d)
    above = np.searchsorted(x, s, side="right")  # draws <= s
    out = np.maximum((tail[above] - (x.size - above) * (s - c)) / x.size, 0.0)
    return float(out) if out.ndim == 0 else out


def fill_rate_reorder_point(totals: FloatArray, fill_rate: float,
                            order_quantity: float) -> float:
    """Smallest s with E[(D - s)^+] <= (1 - P2) Q, exact on the draws.

    Silver, Pyke & Thomas (2017): with order quantity Q the expected shortage per
    replenishment cycle over Q is 1 - P2; for normal demand this is the condition
    G_u(k) = Q (1 - P2) / sigma_L. (Their approximation: it ignores the shortage still
    outstanding when an order arrives, E[(D - s - Q)^+], negligible unless Q is small
    against sigma_L.) G(s) = E[(D - s)^+] over the draws is convex, piecewise linear
    with knots at the sorted draws x_(i) and slope -#{D > s}/S, so s is found by
    locating the bracketing knots and interpolating: no grid, no iteration.

    A loose target, (1 - P2) Q >= mean(D) - min(D), is met at or below the smallest
    draw, where G(s) = mean(D) - s exactly: s = mean(D) - (1 - P2) Q is returned,
    which may be negative (reorder only once backorders reach -s). It is not clipped,
    so E[(D - s)^+] equals the target at the returned s in every case.

    Parameters
    ----------
    totals : (S,) draws of lead-time demand.  fill_rate : P2 in (0, 1).
    order_quantity : Q > 0, in the units of ``totals``.
    """
    d = _totals(totals)
    p2 = _probability(fill_rate, "fill_rate")
    q = _nonnegative(order_quantity, "order_quantity")
    if q == 0.0:
        raise SpecificationError("order_quantity must be > 0 for a fill-rate target")
    target = (1.0 - p2) * q
    x, c, tail = _tail_sums(d)
    S = x.size
    above = S - 1 - np.arange(S)  # draws after x_(i) in sorted order
    G = np.maximum((tail[1:] - above * (x - c)) / S, 0.0)  # G(x_(i)), non-increasing
    i = int(np.argmax(G <= target))  # first knot meeting the target; G(x_(S-1)) = 0
    if i == 0:
        return float(c - target)
    # on [x_(i-1), x_(i)] the S - i draws from x_(i) up exceed s: slope -(S - i)/S
    return float(x[i - 1] + (G[i - 1] - target) * S / (S - i))


@dataclass(frozen=True)
class ReplenishmentAdvice:
    """What :func:`replenishment_advice` reports; demand quantities in units of D.

    target : "service_level" or "fill_rate", with its value in ``target_value``.
    mean_demand, quantile_levels, demand_quantiles : mean and quantiles of lead-time
        demand (quantiles by the ``"inverted_cdf"`` method).
    reorder_point : s meeting the target.  safety_stock : s - mean_demand.
    inventory_position : on_hand + on_order - backorders.
    suggested_order : see :func:`replenishment_advice`.
    stockout_probability : P(D > inventory position), a stock-out before an order
        placed now can arrive if nothing is ordered.
    expected_shortage : E[(D - position)^+], units short by then if nothing is ordered.
    cycle_service_level : P(D <= s) achieved on the draws.
    fill_rate : 1 - E[(D - s)^+] / Q achieved on the draws, floored at 0 (None
        without an order quantity).
    draws : S, the number of draws the figures come from.
    """

    target: str
    target_value: float
    mean_demand: float
    quantile_levels: tuple[float, ...]
    demand_quantiles: tuple[float, ...]
    reorder_point: float
    safety_stock: float
    inventory_position: float
    suggested_order: float
    stockout_probability: float
    expected_shortage: float
    cycle_service_level: float
    fill_rate: float | None
    draws: int


def replenishment_advice(
    totals: FloatArray,
    *,
    on_hand: float,
    on_order: float = 0.0,
    backorders: float = 0.0,
    service_level: float | None = None,
    fill_rate: float | None = None,
    order_quantity: float | None = None,
    levels: Sequence[float] = (0.05, 0.5, 0.95),
    whole_units: bool = False,
) -> ReplenishmentAdvice:
    """Reorder point, safety stock and a suggested order from lead-time demand draws.

    Give exactly one target: ``service_level`` (P1, :func:`reorder_point`) or
    ``fill_rate`` (P2, :func:`fill_rate_reorder_point`, needs ``order_quantity``).

    Order rule (continuous review, backorders; Silver, Pyke & Thomas 2017): the
    suggested order is the shortfall max(0, s - IP) of the inventory position
    IP = on_hand + on_order - backorders below the reorder point s, so that after
    ordering IP >= s and the chance of a stock-out before the order arrives is at most
    the target. With ``order_quantity`` Q the shortfall is rounded up to a whole number
    of lots, ceil((s - IP) / Q) Q (the (s, nQ) rule).

    Parameters
    ----------
    totals : (S,) draws of demand over the lead time (plus review period).
    on_hand, on_order, backorders : stock quantities >= 0, in the units of ``totals``.
    service_level, fill_rate : in (0, 1); exactly one of them.
    order_quantity : Q > 0, lot size; required with ``fill_rate``.
    levels : quantile levels of demand to report, each in (0, 1).
    whole_units : demand comes in whole units (counts): the reorder point is rounded up
        to a whole number (rounding up never lowers the service achieved) and so is the
        suggested order (then to whole lots with ``order_quantity``).
    """
    d = _totals(totals)
    if (service_level is None) == (fill_rate is None):
        raise SpecificationError("give exactly one target: service_level (P1, e.g. 0.95) "
                                 "or fill_rate (P2, with order_quantity)")
    q = None if order_quantity is None else _nonnegative(order_quantity, "order_quantity")
    if q == 0.0:
        raise SpecificationError("order_quantity must be > 0; leave it out if there is none")
    if fill_rate is not None and q is None:
        raise SpecificationError("a fill_rate target needs order_quantity (Q > 0)")
    position = (_nonnegative(on_hand, "on_hand") + _nonnegative(on_order, "on_order")
                - _nonnegative(backorders, "backorders"))
    lv = tuple(_probability(v, "each quantile level") for v in levels)
    if service_level is not None:
        target, value = "service_level", float(service_level)
        s = reorder_point(d, service_level)
    else:
        target, value = "fill_rate", float(fill_rate)
        s = fill_rate_reorder_point(d, fill_rate, q)
    if whole_units:
        s = float(math.ceil(s - 1e-9))  # a reorder point a rounding error above n is n
    mean = float(d.mean())
    shortfall = max(0.0, s - position)
    if whole_units:
        shortfall = float(math.ceil(shortfall - 1e-9))
    if q is not None:
        shortfall = math.ceil(shortfall / q) * q
    short_s, short_ip = expected_shortage(d, np.array([s, position]))
    return ReplenishmentAdvice(
        target=target,
        target_value=value,
        mean_demand=mean,
        quantile_levels=lv,
        demand_quantiles=tuple(np.quantile(d, lv, method=_QUANTILE_METHOD).tolist()),
        reorder_point=s,
        safety_stock=s - mean,
        inventory_position=position,
        suggested_order=float(shortfall),
        stockout_probability=float(np.mean(d > position)),
        expected_shortage=float(short_ip),
        cycle_service_level=float(np.mean(d <= s)),
        fill_rate=None if q is None else max(0.0, 1.0 - float(short_s) / q),
        draws=d.size,
    )


def exceedance_probabilities(paths: FloatArray, thresholds: FloatArray, *,
                             below: bool = False) -> tuple[FloatArray, FloatArray]:
    """P(y_{T+h,i} > c_i) per step, and P(some step of the window exceeds c_i).

    With ``below=True``: P(y < c) instead (stock-out or low-demand alerts). Both are
    shares of the S paths; the any-step share is taken path by path, so it is at
    least the largest per-step share.

    Parameters
    ----------
    paths : (S, h, n).
    thresholds : (n,), or (h, n) for thresholds that change by step; NaN means no
        threshold (the result is NaN there, and any-step ignores such steps).

    Returns
    -------
    per_step : (h, n).  any_step : (n,), NaN for a series without any threshold.
    """
    y = _array(paths, "paths (S, h, n)", 3)
    h, n = y.shape[1:]
    c = _array(thresholds, "thresholds", np.ndim(thresholds), allow_nan=True)
    if c.shape not in ((n,), (h, n)):
        raise SpecificationError(f"thresholds must have shape (n,) = ({n},) or (h, n) = "
                                 f"({h}, {n}); got {c.shape}")
    c = np.broadcast_to(c, (h, n))
    none = np.isnan(c)
    hit = y < c if below else y > c  # comparisons with NaN are False
    per_step = np.where(none, np.nan, hit.mean(axis=0))
    any_step = np.where(none.all(axis=0), np.nan, hit.any(axis=1).mean(axis=0))
    return per_step, any_step


def lead_time_covariance(B: FloatArray, Sigma: FloatArray, n_det: int, lags: int,
                         lead_time: int) -> FloatArray:
    """Plug-in Var(D_L | B, Sigma) of the lead-time sum D_L = sum_{h=1}^{L} y_{T+h}.

    Var(D_L) = sum_{s=1}^{L} C_s Sigma C_s', C_s = sum_{j=0}^{L-s} Phi_j, with the MA
    coefficients Phi_0 = I, Phi_i = sum_{j=1}^{min(i,p)} Phi_{i-j} A_j from
    :func:`priors.irf.ma_coefficients` (methods brief sec. 12; Luetkepohl 2005
    sec. 2.2.2). The shock of step s reaches steps s..L, so it enters the sum through
    C_s. For a VAR in levels, parameters held fixed: the full predictive variance adds
    the spread of the parameters and is larger.

    Parameters
    ----------
    B : (k, n), k = n_det + n * lags.  Sigma : (n, n) innovation covariance.
    n_det : deterministic columns m.  lags : p >= 1.  lead_time : L >= 1 steps.

    Returns
    -------
    (n, n) covariance of D_L.
    """
    Bm = _array(B, "B (k, n) (one coefficient matrix, not a stack of draws)", 2)
    L = operator.index(lead_time)
    if L < 1:
        raise SpecificationError(f"lead_time must be >= 1 step; got {L}")
    Phi = ma_coefficients(Bm, n_det, lags, L - 1)  # checks n_det, lags and the rows of B
    n = Bm.shape[1]
    S = _array(Sigma, "Sigma (n, n)", 2)
    if S.shape != (n, n) or not np.allclose(S, S.T):
        raise SpecificationError(f"Sigma must be symmetric of shape ({n}, {n}); got "
                                 f"shape {S.shape}")
    C = np.cumsum(Phi, axis=0)  # C[i] = Phi_0 + ... + Phi_i = C_{L-i}
    V = np.einsum("iab,bc,idc->ad", C, S, C)
    return (V + V.T) / 2.0
