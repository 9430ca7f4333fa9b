"""Convergence diagnostics of MCMC chains: rank-normalised split R-hat, bulk and tail
ESS and the Monte Carlo standard error of the mean, for every element of every variable.

The estimators are those of Vehtari, Gelman, Simpson, Carpenter & Buerkner (2021),
"Rank-normalization, folding, and localization: an improved R-hat for assessing
convergence of MCMC", Bayesian Analysis 16(2), 667-718, as ArviZ implements them
(``arviz.rhat(method="rank")``, ``arviz.ess(method="bulk" | "tail")``,
``arviz.mcse(method="mean")``; ESS by Geyer's (1992) initial monotone sequence).

ArviZ (0.x and 1.x alike) takes the whole array but computes element by element in a
Python loop: about 26 s for 5220 elements of 4 x 1000 draws on the 2-core development
machine. The default ``backend="numpy"`` is the same algorithm vectorised over blocks of
elements (per block: two sorts for the rank normalisations, four batched FFTs for the
autocovariances), about 5 s there; the tests check it against ArviZ's own functions,
element by element, under ArviZ 0.23 and 1.x. ``backend="arviz"`` calls ArviZ instead
(imported lazily), for cross-checks.

Tail ESS uses the 5% and 95% quantiles, as in the paper and ArviZ 0.x; ArviZ 1.x's
default (``arviz.summary``) takes them from ``rcParams["stats.ci_prob"]`` (0.89 -> 11%
and 89%), so its ``ess_tail`` column differs from this one.
"""

from __future__ import annotations

import os
from collections.abc import Iterator, Mapping, Sequence
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from typing import Any, Literal

import numpy as np
import pandas as pd
from scipy.fft import next_fast_len
from scipy.special import ndtri

from ._types import FloatArray
from .errors import SpecificationError

__all__ = ["ConvergenceReport", "chain_diagnostics"]

TAIL_PROBS = (0.05, 0.95)
_BLOCK_VALUES = 2**21  # elements per block x draws per element: about 16 MB of float64
_COLUMNS = ["mean", "sd", "mcse_mean", "ess_bulk", "ess_tail", "r_hat"]


@dataclass(frozen=True, eq=False)
class ConvergenceReport:
    """Per-element diagnostics and the verdict against the thresholds.

    ``table`` has one row per element: variable, element (its label), mean, sd
    (ddof=1), mcse_mean, ess_bulk, ess_tail, r_hat. ``worst_r_hat`` and the ESS minima
    skip NaN (NaN when every element is NaN). ``ok`` is True when no R-hat exceeds
    ``rhat_max`` and no ESS is below ``ess_min``; NaN values (constant elements) do not
    count against it. ``messages`` says in words what failed and what to do.
    """

    table: pd.DataFrame
    worst_r_hat: float
    min_ess_bulk: float
    min_ess_tail: float
    ok: bool
    messages: list[str]
    rhat_max: float
    ess_min: float

    def summary(self) -> dict[str, Any]:
        """A short JSON-ready dict (NaN and inf become None)."""
        return {
            "worst_r_hat": _json_float(self.worst_r_hat),
            "min_ess_bulk": _json_float(self.min_ess_bulk),
            "min_ess_tail": _json_float(self.min_ess_tail),
            "ok": self.ok,
            "messages": list(self.messages),
            "thresholds": {"rhat_max": self.rhat_max, "ess_min": self.ess_min},
        }


