"""Shock propagation results: impulse responses and variance shares with posterior bands.

Containers for draws computed by :mod:`priors.irf` from posterior parameter draws, with
the series names and units attached, and the summaries a planner reads: pointwise
median, central bands and tidy tables. Built by
:meth:`priors.model.FanfoldVAR.impulse_responses` and
:meth:`~priors.model.FanfoldVAR.variance_decomposition`.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd

from ._types import FloatArray
from .errors import SpecificationError
from .forecast import band_levels
from .irf import cumulative as cumulate
from .irf import impulse_responses, response_units, variance_decomposition

__all__ = ["ShockResponses", "VarianceShares", "shock_responses", "variance_shares"]


@dataclass(frozen=True)
class _Pointwise:
    """Draws (S, steps, n_response, n_shock) and their pointwise summaries."""

    draws: FloatArray
    names: tuple[str, ...]
    identification: str
    ordering: tuple[str, ...] | None

    @property
    def steps(self) -> int:
        return self.draws.shape[1]

    def median(self) -> FloatArray:
        """(steps, n_response, n_shock) pointwise posterior median (no single draw's
        path; Sims & Zha 1999)."""
        return np.median(self.draws, axis=0)

    def bands(self, coverages: Sequence[float] = (68, 90)) -> dict[float, FloatArray]:
        """Central pointwise credible bands: {coverage%: (2, steps, n_resp, n_shock)}."""
        pct = np.unique(np.asarray(list(coverages), dtype=np.float64))
        fr = band_levels(pct)
        lows = (1.0 - fr) / 2.0
        qs = np.quantile(self.draws, np.concatenate([lows, 1.0 - lows]), axis=0)
        return {float(c): np.stack([qs[i], qs[fr.size + i]]) for i, c in enumerate(pct)}

    def _frame(self, first_step: int, value: str, coverages: Sequence[float]) -> pd.DataFrame:
        med, bands = self.median(), self.bands(coverages)
        rows = []
        for j, shock in enumerate(self.names):
            for r, resp in enumerate(self.names):
                for i in range(self.steps):
                    row: dict[str, object] = {"shock": shock, "response": resp,
                                              "step": first_step + i, value: med[i, r, j]}
                    for c, b in bands.items():
                        row[f"lower{c:g}"] = b[0, i, r, j]
                        row[f"upper{c:g}"] = b[1, i, r, j]
                    rows.append(row)
        return pd.DataFrame(rows)


@dataclass(frozen=True)
class ShockResponses(_Pointwise):
    """Impulse-response draws in the user's units.

    draws : (S, h+1, n_response, n_shock); step 0 is the impact period.
    units : per response series: "units", "percent" or "log(1+units)" (see
        :func:`priors.irf.response_units`).
    shock_size : "sd" or "unit"; cumulative : responses summed over steps 0..i.
    """

    units: tuple[str, ...] = ()
    shock_size: str = "sd"
    cumulative: bool = False

    def to_frame(self, coverages: Sequence[float] = (68, 90)) -> pd.DataFrame:
        """Tidy table: shock, response, step (0 = impact), median, bands, unit."""
        frame = self._frame(0, "median", coverages)
        frame["unit"] = [self.units[self.names.index(r)] for r in frame["response"]]
        return frame


@dataclass(frozen=True)
class VarianceShares(_Pointwise):
    """Forecast error variance decomposition draws, (S, h, n_series, n_shock): the share
    of each series' h-step forecast error variance (model units) due to each shock,
    h = 1..horizon; each draw's shares over shocks sum to 1."""

    def to_frame(self, coverages: Sequence[float] = (68, 90)) -> pd.DataFrame:
        """Tidy table: shock, response (the series whose variance is split), step
        (h = 1..), median share and bands."""
        return self._frame(1, "median", coverages)


def _ordering(names: Sequence[str], ordering: Sequence[str] | None) -> list[int] | None:
    if ordering is None:
        return None
    order = list(ordering)
    unknown = [o for o in order if o not in names]
    if unknown:
        raise SpecificationError(f"ordering names unknown series {unknown[0]!r}; series are "
                                 f"{', '.join(names)}")
    if sorted(order) != sorted(names):
        raise SpecificationError(f"ordering must list every series exactly once: "
                                 f"{', '.join(names)}")
    return [list(names).index(o) for o in order]


def shock_responses(
    B: FloatArray, Sigma: FloatArray, *, n_det: int, lags: int, horizon: int,
    names: Sequence[str], transforms: Sequence[str], identification: str = "recursive",
    shock_size: str = "sd", ordering: Sequence[str] | None = None,
    cumulative: bool = False,
) -> ShockResponses:
    """Impulse responses of every draw (B (S, k, n), Sigma (S, n, n)) in the user's units.

    ``ordering`` names the series in causal order (recursive only). With ``cumulative``
    the responses (after conversion to the user's units) are summed over steps.
    """
    idx = _ordering(names, ordering)
    raw = impulse_responses(B, Sigma, n_det, lags, horizon, identification=identification,
                            shock_size=shock_size, ordering=idx)
    values, units = response_units(raw, transforms)
    if cumulative:
        values = cumulate(values)
        units = tuple(f"{u}, summed over steps" for u in units)
    return ShockResponses(values, tuple(names), identification,
                          None if ordering is None else tuple(ordering), units, shock_size,
                          bool(cumulative))


def variance_shares(
    B: FloatArray, Sigma: FloatArray, *, n_det: int, lags: int, horizon: int,
    names: Sequence[str], identification: str = "recursive",
    ordering: Sequence[str] | None = None,
) -> VarianceShares:
    """Variance decomposition of every draw, steps 1..horizon."""
    idx = _ordering(names, ordering)
    shares = variance_decomposition(B, Sigma, n_det, lags, horizon,
                                    identification=identification, ordering=idx)
    return VarianceShares(shares, tuple(names), identification,
                          None if ordering is None else tuple(ordering))
