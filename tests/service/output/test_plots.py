"""The PNG charts of :mod:`service.output.plots`, drawn from a small demo model."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from priors import FanfoldVAR
from priors.backtest import rolling_origin
from service.output.plots import (
    backtest_fan_png,
    fan_chart_png,
    period_name,
    responses_png,
    scenario_png,
)

DEMO = Path(__file__).resolve().parents[3] / "examples" / "bike_parts_demand.csv"
NAMES = ["tyres", "inner_tubes", "brake_pads", "chains", "cassettes"]
PNG = b"\x89PNG\r\n\x1a\n"


@pytest.fixture(scope="module")
def data() -> pd.DataFrame:
    return pd.read_csv(DEMO, index_col=0, parse_dates=True)


@pytest.fixture(scope="module")
def model(data: pd.DataFrame) -> FanfoldVAR:
    return FanfoldVAR(lags=2, transforms={"tyres": "log"}).fit(data)


@pytest.fixture(scope="module")
def backtest(data: pd.DataFrame):
    """3 origins, 3 steps: the last origin's forecast runs 2 months past the data."""
    return rolling_origin(data, params={"lags": 1, "tightness": 0.2, "sum_coef": None,
                                        "initial": None, "seasonal": False},
                          origins=3, horizon=3, draws=50, rng=np.random.default_rng(6))


def _is_png(path: Path) -> bool:
    return path.read_bytes()[:8] == PNG and path.stat().st_size > 10_000


def _legend_labels(fig) -> list[str]:
    return [t.get_text() for t in fig.legends[0].get_texts()]


def _no_open_figures() -> bool:
    import matplotlib.pyplot as plt

    return plt.get_fignums() == []


def test_fan_chart_one_panel_per_series(model, data, tmp_path: Path) -> None:
    fc = model.forecast(6, rng=np.random.default_rng(0), draws=200)
    path = tmp_path / "fan.png"
    fig = fan_chart_png(str(path), data.iloc[-36:], fc, title="demo")
    assert _is_png(path) and _no_open_figures()
    assert len(fig.axes) == len(NAMES)
    assert [ax.get_ylabel() for ax in fig.axes] == [f"{nm} (units)" for nm in NAMES]
    assert _legend_labels(fig) == ["history", "forecast origin", "95% band", "80% band",
                                   "50% band", "median"]
    assert fig.get_suptitle() == "demo"


def test_fan_chart_without_history(model, tmp_path: Path) -> None:
    fc = model.forecast(3, rng=np.random.default_rng(1), draws=100).cumulative()
    fig = fan_chart_png(str(tmp_path / "cum.png"), None, fc, bands=(90,))
    assert _is_png(tmp_path / "cum.png")
    assert "history" not in _legend_labels(fig) and "90% band" in _legend_labels(fig)


def test_scenario_marks_conditions_and_baseline(model, data, tmp_path: Path) -> None:
    conds = [model.condition("chains", 2, value=500.0),
             model.condition("tyres", 3, lower=1300.0),
             model.condition("brake_pads", 4, lower=700.0, upper=800.0)]
    sc = model.scenario(6, conds, rng=np.random.default_rng(2), draws=200)
    path = tmp_path / "scenario.png"
    fig = scenario_png(str(path), data.iloc[-36:], sc)
    assert _is_png(path) and _no_open_figures()
    assert len(fig.axes) == len(NAMES)
    titles = [ax.get_title() for ax in fig.axes]
    assert titles == ["tyres (conditioned)", "inner_tubes", "brake_pads (conditioned)",
                      "chains (conditioned)", "cassettes"]
    labels = _legend_labels(fig)
    for label in ("median", "baseline median", "fixed value", "at least", "range"):
        assert label in labels
    chains = fig.axes[NAMES.index("chains")]
    fixed = next(line for line in chains.get_lines() if line.get_label() == "fixed value")
    assert list(fixed.get_ydata()) == [500.0]
    assert all("units" in ax.get_ylabel() for ax in fig.axes)


def test_responses_grid_rows_series_columns_shocks(model, tmp_path: Path) -> None:
    res = model.impulse_responses(6, rng=np.random.default_rng(3), draws=100)
    path = tmp_path / "irf.png"
    fig = responses_png(str(path), res, shocks=["tyres", "chains"], period_name="months")
    assert _is_png(path) and _no_open_figures()
    assert len(fig.axes) == len(NAMES) * 2
    titles = [ax.get_title() for ax in fig.axes]
    assert titles[:2] == ["shock: tyres -> tyres", "shock: chains -> tyres"]
    assert titles[-1] == "shock: chains -> cassettes"
    ylabels = [ax.get_ylabel() for ax in fig.axes[::2]]  # first column: one per row
    assert ylabels == [f"{nm} ({unit})" for nm, unit in zip(NAMES, res.units, strict=True)]
    assert "percent" in ylabels[0] and "units" in ylabels[1]  # tyres is modelled in logs
    assert fig.axes[-1].get_xlabel() == "months after the shock"
    assert _legend_labels(fig) == ["90% band", "68% band", "median"]