def chain_diagnostics(
    variables: Mapping[str, FloatArray],
    *,
    labels: Mapping[str, Sequence[str]] | None = None,
    rhat_max: float = 1.01,
    ess_min: float = 400,
    backend: Literal["numpy", "arviz"] = "numpy",
) -> ConvergenceReport:
    """R-hat, bulk/tail ESS and MCSE of every element of every variable.

    Parameters
    ----------
    variables : name -> draws of shape (chains, draws, *element_shape), e.g.
        ``{"B": (4, 1000, k, n), "Sigma": (4, 1000, n, n)}``. All variables share
        chains (>= 2) and draws per chain (>= 4); values must be finite.
    labels : name -> one label per element, in C order (``B[0, 0], B[0, 1], ...``),
        e.g. ``["const -> tyres", ...]``. Variables without labels get ``"B[0,1]"``
        (or just the name for a scalar variable).
    rhat_max, ess_min : thresholds of ``ok`` (defaults from Vehtari et al. 2021: R-hat
        below 1.01 and bulk and tail ESS of at least 100 per chain for 4 chains).
    backend : "numpy" (vectorised, the default) or "arviz" (ArviZ's functions on the
        whole array; same numbers, one element at a time, much slower).

    Returns
    -------
    ConvergenceReport

    Notes
    -----
    R-hat is the larger of the rank-normalised split R-hat of the draws and of their
    distances from the median (folded). Bulk ESS is the ESS of the rank-normalised split
    chains; tail ESS the smaller ESS of the indicators ``draw <= q`` at the 5% and 95%
    quantiles; ``mcse_mean = sd / sqrt(ESS of the mean)``.

    An element that is constant across all draws (a coefficient fixed at 0, say) has
    R-hat NaN, because the between- and within-chain variances are both zero: it is
    reported as NaN and does not count against ``ok``. Its ESS is the number of draws
    and its MCSE 0, as in ArviZ.
    """
    _check_thresholds(rhat_max, ess_min)
    if backend not in ("numpy", "arviz"):
        raise SpecificationError(f"backend must be 'numpy' or 'arviz'; got {backend!r}")
    arrays = _check_variables(variables)
    element_labels = _element_labels(arrays, labels)
    compute = _numpy_diagnostics if backend == "numpy" else _arviz_diagnostics
    parts = [compute(a.reshape(a.shape[0], a.shape[1], -1)) for a in arrays.values()]
    columns = {c: np.concatenate([p[c] for p in parts]) for c in _COLUMNS}
    table = pd.DataFrame({
        "variable": [name for name, a in arrays.items() for _ in range(_n_elements(a))],
        "element": element_labels,
        **columns,
    })
    return _report(table, rhat_max=float(rhat_max), ess_min=float(ess_min))


# -- validation ---------------------------------------------------------------------------


def _check_thresholds(rhat_max: float, ess_min: float) -> None:
    for name, value, low in (("rhat_max", rhat_max, 1.0), ("ess_min", ess_min, 0.0)):
        try:
            good = np.isfinite(float(value)) and float(value) >= low
        except (TypeError, ValueError):
            good = False
        if not good:
            raise SpecificationError(f"{name} must be a finite number >= {low:g}; got {value!r}")


def _check_variables(variables: Mapping[str, FloatArray]) -> dict[str, FloatArray]:
    if not isinstance(variables, Mapping) or not variables:
        raise SpecificationError("variables must be a non-empty mapping name -> draws")
    arrays: dict[str, FloatArray] = {}
    for name, values in variables.items():
        a = np.asarray(values)
        if a.dtype.kind not in "biuf":
            raise SpecificationError(f"draws of {name!r} must be real numbers; got {a.dtype}")
        a = a.astype(np.float64, copy=False)
        if a.ndim < 2:
            raise SpecificationError(
                f"draws of {name!r} must have shape (chains, draws, ...); got {a.shape}")
        if a.shape[0] < 2 or a.shape[1] < 4:
            raise SpecificationError(
                f"R-hat needs at least 2 chains of at least 4 draws; {name!r} has "
                f"{a.shape[0]} chain(s) of {a.shape[1]} draw(s): run more or longer chains")
        if _n_elements(a) == 0:
            raise SpecificationError(f"{name!r} has no elements; got shape {a.shape}")
        if not np.isfinite(a).all():
            raise SpecificationError(
                f"draws of {name!r} contain NaN or inf: the sampler diverged or the draws "
                "were not filled in")
        arrays[str(name)] = a
    shapes = {name: a.shape[:2] for name, a in arrays.items()}
    if len(set(shapes.values())) > 1:
        raise SpecificationError(f"all variables need the same (chains, draws); got {shapes}")
    return arrays


