"""Per-series transforms: domains, row alignment and exact inverses on paths."""

from __future__ import annotations

import numpy as np
import pytest

from priors.data import load_series
from priors.errors import NonPositiveValuesError, SpecificationError
from priors.transforms import (
    TRANSFORMS,
    check_transforms,
    default_prior_mean,
    forward,
    inverse_paths,
)


@pytest.fixture
def positive(rng) -> np.ndarray:
    """Two positive, trending demand series, 40 rows."""
    return 50.0 * np.exp(np.cumsum(0.05 * rng.standard_normal((40, 2)), axis=0))


# ---------------------------------------------------------------- domains


@pytest.mark.parametrize("transform", ["log", "logdiff"])
@pytest.mark.parametrize("bad", [0.0, -2.5])
def test_log_needs_positive_values(positive, transform, bad):
    positive[7, 1] = bad
    match = (rf"series 'y2' has values <= 0 \(smallest {bad:g}\), so the '{transform}' "
             r"transform is undefined; use 'log1p' for counts with zeros, or 'none'")
    with pytest.raises(NonPositiveValuesError, match=match):
        load_series(positive, transforms=transform)


@pytest.mark.parametrize("bad", [-1.0, -3.0])
def test_log1p_needs_values_above_minus_one(positive, bad):
    positive[0, 0] = bad
    with pytest.raises(NonPositiveValuesError, match=rf"'y1' has values <= -1 \(smallest {bad:g}"
                                                     r"\), so 'log1p' is undefined; use 'none'"):
        load_series(positive, transforms="log1p")


def test_log1p_accepts_zero_counts(positive):
    positive[::3, 0] = 0.0
    series = load_series(positive, transforms="log1p")
    np.testing.assert_array_equal(series.values[::3, 0], 0.0)


def test_only_the_log_series_is_checked(positive):
    positive[:5, 0] = -1.0
    series = load_series(positive, transforms={"y2": "log"})
    assert series.transforms == ("none", "log")


# ---------------------------------------------------------------- names


def test_check_transforms_expands_and_validates():
    assert check_transforms(None, 2) == ("none", "none")
    assert check_transforms("log", 3) == ("log", "log", "log")
    assert check_transforms(["diff", "none"], 2) == ("diff", "none")
    with pytest.raises(SpecificationError, match="unknown transform 'Log'; choose one of "
                                                 "none, log, log1p, diff, logdiff"):
        check_transforms(["Log", "none"], 2)
    with pytest.raises(SpecificationError, match="got 3 transforms for 2 series; give one per"):
        check_transforms(["log"] * 3, 2)


def test_default_prior_mean():
    names = ("none", "log", "log1p", "diff", "logdiff")
    assert names == TRANSFORMS
    np.testing.assert_array_equal(default_prior_mean(names), [1.0, 1.0, 1.0, 0.0, 0.0])


# ---------------------------------------------------------------- alignment


def test_mixed_transforms_drop_one_row_for_every_series(positive):
    series = load_series(positive, transforms={"y1": "logdiff"}, period=12)
    assert series.values.shape == (39, 2)
    np.testing.assert_allclose(series.values[:, 0], np.diff(np.log(positive[:, 0])), rtol=1e-12)
    np.testing.assert_array_equal(series.values[:, 1], positive[1:, 1])
    np.testing.assert_array_equal(series.levels, positive)


def test_no_row_dropped_without_differencing(positive):
    values = forward(positive, ("log", "log1p"), ("a", "b"))
    expected = np.column_stack([np.log(positive[:, 0]), np.log1p(positive[:, 1])])
    np.testing.assert_array_equal(values, expected)


# ---------------------------------------------------------------- exact inverses


@pytest.mark.parametrize("transform", TRANSFORMS)
def test_inverse_recovers_the_actual_future(positive, transform):
    """Forward over history + future, then map the future back path by path."""
    history, h = positive[:30], 10
    model_units = forward(positive, (transform, transform), ("a", "b"))
    future = model_units[-h:][None]  # one "path": the realised values in model units
    back = inverse_paths(future, (transform, transform), history[-1])
    np.testing.assert_allclose(back[0], positive[30:], rtol=1e-10, atol=1e-10)


def test_inverse_with_mixed_transforms(positive, rng):
    data = np.column_stack([positive, rng.poisson(3.0, 40), rng.standard_normal(40)])
    transforms = ("logdiff", "log", "log1p", "diff")
    model_units = forward(data, transforms, ("a", "b", "c", "d"))
    future = np.repeat(model_units[-5:][None], 3, axis=0)  # same path three times
    back = inverse_paths(future, transforms, data[-6])
    for path in back:
        np.testing.assert_allclose(path, data[-5:], rtol=1e-10, atol=1e-10)


def test_differences_are_summed_path_by_path():
    paths = np.array([[[1.0], [2.0], [3.0]], [[0.0], [-1.0], [0.5]]])
    back = inverse_paths(paths, ("diff",), np.array([10.0]))
    np.testing.assert_array_equal(back[:, :, 0], [[11, 13, 16], [10, 9, 9.5]])
