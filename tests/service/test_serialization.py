"""forecast_to_dict and summary_to_dict: layout, plain JSON types, no NaN or inf."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from priors import DataError, FanfoldVAR, Forecast, SpecificationError, TimeIndexError
from service.serialization import (
    forecast_to_dict,
    frame_from_csv,
    quantile_key,
    summary_to_dict,
)

DEMO = Path(__file__).resolve().parents[2] / "examples" / "bike_parts_demand.csv"
QUANTILES = (0.05, 0.5, 0.95)


@pytest.fixture(scope="module")
def demo() -> pd.DataFrame:
    return pd.read_csv(DEMO, index_col=0, parse_dates=True)


@pytest.fixture(scope="module")
def model(demo: pd.DataFrame) -> FanfoldVAR:
    return FanfoldVAR(lags=2, tightness=0.3).fit(demo)


def _plain(obj: object) -> None:
    """Only dict, list, str, int, float (finite), bool and None, all the way down."""
    if isinstance(obj, dict):
        assert all(isinstance(k, str) for k in obj)
        for v in obj.values():
            _plain(v)
    elif isinstance(obj, list):
        for v in obj:
            _plain(v)
    else:
        assert obj is None or type(obj) in (str, int, float, bool), type(obj)
        if isinstance(obj, float):
            assert np.isfinite(obj)


@pytest.mark.parametrize(("level", "key"), [(0.05, "0.05"), (0.5, "0.5"), (0.95, "0.95"),
                                            (0.025, "0.025"), (np.float64(0.1), "0.1")])
def test_quantile_key_is_short(level: float, key: str) -> None:
    assert quantile_key(level) == key


def test_forecast_dict_layout(model: FanfoldVAR) -> None:
    fc = model.forecast(4, rng=np.random.default_rng(0), draws=200)
    out = forecast_to_dict(model, fc, quantiles=QUANTILES, seed=7, draws=200)

    assert list(out) == ["forecasts", "configuration", "lags", "hyperparameters",
                         "log_marginal_likelihood", "log_marginal_likelihood_note", "seed",
                         "draws", "horizon", "rejected_explosive_share", "convergence",
                         "warnings"]
    assert out["convergence"] is None and out["warnings"] == []  # exact sampler
    assert list(out["forecasts"]) == list(model.series_.names)
    assert (out["lags"], out["seed"], out["draws"], out["horizon"]) == (2, 7, 200, 4)
    assert "lags" not in out["hyperparameters"]
    assert out["hyperparameters"]["tightness"] == pytest.approx(0.3)
    assert isinstance(out["log_marginal_likelihood"], float)
    tyres = out["forecasts"]["tyres"]
    assert tyres["dates"] == ["2026-01-01", "2026-02-01", "2026-03-01", "2026-04-01"]
    assert list(tyres["quantiles"]) == ["0.05", "0.5", "0.95"]
    np.testing.assert_allclose(tyres["mean"], fc.mean()[:, 0])
    np.testing.assert_allclose(tyres["quantiles"]["0.5"], tyres["median"])
    _plain(out)
    json.dumps(out, allow_nan=False)


def test_forecast_dict_turns_non_finite_into_none(model: FanfoldVAR) -> None:
    paths = np.ones((10, 2, 1))
    paths[:, 1, 0] = np.inf
    fc = Forecast(paths, ("a",), pd.date_range("2026-01-01", periods=2, freq="MS"))
    with np.errstate(invalid="ignore"):  # quantiles of inf subtract inf - inf
        out = forecast_to_dict(model, fc, quantiles=[0.5], seed=1, draws=10)
    assert out["forecasts"]["a"]["mean"] == [1.0, None]
    assert out["forecasts"]["a"]["quantiles"]["0.5"] == [1.0, None]
    json.dumps(out, allow_nan=False)


def test_forecast_dict_rejects_bad_quantiles(model: FanfoldVAR) -> None:
    fc = model.forecast(1, rng=np.random.default_rng(0), draws=20)
    with pytest.raises(SpecificationError, match="between 0 and 1"):
        forecast_to_dict(model, fc, quantiles=[0.5, 1.5], seed=1, draws=20)


def test_summary_dict_layout(model: FanfoldVAR) -> None:
    out = summary_to_dict(model, 0.8)
    n, k = 5, 1 + 5 * 2
    assert list(out) == ["lags", "configuration", "hyperparameters",
                         "log_marginal_likelihood", "log_marginal_likelihood_note",
                         "lag_search", "coefficients", "sigma", "span"]
    assert out["lag_search"] == []
    assert len(out["coefficients"]) == n * k
    first = out["coefficients"][0]
    assert first["equation"] == "tyres" and first["regressor"] == "const"
    assert set(first) == {"equation", "regressor", "mean", "sd", "lower", "upper"}
    assert all(c["lower"] < c["mean"] < c["upper"] for c in out["coefficients"])
    sigma = np.array(out["sigma"]["mean"])
    assert out["sigma"]["names"] == list(model.series_.names)
    np.testing.assert_allclose(sigma, sigma.T)
    assert out["span"] == {"start": "2016-03-01", "end": "2025-12-01", "observations": 118}
    _plain(out)
    json.dumps(out, allow_nan=False)


def test_summary_level_widens_intervals(model: FanfoldVAR) -> None:
    narrow = summary_to_dict(model, 0.5)["coefficients"][0]
    wide = summary_to_dict(model, 0.99)["coefficients"][0]
    assert wide["lower"] < narrow["lower"] < narrow["upper"] < wide["upper"]


def test_summary_dict_lag_search_and_flat(demo: pd.DataFrame) -> None:
    auto = summary_to_dict(FanfoldVAR(lags="auto", max_lags=3, prior="flat").fit(demo))
    assert [c["lags"] for c in auto["lag_search"]] == [1, 2, 3]
    assert {c["criterion"] for c in auto["lag_search"]} == {"bic"}
    assert all(c["tightness"] is None for c in auto["lag_search"])
    assert auto["log_marginal_likelihood"] is None
    assert set(auto["hyperparameters"].values()) == {None}
    _plain(auto)


def test_summary_span_without_dates() -> None:
    y = np.random.default_rng(3).standard_normal((40, 2))
    out = summary_to_dict(FanfoldVAR(lags=3, tightness=0.2).fit(y))
    assert out["span"] == {"start": "4", "end": "40", "observations": 37}


# ---------------------------------------------------------------------- frame_from_csv
def test_frame_from_csv_reads_demo(demo: pd.DataFrame) -> None:
    frame = frame_from_csv(DEMO.read_text())
    assert list(frame.columns) == list(demo.columns)
    assert isinstance(frame.index, pd.DatetimeIndex) and frame.index.name == "date"
    assert frame.index[0] == pd.Timestamp("2016-01-01")
    np.testing.assert_array_equal(frame.to_numpy(), demo.to_numpy())


@pytest.mark.parametrize(("dates", "first"), [
    (["2016-01-01", "2016-02-01", "2016-03-01"], "2016-01-01"),
    (["01/31/2016", "02/29/2016", "03/31/2016"], "2016-01-31"),   # month first, as pandas
    (["Jan 2016", "Feb 2016", "Mar 2016"], "2016-01-01"),          # no single format
])
def test_frame_from_csv_reads_dates_in_the_formats_pandas_guesses(dates, first) -> None:
    """The format is guessed from the first date, as pandas does, but without its "could
    not infer format" warning (tests/test_shared_state.py: no warning filter here)."""
    text = "date,tyres\n" + "".join(f"{d},{i}\n" for i, d in enumerate(dates))
    frame = frame_from_csv(text)
    assert frame.index[0] == pd.Timestamp(first)
    assert frame.index[-1] > frame.index[0]