def test_responses_default_all_shocks_and_unknown_shock(data, tmp_path: Path) -> None:
    small = FanfoldVAR(lags=1).fit(data[["tyres", "chains", "cassettes"]])
    res = small.impulse_responses(3, rng=np.random.default_rng(4), draws=50)
    fig = responses_png(str(tmp_path / "all.png"), res, coverages=(50,), period_name="weeks")
    assert len(fig.axes) == 3 * 3
    assert fig.axes[-1].get_xlabel() == "weeks after the shock"
    with pytest.raises(ValueError, match="unknown shock 'pedals'"):
        responses_png(str(tmp_path / "x.png"), res, shocks=["pedals"])


def test_unwritable_path_raises_and_closes(model, tmp_path: Path) -> None:
    fc = model.forecast(2, rng=np.random.default_rng(5), draws=50)
    with pytest.raises(OSError):
        fan_chart_png(str(tmp_path / "missing" / "fan.png"), None, fc)
    assert _no_open_figures()


@pytest.mark.parametrize(("kind", "name"), [("monthly", "months"), ("quarterly", "quarters"),
                                            ("weekly", "weeks"), ("daily", "days"),
                                            ("other", "periods")])
def test_period_name(kind: str, name: str) -> None:
    assert period_name(kind) == name


# ---------------------------------------------------------------------- backtest fan charts
def _tick_labels(ax) -> list[str]:
    return [t.get_text() for t in ax.get_xticklabels() if t.get_text()]


def _line(ax, label: str):
    return next(line for line in ax.get_lines() if line.get_label() == label)


def test_backtest_fan_chart_has_dates_after_the_origin(backtest, data, tmp_path) -> None:
    k = len(backtest.origins) - 1
    origin = data.index[backtest.origins[k] - 1]  # the last month the model saw
    path = tmp_path / "origin.png"
    fig = backtest_fan_png(str(path), backtest, k, history=data)
    assert _is_png(path) and _no_open_figures()
    assert len(fig.axes) == len(NAMES)
    following = pd.date_range(origin, periods=4, freq="MS")[1:]  # 2 past the data's end
    for ax, name in zip(fig.axes, NAMES, strict=True):
        labels = _tick_labels(ax)
        assert len(labels) >= 3
        ticks = pd.to_datetime(labels, format="%Y-%m")  # raises unless every one is a date
        assert origin in ticks and ticks.max() <= following[-1]
        assert not any("." in label for label in labels)
        assert list(pd.to_datetime(_line(ax, "median forecast").get_xdata())) == list(following)
        assert list(pd.to_datetime(_line(ax, "forecast origin").get_xdata())) == [origin] * 2
        assert ax.get_ylabel() == f"{name} (units)"
        assert "step" not in ax.get_xlabel()
    assert set(_legend_labels(fig)) == {"data before the origin", "central 90% interval",
                                        "median forecast", "what happened", "forecast origin"}


def test_backtest_fan_chart_without_dates_has_whole_periods(backtest, data, tmp_path) -> None:
    plain = data.reset_index(drop=True)
    fig = backtest_fan_png(str(tmp_path / "plain.png"), backtest, 0, history=plain,
                           units={"tyres": "tyres sold"})
    for ax in fig.axes:
        labels = [s.replace("\u2212", "-") for s in _tick_labels(ax)]
        assert labels and all(float(s) == int(s) for s in labels)  # no 2.5, 7.5, ...
        assert ax.get_xlabel() == "periods after the forecast origin"
        assert list(_line(ax, "forecast origin").get_xdata()) == [0, 0]
        assert list(_line(ax, "median forecast").get_xdata()) == [1, 2, 3]
    assert fig.axes[0].get_ylabel() == "tyres (tyres sold)"
    assert fig.axes[1].get_ylabel() == "inner_tubes (units)"


def test_backtest_fan_chart_refuses_a_missing_origin(backtest, data, tmp_path) -> None:
    with pytest.raises(ValueError, match="origin index k must be 0 to 2; got 3"):
        backtest_fan_png(str(tmp_path / "x.png"), backtest, 3, history=data)
    with pytest.raises(ValueError, match="history has 10 rows"):
        backtest_fan_png(str(tmp_path / "x.png"), backtest, 0, history=data.iloc[:10])
    assert _no_open_figures()
