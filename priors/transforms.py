"""Per-series transforms and their exact inverses on simulated paths.

A transform maps a series from the user's units to the units the VAR is fitted in.
Differencing transforms lose one observation; :func:`forward` drops the first row of
every series when any series is differenced, so rows stay aligned.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from ._types import FloatArray
from .errors import NonPositiveValuesError, SpecificationError

__all__ = [
    "DIFFERENCING",
    "TRANSFORMS",
    "check_transforms",
    "default_prior_mean",
    "forward",
    "inverse_paths",
]

TRANSFORMS = ("none", "log", "log1p", "diff", "logdiff")
DIFFERENCING = frozenset({"diff", "logdiff"})


def check_transforms(transforms: str | Sequence[str] | None, n: int) -> tuple[str, ...]:
    """Expand and validate transform names: one name for all series, or one per series."""
    if transforms is None:
        return ("none",) * n
    if isinstance(transforms, str):
        transforms = [transforms] * n
    out = tuple(str(t) for t in transforms)
    if len(out) != n:
        raise SpecificationError(f"got {len(out)} transforms for {n} series; give one per series")
    for t in out:
        if t not in TRANSFORMS:
            raise SpecificationError(
                f"unknown transform {t!r}; choose one of {', '.join(TRANSFORMS)}"
            )
    return out


def default_prior_mean(transforms: Sequence[str]) -> FloatArray:
    """Prior mean of each series' own first-lag coefficient.

    1 (random walk) for series kept in levels or logs, 0 (white noise) for differenced
    series, following Banbura, Giannone & Reichlin (2010).
    """
    return np.array([0.0 if t in DIFFERENCING else 1.0 for t in transforms])


def forward(values: FloatArray, transforms: Sequence[str], names: Sequence[str]) -> FloatArray:
    """Transform a (T, n) array column by column into model units.

    Returns (T - 1, n) if any series is differenced, else (T, n).
    """
    values = np.asarray(values, dtype=np.float64)
    out = np.empty_like(values)
    for j, (t, name) in enumerate(zip(transforms, names, strict=True)):
        col = values[:, j]
        finite = col[np.isfinite(col)]
        if t in ("log", "logdiff") and np.any(finite <= 0):
            raise NonPositiveValuesError(
                f"series {name!r} has values <= 0 (smallest {finite.min():g}), so the "
                f"{t!r} transform is undefined; use 'log1p' for counts with zeros, or 'none'"
            )
        if t == "log1p" and np.any(finite <= -1):
            raise NonPositiveValuesError(
                f"series {name!r} has values <= -1 (smallest {finite.min():g}), so 'log1p' "
                "is undefined; use 'none'"
            )
        if t in ("log", "logdiff"):
            out[:, j] = np.log(col)
        elif t == "log1p":
            out[:, j] = np.log1p(col)
        else:
            out[:, j] = col
    if any(t in DIFFERENCING for t in transforms):
        diffed = out[1:] - out[:-1]
        keep = out[1:].copy()
        for j, t in enumerate(transforms):
            if t in DIFFERENCING:
                keep[:, j] = diffed[:, j]
        out = keep
    return out


def inverse_paths(
    paths: FloatArray, transforms: Sequence[str], last_values: FloatArray
) -> FloatArray:
    """Map simulated paths from model units back to the user's units, path by path.

    Parameters
    ----------
    paths : array of shape (S, h, n)
        Simulated future values in model units.
    transforms : sequence of n names
    last_values : array of shape (n,)
        The last observed value of each series in the user's units (needed to undo
        differencing).

    Returns
    -------
    array of shape (S, h, n) in the user's units.
    """
    out = np.empty_like(paths)
    for j, t in enumerate(transforms):
        z = paths[:, :, j]
        if t == "none":
            out[:, :, j] = z
        elif t == "log":
            out[:, :, j] = np.exp(z)
        elif t == "log1p":
            out[:, :, j] = np.expm1(z)
        elif t == "diff":
            out[:, :, j] = last_values[j] + np.cumsum(z, axis=1)
        else:  # logdiff
            out[:, :, j] = np.exp(np.log(last_values[j]) + np.cumsum(z, axis=1))
    return out