def test_frame_from_csv_keeps_duplicate_names() -> None:
    frame = frame_from_csv("date,a,a\n2020-01-01,1,2\n2020-02-01,3,4\n")
    assert list(frame.columns) == ["a", "a"]


@pytest.mark.parametrize(("text", "error", "match"), [
    ("", DataError, "cannot read the data as CSV"),
    ("date;a\n2020-01-01;1\n", DataError, "separated by commas"),
    ("date,a\nsoon,1\nlater,2\n", TimeIndexError, "as dates"),
    ("date,a\n1,1\n2,2\n", TimeIndexError, "holds numbers"),
    ("date,a\n2020-01-01,1\n,2\n", TimeIndexError, "no date in data row 2"),
])
def test_frame_from_csv_errors(text: str, error: type, match: str) -> None:
    with pytest.raises(error, match=match):
        frame_from_csv(text)


def _csv(dates: list[str]) -> str:
    return "date,tyres\n" + "".join(f"{d},{100 + i % 5}\n" for i, d in enumerate(dates))


DAY_FIRST = [f"01/{m:02d}/2024" for m in range(1, 13)]  # 1 January .. 1 December


def test_frame_from_csv_reads_day_first_dates_when_asked() -> None:
    frame = frame_from_csv(_csv(DAY_FIRST), dayfirst=True)
    assert list(frame.index) == list(pd.date_range("2024-01-01", periods=12, freq="MS"))
    iso = frame_from_csv(_csv([f"2024-{m:02d}-01" for m in range(1, 13)]), dayfirst=True)
    assert list(iso.index) == list(frame.index)  # year first: dayfirst changes nothing


