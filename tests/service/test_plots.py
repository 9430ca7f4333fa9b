"""The PNG charts of :mod:`service.plots`, drawn from a small demo model."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from priors import FanfoldVAR
from service.plots import fan_chart_png, period_name, responses_png, scenario_png

DEMO = Path(__file__).resolve().parents[2] / "examples" / "bike_parts_demand.csv"
NAMES = ["tyres", "inner_tubes", "brake_pads", "chains", "cassettes"]
PNG = b"\x89PNG\r\n\x1a\n"


@pytest.fixture(scope="module")
def data() -> pd.DataFrame:
    return pd.read_csv(DEMO, index_col=0, parse_dates=True)


@pytest.fixture(scope="module")
def model(data: pd.DataFrame) -> FanfoldVAR:
    return FanfoldVAR(lags=2, transforms={"tyres": "log"}).fit(data)


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
    assert _legend_labels(fig) == ["history", "95% band", "80% band", "50% band", "median"]
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