def _element_labels(arrays: Mapping[str, FloatArray],
                    labels: Mapping[str, Sequence[str]] | None) -> list[str]:
    labels = dict(labels or {})
    unknown = sorted(set(labels) - set(arrays))
    if unknown:
        raise SpecificationError(f"labels given for unknown variables {unknown}")
    out: list[str] = []
    for name, a in arrays.items():
        if name in labels:
            given = [str(s) for s in labels[name]]
            if len(given) != _n_elements(a):
                raise SpecificationError(
                    f"{name!r} has {_n_elements(a)} elements {a.shape[2:]} but "
                    f"{len(given)} labels")
            out.extend(given)
        elif a.ndim == 2:
            out.append(name)
        else:
            out.extend(f"{name}[{','.join(map(str, i))}]" for i in np.ndindex(a.shape[2:]))
    return out


def _n_elements(a: FloatArray) -> int:
    return int(np.prod(a.shape[2:], dtype=np.int64))


# -- the report ---------------------------------------------------------------------------


def _report(table: pd.DataFrame, *, rhat_max: float, ess_min: float) -> ConvergenceReport:
    total = len(table)
    messages = []
    r_hat = table["r_hat"].to_numpy()
    bad = r_hat > rhat_max  # NaN compares False: constant elements never fail
    if bad.any():
        i = int(np.argmax(np.where(bad, r_hat, -np.inf)))
        messages.append(
            f"R-hat above {rhat_max:g} for {bad.sum()} of {total} parameters (worst "
            f"{r_hat[i]:.3f} at {table['element'].iat[i]}): the chains disagree; run "
            "longer chains or check the model")
    for column, kind in (("ess_bulk", "Bulk"), ("ess_tail", "Tail")):
        ess = table[column].to_numpy()
        low = ess < ess_min
        if low.any():
            i = int(np.argmin(np.where(low, ess, np.inf)))
            messages.append(
                f"{kind} ESS below {ess_min:g} for {low.sum()} of {total} parameters "
                f"(lowest {ess[i]:.0f} at {table['element'].iat[i]}): run longer chains")
    return ConvergenceReport(
        table=table,
        worst_r_hat=_nan_extreme(np.max, r_hat),
        min_ess_bulk=_nan_extreme(np.min, table["ess_bulk"].to_numpy()),
        min_ess_tail=_nan_extreme(np.min, table["ess_tail"].to_numpy()),
        ok=not messages,
        messages=messages,
        rhat_max=rhat_max,
        ess_min=ess_min,
    )


def _nan_extreme(f: Any, x: FloatArray) -> float:
    x = x[~np.isnan(x)]
    return float(f(x)) if x.size else float("nan")


def _json_float(x: float) -> float | None:
    return float(x) if np.isfinite(x) else None


# -- ArviZ backend ------------------------------------------------------------------------


def _arviz_diagnostics(x: FloatArray) -> dict[str, FloatArray]:
    """ArviZ on the whole (chains, draws, elements) array; it loops over elements."""
    import arviz

    from .diagnostics import arviz_major_version

    with np.errstate(divide="ignore", invalid="ignore"):  # 0/0 R-hat of constant elements
        if arviz_major_version() >= 1:  # arviz_stats' array layer: ndarray in, ndarray out
            def call(f: Any, **kw: Any) -> FloatArray:
                return np.asarray(f(x, chain_axis=0, draw_axis=1, **kw), dtype=np.float64)
        else:  # 0.x takes ndarrays of one element only; a Dataset of one variable "x"
            data = arviz.convert_to_dataset({"x": x})

            def call(f: Any, **kw: Any) -> FloatArray:
                return np.asarray(f(data, **kw)["x"].values, dtype=np.float64)

        out = {
            "r_hat": call(arviz.rhat, method="rank"),
            "ess_bulk": call(arviz.ess, method="bulk"),
            "ess_tail": call(arviz.ess, method="tail", prob=TAIL_PROBS),
            "mcse_mean": call(arviz.mcse, method="mean"),
        }
    flat = x.reshape(-1, x.shape[2])
    return {"mean": flat.mean(axis=0), "sd": flat.std(axis=0, ddof=1), **out}