def test_frame_from_csv_reads_a_date_that_is_only_day_first_without_warning() -> None:
    # pandas would guess the format with a "Parsing dates in %d/%m/%Y format" warning
    # (an error under this suite's filterwarnings); the first date decides the order
    dates = ["31/01/2024", "29/02/2024", "31/03/2024"]
    for dayfirst in (False, True):
        frame = frame_from_csv(_csv(dates), dayfirst=dayfirst)
        assert frame.index[1] == pd.Timestamp("2024-02-29")


def test_ambiguous_day_first_dates_read_month_first_suggest_dayfirst() -> None:
    # two years of 01/02/2024 ... read month first are 2 January ...: daily, then a jump
    dates = DAY_FIRST + [d.replace("2024", "2025") for d in DAY_FIRST]
    with pytest.raises(TimeIndexError, match=r"read month first \('01/02/2024' as 2024-01-02\)"
                                             r".*not evenly spaced.*read day first "
                                             r"\('01/02/2024' as 2024-02-01\).*--dayfirst") as e:
        frame_from_csv(_csv(dates))
    assert e.value.argument == "dayfirst"
    # one year of them is a regular daily calendar (1-12 January) too: month first stays
    assert frame_from_csv(_csv(DAY_FIRST)).index[-1] == pd.Timestamp("2024-01-12")


def test_a_later_date_that_is_only_day_first_suggests_dayfirst() -> None:
    dates = ["07/01/2024", "14/01/2024", "21/01/2024"]  # weekly, day first
    with pytest.raises(TimeIndexError, match=r"'14/01/2024' cannot be: if the day comes first, "
                                             r"give the dayfirst option \(--dayfirst") as e:
        frame_from_csv(_csv(dates))
    assert e.value.argument == "dayfirst"
    assert frame_from_csv(_csv(dates), dayfirst=True).index[1] == pd.Timestamp("2024-01-14")


def test_dayfirst_refuses_a_first_date_that_cannot_be_day_first() -> None:
    with pytest.raises(TimeIndexError, match=r"'01/31/2024', cannot be day first \(there is no "
                                             r"month 31\)"):
        frame_from_csv(_csv(["01/31/2024", "02/29/2024", "03/31/2024"]), dayfirst=True)


def test_month_first_dates_are_not_second_guessed() -> None:
    frame = frame_from_csv(_csv([f"{m:02d}/01/2024" for m in range(1, 13)]))
    assert frame.index[1] == pd.Timestamp("2024-02-01")
