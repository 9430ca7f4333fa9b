"""From user data to design matrices: every bad input has its own error, and the layout."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from priors import FanfoldVAR
from priors.data import (
    Deterministics,
    build_design,
    explosive_message,
    future_exogenous_rows,
    growth_decades,
    load_series,
    negative_values_message,
    split_ragged_edge,
)
from priors.errors import (
    ConstantSeriesError,
    DuplicateNameError,
    ExogenousError,
    ExplosiveDataError,
    MissingValuesError,
    NegativeValuesWarning,
    NonNumericError,
    SpecificationError,
    TooFewObservationsError,
)

MONTHS = pd.date_range("2020-01-01", periods=30, freq="MS")


@pytest.fixture
def frame(rng) -> pd.DataFrame:
    """Two monthly series, 30 rows from January 2020."""
    values = 10.0 + rng.standard_normal((30, 2))
    return pd.DataFrame(values, index=MONTHS, columns=["tyres", "brakes"])


# ---------------------------------------------------------------- missing values


MISSING = r"a missing value \(an empty cell, NaN or null\)"


@pytest.mark.parametrize(("bad", "kind"), [(np.nan, MISSING), (np.inf, "an infinite value"),
                                           (-np.inf, "an infinite value")])
def test_missing_or_infinite_value_is_located(frame, bad, kind):
    # the fifth row of data is data row 5 (counted from 1, as a spreadsheet user would)
    frame.iloc[4, 1] = bad
    match = (rf"series 'brakes' has {kind} at 2020-05-01 \(data row 5\).*fill them or cut "
             "the data")
    with pytest.raises(MissingValuesError, match=match):
        load_series(frame)


def test_missing_values_are_counted_in_plain_arrays(rng):
    y = rng.standard_normal((20, 2))
    y[[3, 7], 0] = np.nan
    with pytest.raises(MissingValuesError,
                       match=rf"'y1' has {MISSING} at data row 4, .*\(2 such values"):
        load_series(y)


def test_missing_exogenous_value(frame, rng):
    x = rng.standard_normal((30, 1))
    x[10] = np.nan
    with pytest.raises(MissingValuesError, match=rf"exogenous regressor 'x1' has {MISSING} at "
                                                 r"2020-11-01 \(data row 11\)"):
        load_series(frame, exog=x)


def test_missing_exogenous_value_after_differencing_keeps_its_data_row(frame, rng):
    # differencing drops the first row; the message still counts rows of the data as given
    x = rng.standard_normal((30, 1))
    x[10] = np.nan
    with pytest.raises(MissingValuesError, match=r"at 2020-11-01 \(data row 11\)"):
        load_series(frame, exog=x, transforms="diff")
    with pytest.raises(MissingValuesError, match=r"at data row 11,"):
        load_series(frame.to_numpy(), exog=x, transforms="diff")


def test_empty_trailing_row_is_located_from_one():
    data = np.ones((6, 2)) + np.arange(6)[:, None]
    data[4, 1] = np.nan
    data[5] = np.nan
    with pytest.raises(MissingValuesError, match=r"^data row 6 has no value for any series"):
        split_ragged_edge(data)
    dated = pd.DataFrame(data, index=MONTHS[:6])
    with pytest.raises(MissingValuesError,
                       match=r"^2020-06-01 \(data row 6\) has no value for any series"):
        split_ragged_edge(dated)


# ---------------------------------------------------------------- too few rows


def test_too_few_observations_for_the_lags(rng):
    series = load_series(rng.standard_normal((8, 2)))
    match = r"8 observations leave 2 rows .* AR\(6\) .* needs at least 9; use fewer lags"
    with pytest.raises(TooFewObservationsError, match=match):
        build_design(series, 6, Deterministics())


def test_too_few_observations_mentions_differencing(rng):
    series = load_series(rng.standard_normal((8, 1)).cumsum(axis=0), transforms="diff")
    with pytest.raises(TooFewObservationsError, match="and 1 row lost to differencing"):
        build_design(series, 4, Deterministics())


def test_too_few_observations_through_the_model(rng):
    with pytest.raises(TooFewObservationsError, match="use fewer lags or more data"):
        FanfoldVAR(lags=12).fit(rng.standard_normal((15, 2)))


# ---------------------------------------------------------------- constant series


def test_constant_series(frame):
    frame["brakes"] = 4.0
    with pytest.raises(ConstantSeriesError, match=r"'brakes' has no variation \(it is constant "
                                                  r"at 4\); drop it or use a longer window"):
        load_series(frame)


@pytest.mark.parametrize("step", [3.0, 0.1])
def test_differenced_series_with_constant_differences(frame, step):
    # 0.1 * t has differences that are equal only up to rounding
    frame["brakes"] = step * np.arange(30)
    match = rf"'brakes' has no variation \(its differences are constant at {step:g}\)"
    with pytest.raises(ConstantSeriesError, match=match):
        load_series(frame, transforms="diff")


def test_constant_growth_rate_under_logdiff(frame):
    frame["tyres"] = 100 * 1.05 ** np.arange(30)
    with pytest.raises(ConstantSeriesError, match="'tyres' has no variation"):
        load_series(frame, transforms="logdiff")


# ---------------------------------------------------------------- explosive series


def _explosive(kind: str) -> np.ndarray:
    """One exploding series (T,) of each kind seen in user reports."""
    rng = np.random.default_rng(5)
    if kind == "doubling":
        return 2.0 ** np.arange(120)
    if kind == "x1.5 with noise":
        return 1.5 ** np.arange(120) * (1 + 0.05 * rng.standard_normal(120))
    if kind == "to 1e200":
        return 10.0 ** np.linspace(0, 200, 150)
    A = np.array([[1.3, 0.0], [0.1, 0.5]])  # spectral radius 1.3, 150 steps
    y = np.ones((150, 2))
    for t in range(1, 150):
        y[t] = A @ y[t - 1] + rng.standard_normal(2)
    return y[:, 0]


def _with_a_calm_series(x: np.ndarray) -> pd.DataFrame:
    calm = 10 + np.random.default_rng(6).standard_normal(x.size)
    index = pd.date_range("2000-01-01", periods=x.size, freq="MS")
    return pd.DataFrame({"calm": calm, "sales": x}, index=index)


@pytest.mark.parametrize("kind", ["doubling", "x1.5 with noise", "to 1e200", "VAR radius 1.3"])
def test_explosive_series_is_refused_by_name_with_its_growth(kind):
    """These used to fail as 'the regressors are collinear' or 'fitted exactly'."""
    with pytest.raises(ExplosiveDataError, match=r"series 'sales' explodes") as info:
        load_series(_with_a_calm_series(_explosive(kind)))
    text = str(info.value)
    assert "orders of magnitude" in text and "per period" in text
    assert "transforms={'sales': 'log'}" in text and "'logdiff'" in text


def test_explosive_message_gives_first_and_last_magnitudes_and_growth_factor():
    text = explosive_message(2.0 ** np.arange(120)[:, None], ["sales"])
    assert text is not None
    # largest values in the first and last 12 rows: 2**11 and 2**119
    assert "is 2.05e+03 in the first 12 rows and 6.65e+35 in the last 12" in text
    assert "(33 orders of magnitude, about x2 per period)" in text


def test_explosive_data_fail_in_fit_with_the_explosion_not_collinearity():
    frame = _with_a_calm_series(_explosive("x1.5 with noise"))
    # in levels (transforms 'auto' would take logs, tests/priors/test_autoconfig.py)
    for model in (FanfoldVAR(transforms=None), FanfoldVAR(lags=2, prior="flat", transforms=None)):
        with pytest.raises(ExplosiveDataError, match="'sales' explodes"):
            model.fit(frame)


def test_logs_of_explosive_data_fit():
    frame = _with_a_calm_series(_explosive("x1.5 with noise"))
    model = FanfoldVAR(lags=2, tightness=0.2, transforms={"sales": "log"}).fit(frame)
    assert model.lags_ == 2


@pytest.mark.parametrize(("kind", "x"), [
    ("units changed once", np.r_[np.ones(60), np.full(60, 1e7)]
     + np.random.default_rng(1).standard_normal(120) * 0.01),
    ("zeros before launch", np.r_[np.zeros(30), np.linspace(1.0, 1e8, 90)]),
    ("new product, x10 000 in 10 years", np.exp(np.linspace(0.0, np.log(1e4), 120))),
    ("75 years of nominal growth", 250 * np.exp(np.cumsum(np.full(300, 0.017)))),
    ("stationary around 1e9", 1e9 + 1e7 * np.random.default_rng(2).standard_normal(120)),
])
def test_ordinary_growth_and_level_shifts_are_not_explosive(kind, x):
    assert growth_decades(x[:, None])[0] < 6
    assert explosive_message(x[:, None], ["x"]) is None


def test_growth_decades_of_a_steady_exponential():
    x = 10.0 ** (np.arange(100) / 10)  # one order of magnitude per 10 rows
    # largest of the first 10 rows is 10**0.9, of the last 10 is 10**9.9
    np.testing.assert_allclose(growth_decades(x[:, None]), [9.0])


# ---------------------------------------------------------------- non-numeric, names


@pytest.mark.parametrize(
    ("column", "dtype"),
    [(["a", "b", "c"], "str"), ([True, False, True], "bool"),
     (np.array([1.0, 2.0, 3.0], dtype=object), "object")],
)
def test_non_numeric_column(column, dtype):
    data = pd.DataFrame({"tyres": [1.0, 2.0, 4.0], "code": column})
    with pytest.raises(NonNumericError, match=rf"series 'code' is not numeric \(dtype {dtype}"
                                              r".*give numbers only"):
        load_series(data)


@pytest.mark.parametrize("text", ["4 units", "n.a.", "-"])
def test_non_numeric_cell_is_named_with_its_date_and_data_row(frame, text):
    # as read from a CSV file: one text cell makes the whole column text
    frame["brakes"] = frame["brakes"].round(1).astype(str)
    frame.iloc[12, 1] = text
    match = (rf"series 'brakes' is not numeric \(dtype \w+\); the first cell that is not a "
             rf"number is '{text}' at 2021-01-01 \(data row 13\)")
    with pytest.raises(NonNumericError, match=match):
        load_series(frame)


def test_non_numeric_cell_without_dates_is_named_by_data_row():
    data = pd.DataFrame({"tyres": [1.0, 2.0, 4.0], "code": ["1", None, "x"]})
    with pytest.raises(NonNumericError, match=r"'x' at data row 3;"):
        load_series(data)


def test_non_numeric_plain_array():
    with pytest.raises(NonNumericError, match="'y1' is not numeric"):
        load_series(np.array([[True], [False], [True]]))


def test_date_column_first_becomes_the_index(frame):
    # the NonNumericError message promises dates may sit in the first column
    with_dates = frame.reset_index(names="month")
    series = load_series(with_dates)
    assert series.names == ("tyres", "brakes")
    assert series.calendar.kind == "monthly"


def test_duplicate_series_names(rng):
    with pytest.raises(DuplicateNameError, match="series name 'a' is used more than once"):
        load_series(rng.standard_normal((10, 3)), names=["a", "b", "a"])
    frame = pd.DataFrame(rng.standard_normal((10, 2)), columns=["a", "a"])
    with pytest.raises(DuplicateNameError, match="rename one"):
        load_series(frame)


@pytest.mark.parametrize("as_frame", [False, True])
def test_wrong_number_of_names(rng, as_frame):
    y = rng.standard_normal((10, 2))
    data = pd.DataFrame(y) if as_frame else y
    with pytest.raises(SpecificationError, match="got 3 names for 2 columns"):
        load_series(data, names=["a", "b", "c"])


def test_shape_and_emptiness(rng):
    with pytest.raises(SpecificationError, match=r"2-D of shape \(T, n\); got shape \(4, 3, 2\)"):
        load_series(rng.standard_normal((4, 3, 2)))
    with pytest.raises(SpecificationError, match="no series columns"):
        load_series(pd.DataFrame(index=MONTHS))


def test_transform_errors(frame):
    with pytest.raises(SpecificationError, match="unknown transform 'sqrt'; choose one of none"):
        load_series(frame, transforms="sqrt")
    with pytest.raises(SpecificationError, match="transform given for unknown series 'wheels'; "
                                                 "series are tyres, brakes"):
        load_series(frame, transforms={"wheels": "log"})
    with pytest.raises(SpecificationError, match="got 1 transforms for 2 series"):
        load_series(frame, transforms=["log"])


# ---------------------------------------------------------------- exogenous regressors


def test_exogenous_row_count(frame, rng):
    with pytest.raises(ExogenousError, match="have 29 rows but the series have 30"):
        load_series(frame, exog=rng.standard_normal((29, 1)))


def test_exogenous_dates_must_match(frame):
    promo = pd.DataFrame({"promo": np.arange(30.0)}, index=MONTHS + pd.DateOffset(months=1))
    with pytest.raises(ExogenousError, match="not on the same dates"):
        load_series(frame, exog=promo)


def test_exogenous_name_clash(frame):
    clash = pd.DataFrame({"tyres": np.arange(30.0)}, index=MONTHS)
    with pytest.raises(DuplicateNameError, match="exogenous regressor 'tyres' has a series' name"):
        load_series(frame, exog=clash)


def test_exogenous_list_gets_its_own_names(rng):
    # a list used to be named y1.. and clash with the default series names
    series = load_series(rng.standard_normal((12, 1)), exog=list(range(12)))
    assert series.exog_names == ("x1",)


@pytest.fixture
def with_promo(frame, rng):
    promo = pd.DataFrame({"promo": rng.standard_normal(30)}, index=MONTHS)
    return load_series(frame, exog=promo)


@pytest.mark.parametrize(
    ("future", "match"),
    [
        (None, r"uses exogenous regressors \(promo\); give their future values for all 3"),
        (np.ones(2), "need future values for 3 steps; got 2"),
        (np.array([1.0, np.nan, 1.0]), "contain NaN or inf"),
        (np.array([1.0, 2.0, np.inf]), "contain NaN or inf"),
        (np.ones((3, 2)), r"must have shape \(horizon, 1\).*\(promo\); got shape \(3, 2\)"),
        (pd.DataFrame({"price": np.ones(3)}), "future values of exogenous regressor 'promo'"),
    ],
)
def test_future_exogenous_values(with_promo, future, match):
    with pytest.raises(ExogenousError, match=match):
        future_exogenous_rows(with_promo, Deterministics(), 3, future)


def test_future_exogenous_values_without_regressors(frame):
    with pytest.raises(ExogenousError, match="but the model has none"):
        future_exogenous_rows(load_series(frame), Deterministics(), 3, np.ones(3))


def test_future_exogenous_values_through_the_model(frame, rng):
    model = FanfoldVAR(lags=1, tightness=0.2).fit(frame, exog=rng.standard_normal((30, 1)))
    with pytest.raises(ExogenousError, match="give their future values"):
        model.forecast(2, rng=rng)


# ---------------------------------------------------------------- design layout


def test_design_labels_and_blocks(frame, rng):
    promo = pd.DataFrame({"promo": rng.standard_normal(30)}, index=MONTHS)
    series = load_series(frame, exog=promo)
    d = build_design(series, 2, Deterministics(constant=True, trend=True, seasonal=True))
    months = tuple(f"month={m}" for m in range(2, 13))
    lags = ("tyres[t-1]", "brakes[t-1]", "tyres[t-2]", "brakes[t-2]")
    assert d.labels == ("const", "trend", *months, "promo", *lags)
    assert (d.n_det, d.k, d.nobs) == (14, 18, 28)
    V = frame.to_numpy()
    np.testing.assert_array_equal(d.Y, V[2:])
    np.testing.assert_array_equal(d.X[:, 14:16], V[1:-1])
    np.testing.assert_array_equal(d.X[:, 16:18], V[:-2])
    np.testing.assert_array_equal(d.X[:, 13], promo["promo"].to_numpy()[2:])
    np.testing.assert_array_equal(d.X[:, 1], np.arange(3, 31))
    # the first Y row is March 2020: only the month=3 dummy is on
    assert d.X[0, 2:13].tolist() == [0, 1] + [0] * 9


@pytest.mark.parametrize(
    ("freq", "labels"),
    [("QS", ("quarter=2", "quarter=3", "quarter=4")),
     ("D", tuple(f"weekday={d}" for d in ("Tue", "Wed", "Thu", "Fri", "Sat", "Sun")))],
)
def test_seasonal_labels_by_frequency(rng, freq, labels):
    idx = pd.date_range("2021-01-01", periods=40, freq=freq)
    series = load_series(pd.DataFrame({"a": rng.standard_normal(40)}, index=idx))
    d = build_design(series, 1, Deterministics(seasonal=True))
    assert d.labels == ("const", *labels, "a[t-1]")


def test_plain_arrays_with_a_period(rng):
    series = load_series(rng.standard_normal((20, 1)), period=4)
    d = build_design(series, 1, Deterministics(seasonal=True))
    assert d.labels == ("const", "season=2", "season=3", "season=4", "y1[t-1]")
    # row 1 of the data is the first left-hand side; it is season 2
    np.testing.assert_array_equal(d.X[:4, 1:4], [[1, 0, 0], [0, 1, 0], [0, 0, 1], [0, 0, 0]])


def test_common_sample_for_lag_comparison(frame):
    series = load_series(frame)
    designs = [build_design(series, p, Deterministics(), start=4) for p in (1, 2, 4)]
    for d in designs[1:]:
        np.testing.assert_array_equal(d.Y, designs[0].Y)
    assert [d.k for d in designs] == [3, 5, 9]


@pytest.mark.parametrize(("lags", "start", "match"), [
    (0, None, "lags must be an integer >= 1; got 0"),
    (1.5, None, "lags must be an integer >= 1"),
    (3, 2, r"start \(2\) must be at least lags \(3\)"),
])
def test_bad_lags_or_start(frame, lags, start, match):
    with pytest.raises(SpecificationError, match=match):
        build_design(load_series(frame), lags, Deterministics(), start=start)


# ---------------------------------------------------------------- future rows


def test_future_rows_continue_trend_and_seasons(frame):
    series = load_series(frame)  # 30 months: January 2020 .. June 2022
    det = Deterministics(constant=True, trend=True, seasonal=True)
    rows = future_exogenous_rows(series, det, 8)
    assert rows.shape == (8, 13)
    np.testing.assert_array_equal(rows[:, 0], 1.0)
    np.testing.assert_array_equal(rows[:, 1], np.arange(31, 39))
    future = series.calendar.future(8)  # July 2022 .. February 2023
    months = rows[:, 2:] @ np.arange(2, 13)
    np.testing.assert_array_equal(np.where(months == 0, 1, months), future.month)


def test_future_rows_of_a_differenced_series(frame):
    series = load_series(frame, transforms={"tyres": "diff"})
    rows = future_exogenous_rows(series, Deterministics(trend=True), 2)
    # one row was lost to differencing, so the design has 29 rows and the trend goes on
    np.testing.assert_array_equal(rows[:, 1], [30, 31])


def test_future_rows_with_exogenous_values(with_promo):
    rows = future_exogenous_rows(with_promo, Deterministics(), 2, [[5.0], [6.0], [7.0]])
    np.testing.assert_array_equal(rows, [[1.0, 5.0], [1.0, 6.0]])
    named = pd.DataFrame({"other": [0.0, 0.0], "promo": [3.0, 4.0]})
    np.testing.assert_array_equal(
        future_exogenous_rows(with_promo, Deterministics(), 2, named), [[1.0, 3.0], [1.0, 4.0]])


# ---------------------------------------------------------------- negative demand


def _counts(rng, negative_rows=(), negative=-40.0) -> pd.DataFrame:
    """Two whole-number demand series, 30 months, with negative values in "brakes"."""
    values = np.round(100.0 + 10.0 * rng.standard_normal((30, 2)))
    values[list(negative_rows), 1] = negative
    return pd.DataFrame(values, index=MONTHS, columns=["tyres", "brakes"])


def test_a_few_negative_counts_are_named_with_date_and_data_row(rng):
    series = load_series(_counts(rng, negative_rows=(7, 20)))
    message = negative_values_message(series)
    assert message is not None
    assert message.startswith("series 'brakes' has 2 negative value(s), the first -40 at "
                              "2020-08-01 (data row 8), though 93% of its values are >= 0")
    assert "returns booked as negative sales" in message


def test_negative_counts_after_differencing_keep_their_date(rng):
    series = load_series(_counts(rng, negative_rows=(7,)), transforms="diff")
    assert "at 2020-08-01 (data row 8)" in negative_values_message(series)
    first = load_series(_counts(rng, negative_rows=(0,)), transforms="diff")
    assert "the first -40 at data row 1," in negative_values_message(first)


@pytest.mark.parametrize("case", ["no negatives", "fractional", "often negative",
                                  "median not positive"])
def test_negative_values_that_need_not_be_errors_pass(rng, case):
    frame = _counts(rng, negative_rows=() if case == "no negatives" else (7,))
    if case == "fractional":  # changes, balances...: negative values are ordinary
        frame["brakes"] += 0.5
    elif case == "often negative":  # 4 of 30 below zero: more than 10%
        frame.iloc[[1, 2, 3, 4], 1] = -3.0
    elif case == "median not positive":  # mostly zero, e.g. intermittent
        frame.iloc[:20, 1] = 0.0
    assert negative_values_message(load_series(frame)) is None


def test_fit_warns_once_about_negative_counts(rng):
    with pytest.warns(NegativeValuesWarning, match="series 'brakes' has 1 negative") as caught:
        FanfoldVAR(lags=1, tightness=0.2, transforms="auto").fit(_counts(rng, (7,)))
    assert sum(isinstance(w.message, NegativeValuesWarning) for w in caught) == 1