# -- numpy backend: ArviZ's estimators, vectorised over elements --------------------------


def _numpy_diagnostics(x: FloatArray) -> dict[str, FloatArray]:
    # blocks of elements are independent, and numpy's sorts and FFTs release the GIL:
    # threads use the cores without the start-up cost of processes
    with ThreadPoolExecutor(max_workers=min(4, os.cpu_count() or 1)) as pool:
        parts = list(pool.map(_block_diagnostics, _blocks(x)))
    return {c: np.concatenate([p[c] for p in parts]) for c in _COLUMNS}


def _blocks(x: FloatArray) -> Iterator[FloatArray]:
    """(chains, draws, E) -> contiguous (e, chains, draws) blocks of elements."""
    chains, draws, E = x.shape
    size = max(1, _BLOCK_VALUES // (chains * draws))
    for lo in range(0, E, size):
        yield np.ascontiguousarray(x[:, :, lo:lo + size].transpose(2, 0, 1))


def _block_diagnostics(x: FloatArray) -> dict[str, FloatArray]:
    """All diagnostics of x (E, chains, draws)."""
    flat = x.reshape(x.shape[0], -1)
    sd = flat.std(axis=1, ddof=1)
    split = _split_chains(x)
    z, ordered = _z_scale(split)
    S = ordered.shape[1]  # even: 2 * chains * (draws // 2)
    median = (ordered[:, S // 2 - 1] + ordered[:, S // 2]) / 2  # as np.median
    r_bulk = _rhat(z)
    r_tail = _rhat(_z_scale(np.abs(split - median[:, None, None]))[0])
    low, high = (_ess(_split_chains((x <= q[:, None, None]).astype(np.float64)))
                 for q in np.quantile(flat, TAIL_PROBS, axis=1))
    return {
        "mean": flat.mean(axis=1),
        "sd": sd,
        "mcse_mean": sd / np.sqrt(_ess(split)),
        "ess_bulk": _ess(z),
        "ess_tail": np.where(high < low, high, low),  # min() as ArviZ takes it
        "r_hat": np.where(r_tail > r_bulk, r_tail, r_bulk),  # max(): NaN tail -> bulk
    }


def _split_chains(x: FloatArray) -> FloatArray:
    """(E, C, D) -> (E, 2C, D // 2): first halves, then last halves (middle draw dropped)."""
    half = x.shape[2] // 2
    return np.concatenate((x[:, :, :half], x[:, :, x.shape[2] - half:]), axis=1)


def _z_scale(x: FloatArray) -> tuple[FloatArray, FloatArray]:
    """Rank-normalise each element over all its draws: Phi^-1((r - 3/8) / (S + 1/4)),
    with tied values given their average rank r (scipy.stats.rankdata's "average").

    Returns z (same shape as x) and the sorted draws (E, S). Without ties z in sorted
    order is the same grid for every element; tie groups (rare, but the folded draws
    have one at the median) are fixed afterwards, all at once.
    """
    E = x.shape[0]
    a = x.reshape(E, -1)
    S = a.shape[1]
    order = np.argsort(a, axis=1)
    s = np.take_along_axis(a, order, axis=1)
    c = 3 / 8
    grid = ndtri((np.arange(1, S + 1) - c) / (S - 2 * c + 1))
    z_sorted = np.broadcast_to(grid, (E, S)).copy()
    same = s[:, 1:] == s[:, :-1]  # same[:, i]: sorted draws i and i + 1 are tied
    if same.any():
        tied = np.zeros((E, S), dtype=bool)
        tied[:, 1:] |= same
        tied[:, :-1] |= same
        first = tied.copy()
        first[:, 1:] &= ~same  # tied, but not tied to the draw before: a group starts
        last = tied.copy()
        last[:, :-1] &= ~same
        _, start = np.nonzero(first)  # row-major: groups in order, one start and one end
        _, end = np.nonzero(last)
        rank = (start + end) / 2 + 1
        z_sorted[tied] = np.repeat(ndtri((rank - c) / (S - 2 * c + 1)), end - start + 1)
    z = np.empty((E, S))
    np.put_along_axis(z, order, z_sorted, axis=1)
    return z.reshape(x.shape), s


def _rhat(x: FloatArray) -> FloatArray:
    """Gelman-Rubin R-hat of each element of x (E, chains, draws)."""
    n = x.shape[2]
    between = n * x.mean(axis=2).var(axis=1, ddof=1)
    within = x.var(axis=2, ddof=1).mean(axis=1)
    with np.errstate(divide="ignore", invalid="ignore"):  # constant: 0/0 -> NaN
        return np.sqrt((between / within + n - 1) / n)


def _ess(x: FloatArray) -> FloatArray:
    """ESS of each element of x (E, chains, draws) by Geyer's initial monotone sequence.

    ArviZ's ``_ess`` loops over lags; here, with rho_t the combined autocorrelations
    and P_j = rho_2j + rho_2j+1 (rho_0 = 1): the loop stops at J = the first j with
    P_j <= 0 (or the last pair it may look at); pairs 0..J-1 are made non-increasing
    (running minimum), and rho_2J is kept if P_J >= 0 or rho_2J > 0.
    tau = -1 + 2 sum_{j<J} P_j + rho_2J, floored at 1/log10(N); ESS = N / tau.
    """
    E, M, n = x.shape
    N = M * n
    spread = x.max(axis=(1, 2)) - x.min(axis=(1, 2))
    m = next_fast_len(2 * n, real=True)
    f = np.fft.rfft(x - x.mean(axis=2, keepdims=True), n=m, axis=2)
    power = (f.real**2 + f.imag**2).mean(axis=1)  # averaging before the inverse FFT
    acov = np.fft.irfft(power, n=m, axis=1)[:, :n] / n  # mean autocovariance of the chains
    mean_var = acov[:, 0] * n / (n - 1.0)
    var_plus = mean_var * (n - 1.0) / n + x.mean(axis=2).var(axis=1, ddof=1)
    with np.errstate(divide="ignore", invalid="ignore"):
        rho = 1.0 - (mean_var[:, None] - acov) / var_plus[:, None]
    rho[:, 0] = 1.0
    jmax = len(range(1, n - 3, 2))  # the pairs ArviZ's loop may reach
    pairs = rho[:, : 2 * jmax + 2].reshape(E, jmax + 1, 2).sum(axis=2)
    stops = ~(pairs > 0)
    J = np.where(stops.any(axis=1), stops.argmax(axis=1), jmax)
    J = np.minimum(J, jmax)
    kept = np.arange(jmax + 1) < J[:, None]
    body = np.where(kept, np.minimum.accumulate(pairs, axis=1), 0.0).sum(axis=1)
    rows = np.arange(E)
    even, odd = rho[rows, 2 * J], rho[rows, 2 * J + 1]
    last = np.where((even + odd >= 0) | (even > 0), even, 0.0)
    tau = np.maximum(-1.0 + 2.0 * body + last, 1 / np.log10(N))
    return np.where(spread < np.finfo(np.float64).resolution, float(N), N / tau)
