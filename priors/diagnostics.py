"""Export of posterior draws to ArviZ for diagnostics and plotting.

ArviZ 1.x returns an ``xarray.DataTree``; ArviZ 0.x (the newest release on Python 3.11)
returns an ``InferenceData``. Both take the same groups, coordinates and dimensions, so
the rest of the project does not care which is installed. ArviZ is imported lazily:
the numerics never need it.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import numpy as np

from ._types import FloatArray
from .errors import SpecificationError
from .sampling import Draws

__all__ = ["arviz_major_version", "to_arviz"]


def arviz_major_version() -> int:
    import arviz

    return int(arviz.__version__.split(".")[0])


def to_arviz(
    draws: Draws,
    *,
    regressors: Sequence[str],
    series: Sequence[str],
    chains: int = 1,
    extra: dict[str, FloatArray] | None = None,
) -> Any:
    """Posterior draws as an ArviZ object with named dimensions.

    Parameters
    ----------
    draws : S draws of B (S, k, n) and Sigma (S, n, n).
    regressors, series : labels of the k rows and n columns of B.
    chains : split the S draws into this many chains of S / chains draws (i.i.d. draws
        have no chains; splitting lets R-hat and ESS be computed).
    extra : other per-draw quantities, each of shape (S,) (e.g. spectral radius).

    Returns
    -------
    ``xarray.DataTree`` (ArviZ 1.x) or ``arviz.InferenceData`` (0.x) with variables
    ``B`` (chain, draw, regressor, equation) and ``Sigma`` (chain, draw, equation,
    equation_col).
    """
    import arviz

    S = draws.size
    if chains < 1 or S % chains:
        raise SpecificationError(f"{S} draws cannot be split into {chains} equal chains")
    k, n = draws.B.shape[1:]
    if len(regressors) != k or len(series) != n:
        raise SpecificationError("labels do not match the shape of the draws")
    per = S // chains
    posterior = {
        "B": draws.B.reshape(chains, per, k, n),
        "Sigma": draws.Sigma.reshape(chains, per, n, n),
    }
    for name, values in (extra or {}).items():
        values = np.asarray(values)
        if values.shape[0] != S:
            raise SpecificationError(f"extra quantity {name!r} needs one value per draw")
        posterior[name] = values.reshape(chains, per, *values.shape[1:])
    coords = {"regressor": list(regressors), "equation": list(series),
              "equation_col": list(series)}
    dims = {"B": ["regressor", "equation"], "Sigma": ["equation", "equation_col"]}
    if arviz_major_version() >= 1:
        return arviz.from_dict({"posterior": posterior}, coords=coords, dims=dims)
    return arviz.from_dict(posterior=posterior, coords=coords, dims=dims)
