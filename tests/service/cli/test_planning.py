"""``fanfold scenario``, ``shocks`` and ``reorder`` and the ``--plot`` files, run
in-process through ``service.cli.commands.main``."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest

from priors import FanfoldVAR
from service.cli.commands import read_data
from service.compute.planning import replenishment_answer, scenario_answer
from service.config import Settings
from service.plan_schemas import (
    ReplenishmentCreate,
    ReplenishmentPublic,
    ScenarioCreate,
    ScenarioPublic,
    SharesPublic,
    ShocksPublic,
)

ROOT = Path(__file__).resolve().parents[3]
DEMO = ROOT / "examples" / "bike_parts_demand.csv"
NAMES = ["tyres", "inner_tubes", "brake_pads", "chains", "cassettes"]
PNG = b"\x89PNG\r\n\x1a\n"




def _json(run, *args: object) -> dict:
    code, out, err = run(*args, "--json")
    assert code == 0, err
    return json.loads(out)


def _one_line_error(err: str) -> bool:
    return err.startswith("fanfold: error: ") and err.count("\n") == 1


def _model() -> FanfoldVAR:
    return FanfoldVAR(lags=2).fit(read_data(str(DEMO)))


# ---------------------------------------------------------------------- scenario
SCENARIO = ("scenario", DEMO, "--lags", 2, "--horizon", 4, "--draws", 300, "--seed", 7)


def test_scenario_json_is_the_api_answer(run) -> None:
    out = _json(run, *SCENARIO, "--set", "chains@2=500", "--set", "tyres@2026-03=1300:")
    ScenarioPublic.model_validate(out)
    assert set(out) == set(ScenarioPublic.model_fields)
    spec = ScenarioCreate(horizon=4, draws=300, seed=7, conditions=[
        {"series": "chains", "step": 2, "value": 500},
        {"series": "tyres", "date": "2026-03-01", "lower": 1300}])
    assert out == json.loads(json.dumps(scenario_answer(_model(), spec, Settings())))

    chains = out["forecasts"]["chains"]
    assert chains["median"][1] == 500.0 and chains["mean"][1] == pytest.approx(500.0, rel=1e-12)
    for q in chains["quantiles"].values():  # every conditional path goes through it
        assert q[1] == pytest.approx(500.0, rel=1e-12)
    assert out["baseline"]["chains"]["median"][1] != pytest.approx(500.0, abs=1.0)
    assert min(out["forecasts"]["tyres"]["quantiles"]["0.05"][2:3]) >= 1300 - 1e-6
    assert [(c["series"], c["date"], c["kind"], c["lower"], c["upper"])
            for c in out["conditions"]] == [("chains", "2026-02-01", "value", 500.0, 500.0),
                                            ("tyres", "2026-03-01", "range", 1300.0, None)]
    assert all(0 < c["prior_probability"] < 1 for c in out["conditions"])


def test_scenario_text_tables_and_tail_warning(run) -> None:
    code, out, err = run(*SCENARIO, "--set", "chains@2=560", "--set", "brake_pads@3=:900")
    assert code == 0 and err == ""
    lines = out.splitlines()
    assert lines[0].startswith("Fanfold scenario: 5 series, 4 steps ahead, VAR(2), 300 draws, "
                               "seed 7")
    header = next(line for line in lines if line.strip().startswith("series"))
    assert header.split() == ["series", "date", "step", "kind", "lower", "upper", "prior"]
    chains_row = next(line for line in lines if line.strip().startswith("chains "))
    assert chains_row.split()[1:4] == ["2026-02-01", "2", "value"]
    assert chains_row.split()[-1].endswith("%")
    assert "far from what the model expects" not in out
    for name in ("chains (conditioned)", "brake_pads (conditioned)", "tyres", "cassettes"):
        assert f"\n{name}\n" in out
    table = out.split("\nchains (conditioned)\n")[1].split("\n\n")[0].splitlines()
    assert table[0].split() == ["date", "condition", "mean", "median", "q0.05", "q0.5",
                                "q0.95", "baseline", "change"]
    assert table[2].split()[:4] == ["2026-02-01", "=", "560.0", "560.0"]

    code, out, _ = run(*SCENARIO, "--set", "chains@1=300")
    assert code == 0
    warning = next(line for line in out.splitlines() if line.startswith("warning:"))
    assert warning.startswith("warning: the scenario is far from what the model expects: "
                              "chains on 2026-01-01")


def test_scenario_plan_file_fixes_its_cells(run, tmp_path: Path) -> None:
    plan = tmp_path / "plan.csv"
    plan.write_text("month,tyres,chains\n2026-01-01,1300,\n2026-03-01,,520\n"
                    "2026-04-01,1250,530\n")
    out = _json(run, *SCENARIO, "--plan", plan, "--set", "cassettes@2026-02=250:300")
    got = {(c["series"], c["date"]): c["kind"] for c in out["conditions"]}
    assert got == {("cassettes", "2026-02-01"): "range", ("tyres", "2026-01-01"): "value",
                   ("tyres", "2026-04-01"): "value", ("chains", "2026-03-01"): "value",
                   ("chains", "2026-04-01"): "value"}
    assert out["forecasts"]["tyres"]["median"][0] == pytest.approx(1300.0, rel=1e-12)
    assert out["forecasts"]["chains"]["median"][2:] == pytest.approx([520.0, 530.0])


@pytest.mark.parametrize("bad", [
    "chains=500", "chains@=500", "@2=500", "chains@2=", "chains@0=500", "chains@two=500",
    "chains@2=abc", "chains@2=inf", "chains@2=:", "chains@2=600:500", "chains@2026-13=5",
])
def test_scenario_bad_set_syntax_exit_2(run, bad: str) -> None:
    code, out, err = run(*SCENARIO, "--set", bad)
    assert (code, out) == (2, "") and _one_line_error(err)
    assert "argument --set" in err and "expected SERIES@WHEN=VALUE or SERIES@WHEN=LO:HI" in err
    assert repr(bad) in err


@pytest.mark.parametrize(("args", "code", "message"), [
    ([], 2, "give at least one condition with --set"),
    (["--set", "pedals@2=5"], 2, "unknown series 'pedals'"),
    (["--set", "chains@2030-01=5"], 2, "is not a forecast period"),
    (["--set", "chains@200=5"], 2, "--set/--plan condition 1, step: Input should be less"),
    (["--set", "chains@2=5", "--draws", 20_000], 2, "--draws: Input should be less than"),
    (["--plan", "nope.csv"], 1, "data file 'nope.csv' not found"),
])
def test_scenario_errors(run, args: list[object], code: int, message: str) -> None:
    got, out, err = run(*SCENARIO, *args)
    assert (got, out) == (code, "") and _one_line_error(err)
    assert message in err


def test_scenario_plan_with_an_unknown_column_exit_1(run, tmp_path: Path) -> None:
    plan = tmp_path / "plan.csv"
    plan.write_text("date,pedals\n2026-01-01,5\n")
    code, _, err = run(*SCENARIO, "--plan", plan)
    assert code == 1 and _one_line_error(err) and "column 'pedals' is not a series" in err


# ---------------------------------------------------------------------- shocks
SHOCKS = ("shocks", DEMO, "--lags", 2, "--horizon", 6, "--draws", 200)


def test_shocks_json_is_the_api_layout(run) -> None:
    out = _json(run, *SHOCKS)
    ShocksPublic.model_validate({"model_id": "cli", "version": 1, **out})
    assert set(out) == set(ShocksPublic.model_fields) - {"model_id", "version"}
    assert out["steps"] == list(range(7)) and isinstance(out["seed"], int)
    # one seed rule for every command: fresh unless given, and given back in the output
    again = _json(run, *SHOCKS, "--seed", out["seed"])
    assert again["responses"] == out["responses"]
    assert list(out["responses"]) == NAMES and out["units"]["tyres"] == "units"
    pw = out["responses"]["tyres"]["chains"]
    assert set(pw["bands"]) == {"68", "90"}
    lo, hi = np.array(pw["bands"]["90"]["lower"]), np.array(pw["bands"]["90"]["upper"])
    assert np.all(lo <= np.array(pw["median"])) and np.all(np.array(pw["median"]) <= hi)
    # recursive: a shock to a later series does not move an earlier one on impact
    assert out["responses"]["chains"]["tyres"]["median"][0] == 0.0


def test_shocks_chosen_shocks_and_shares_json(run) -> None:
    out = _json(run, *SHOCKS, "--shock", "chains", "--shock", "tyres", "--shares",
                "--bands", "80")
    assert set(out) == {"responses", "shares"}
    assert list(out["responses"]["responses"]) == ["chains", "tyres"]
    assert set(out["responses"]["responses"]["chains"]["tyres"]["bands"]) == {"80"}
    SharesPublic.model_validate({"model_id": "cli", "version": 1, **out["shares"]})
    assert out["shares"]["steps"] == list(range(1, 7))
    total = sum(np.array(pw["median"]) for pw in out["shares"]["shares"]["tyres"].values())
    assert np.all(total <= 1 + 1e-9)


def test_shocks_text(run) -> None:
    code, out, err = run(*SHOCKS, "--shock", "tyres", "--shares", "--seed", 0)
    assert code == 0 and err == ""
    assert out.startswith("Fanfold shocks: responses to a one-standard-deviation shock "
                          "(recursive), 200 draws, seed 0")
    assert "months after the shock" in out and "[90% band]" in out
    assert "\nshock: tyres\n" in out and "\nshock: chains\n" not in out
    table = out.split("\nshock: tyres\n")[1].split("\n\n")[0].splitlines()
    assert table[0].split()[:3] == ["step", "tyres", "(units)"]
    assert [row.split()[0] for row in table[1:]] == [str(s) for s in range(7)]
    shares = out.split("Variance shares")[1]
    block = shares.split("\ntyres\n")[1].split("\n\n")[0].splitlines()
    assert block[0].split() == ["steps", *NAMES]
    assert [row.split()[0] for row in block[1:]] == ["1", "6"]  # 1, 6, 12, horizon <= 6
    assert block[1].split()[1] == "100.0"  # ordered first: all its own one step ahead


@pytest.mark.parametrize(("args", "message"), [
    (["--shock", "pedals"], "--shock 'pedals' is not a series"),
    (["--bands", "0,90"], "argument --bands"),
    (["--identification", "generalised", "--order", ",".join(NAMES)], "ordering"),
    (["--order", "chains,tyres"], "every series exactly once"),
    (["--size", "big"], "argument --size"),
])
def test_shocks_errors_exit_2(run, args: list[object], message: str) -> None:
    code, out, err = run(*SHOCKS, *args)
    assert (code, out) == (2, "") and _one_line_error(err) and message in err


# ---------------------------------------------------------------------- reorder
REORDER = ("reorder", DEMO, "--lags", 2, "--lead-time", 3, "--draws", 500, "--seed", 5)


def test_reorder_json_is_the_api_answer(run) -> None:
    out = _json(run, *REORDER, "--stock", "tyres=2100,900", "--stock", "chains=1500",
                "--stock", "tyres+chains=3000,0,100", "--alert", "brake_pads>1000",
                "--alert", "chains<450")
    ReplenishmentPublic.model_validate(out)
    assert set(out) == set(ReplenishmentPublic.model_fields)
    spec = ReplenishmentCreate(lead_time=3, draws=500, seed=5, items=[
        {"series": "tyres", "name": "tyres", "on_hand": 2100, "on_order": 900,
         "service_level": 0.95},
        {"series": "chains", "name": "chains", "on_hand": 1500, "service_level": 0.95},
        {"series": ["tyres", "chains"], "name": "tyres+chains", "on_hand": 3000,
         "backorders": 100, "service_level": 0.95}],
        alerts=[{"series": "brake_pads", "threshold": 1000},
                {"series": "chains", "threshold": 450, "below": True}])
    assert out == json.loads(json.dumps(replenishment_answer(_model(), spec, Settings())))

    tyres, chains, kit = out["items"]
    assert kit["series"] == ["tyres", "chains"]
    # the same paths: the kit's demand is the sum, draw by draw
    assert kit["mean_demand"] == pytest.approx(tyres["mean_demand"] + chains["mean_demand"],
                                               rel=1e-12)
    for item in out["items"]:
        assert item["target"] == "service_level" and item["target_value"] == 0.95
        assert item["reorder_point"] >= item["mean_demand"]
        assert 0.0 <= item["stockout_probability"] <= 1.0
        assert item["suggested_order"] == pytest.approx(
            max(0.0, item["reorder_point"] - item["inventory_position"]))
    assert (tyres["inventory_position"], kit["inventory_position"]) == (3000.0, 2900.0)
    assert [a["below"] for a in out["alerts"]] == [False, True]
    assert all(0.0 <= a["any_step"] <= 1.0 for a in out["alerts"])
    assert out["window"]["steps"] == 3


def test_reorder_fill_rate_orders_whole_lots(run) -> None:
    out = _json(run, *REORDER, "--stock", "tyres=100", "--fill-rate", "0.98",
                "--order-quantity", "tyres=500", "--review-period", 1)
    item = out["items"][0]
    assert (item["target"], item["target_value"]) == ("fill_rate", 0.98)
    assert item["suggested_order"] > 0 and item["suggested_order"] % 500 == 0
    assert out["window"]["steps"] == 4 and out["window"]["review_period"] == 1


def test_reorder_text(run) -> None:
    code, out, err = run(*REORDER, "--stock", "tyres=2100,900", "--stock",
                         "inner_tubes+tyres=5000", "--alert", "brake_pads>1000")
    assert code == 0 and err == ""
    lines = out.splitlines()
    assert lines[0].startswith("Fanfold reorder: demand over 2026-01-01 to 2026-03-01 "
                               "(lead time 3 + review period 0 = 3 periods), 500 draws, "
                               "seed 5")
    header = next(line for line in lines if line.strip().startswith("item"))
    for column in ("target", "mean demand", "q0.05", "q0.95", "reorder point",
                   "safety stock", "position", "order", "P(stock-out)", "exp. shortage"):
        assert column in header
    assert any(line.strip().startswith("inner_tubes+tyres  service 95%") for line in lines)
    alert = next(line for line in lines if line.strip().startswith("brake_pads > 1000"))
    assert len(alert.split()) == 3 + 3 + 1 and alert.split()[-1].endswith("%")
    assert lines[-1].startswith("Review before ordering: these are model estimates")


@pytest.mark.parametrize(("args", "message"), [
    (["--stock", "tyres"], "expected NAME=ON_HAND[,ON_ORDER[,BACKORDERS]]"),
    (["--stock", "tyres=-5"], "expected NAME=ON_HAND[,ON_ORDER[,BACKORDERS]]"),
    (["--stock", "tyres+=5"], "expected NAME=ON_HAND[,ON_ORDER[,BACKORDERS]]"),
    (["--stock", "tyres=1,2,3,4"], "expected NAME=ON_HAND[,ON_ORDER[,BACKORDERS]]"),
    (["--alert", "brake_pads=1000"], "expected NAME>THRESHOLD or NAME<THRESHOLD"),
    (["--alert", "brake_pads>many"], "expected NAME>THRESHOLD or NAME<THRESHOLD"),
    (["--stock", "tyres=5", "--order-quantity", "tyres"], "expected NAME=Q with Q > 0"),
    (["--stock", "tyres=5", "--order-quantity", "chains=5"], "names no --stock item"),
    (["--stock", "tyres=5", "--fill-rate", "0.9"], "--fill-rate needs --order-quantity"),
    (["--stock", "tyres=5", "--fill-rate", "0.9", "--service-level", "0.9"], "not allowed"),
    (["--stock", "tyres=5", "--stock", "tyres=6"], "each --stock NAME may be given once"),
    ([], "give at least one --stock"),
    (["--stock", "pedals=5"], "unknown series 'pedals'"),
    (["--stock", "tyres=5", "--draws", 50], "--draws: Input should be greater than"),
])
def test_reorder_errors_exit_2(run, args: list[object], message: str) -> None:
    code, out, err = run(*REORDER, *args)
    assert (code, out) == (2, "") and _one_line_error(err)
    assert message in err


def test_reorder_needs_a_lead_time(run) -> None:
    code, _, err = run("reorder", DEMO, "--stock", "tyres=5")
    assert code == 2 and "--lead-time" in err


def _positions(tmp_path: Path, text: str) -> Path:
    path = tmp_path / "positions.csv"
    path.write_text(text)
    return path


def test_reorder_stock_file_matches_stock_flags_and_rounds_to_lots(run, tmp_path) -> None:
    path = _positions(tmp_path, "item,on_hand,on_order,backorders,lot_size\n"
                                "tyres,2100,900,,500\n\n"
                                "tyres+chains,3000,0,100,\n")
    from_file = _json(run, *REORDER, "--stock", "chains=1500", "--stock-file", path)
    flags = _json(run, *REORDER, "--stock", "chains=1500", "--stock", "tyres=2100,900",
                  "--stock", "tyres+chains=3000,0,100", "--order-quantity", "tyres=500")
    assert from_file == flags
    chains, tyres, kit = from_file["items"]
    assert (chains["name"], tyres["name"], kit["name"]) == ("chains", "tyres", "tyres+chains")
    assert kit["series"] == ["tyres", "chains"] and kit["inventory_position"] == 2900.0
    assert tyres["suggested_order"] > 0 and tyres["suggested_order"] % 500 == 0


def test_reorder_stock_file_lot_sizes_serve_a_fill_rate(run, tmp_path) -> None:
    path = _positions(tmp_path, "item,on_hand,on_order,lot_size\ntyres,100,0,500\n")
    out = _json(run, *REORDER, "--stock-file", path, "--fill-rate", "0.98")
    assert out["items"][0]["target"] == "fill_rate"
    assert out["items"][0]["suggested_order"] % 500 == 0


@pytest.mark.parametrize(("text", "message"), [
    ("item,on_hand\ntyres,5\n", "no 'on_order' column; expected a CSV file with a header "
                                 "row and columns item, on_hand, on_order and optionally "
                                 "backorders, lot_size"),
    ("item,on_hand,on_order,price\ntyres,5,0,3\n", "column 'price' is not a known column"),
    ("item,on_hand,on_order\ntyres,-5,0\n", "data row 1 (tyres): on_hand is -5; it must be "
                                            ">= 0"),
    ("item,on_hand,on_order\nchains,1,0\ntyres,five,0\n",
     "data row 2 (tyres): on_hand 'five' is not a number"),
    ("item,on_hand,on_order\ntyres,,0\n", "data row 1 (tyres): on_hand is empty"),
    ("item,on_hand,on_order,lot_size\ntyres,5,0,0\n",
     "data row 1 (tyres): lot_size is 0; it must be > 0"),
    ("item,on_hand,on_order\ntyres,5,0\ntyres,6,0\n",
     "data row 2 (tyres): the item is also on data row 1"),
    ("item,on_hand,on_order\ntyres,5\n", "data row 1 has 2 cells for 3 columns"),
    ("item,on_hand,on_order\n", "no items below the header"),
    ("", "the file is empty"),
])
def test_reorder_stock_file_errors_exit_1_before_fitting(run, tmp_path, text, message) -> None:
    code, out, err = run(*REORDER, "--stock-file", _positions(tmp_path, text))
    assert (code, out) == (1, "") and _one_line_error(err)
    assert f"stock file '{tmp_path / 'positions.csv'}': {message}" in err


def test_reorder_stock_file_unknown_series_and_clashes(run, tmp_path) -> None:
    path = _positions(tmp_path, "item,on_hand,on_order\ntyres,5,0\ntyres+pedals,5,0\n")
    code, _, err = run(*REORDER, "--stock-file", path)
    assert code == 1 and _one_line_error(err)
    assert ("data row 2 (tyres+pedals): unknown series 'pedals'; series are tyres, "
            "inner_tubes, brake_pads, chains, cassettes") in err
    code, _, err = run(*REORDER, "--stock-file", path, "--stock", "tyres=1")
    assert code == 2 and "item 'tyres' is in --stock and in the stock file" in err
    lots = _positions(tmp_path, "item,on_hand,on_order,lot_size\ntyres,5,0,10\n")
    code, _, err = run(*REORDER, "--stock-file", lots, "--order-quantity", "tyres=20")
    assert code == 2 and "the stock file gives its lot_size (data row 1 (tyres))" in err
    code, _, err = run(*REORDER, "--stock-file", tmp_path / "nope.csv")
    assert code == 1 and "stock file" in err and "not found" in err


# ---------------------------------------------------------------------- --plot
def _png(path: Path) -> bool:
    return path.read_bytes()[:8] == PNG and path.stat().st_size > 10_000


@pytest.mark.parametrize("command", [
    ("forecast", DEMO, "--lags", 2, "--horizon", 4, "--draws", 200, "--seed", 1),
    (*SCENARIO, "--set", "chains@2=500", "--set", "tyres@3=1200:1400"),
    (*SHOCKS, "--shock", "tyres"),
])
def test_plot_writes_a_png(run, tmp_path: Path, command: tuple[object, ...]) -> None:
    path = tmp_path / "chart.png"
    code, out, err = run(*command, "--plot", path)
    assert code == 0 and out
    assert err == f"fanfold: wrote {path}\n"
    assert _png(path)


def test_unwritable_plot_path_exit_1(run, tmp_path: Path) -> None:
    path = tmp_path / "no-such-dir" / "chart.png"
    code, out, err = run("forecast", DEMO, "--lags", 1, "--horizon", 2, "--draws", 100,
                         "--plot", path)
    assert (code, out) == (1, "") and _one_line_error(err)
    assert f"cannot write {str(path)!r}" in err


# ---------------------------------------------------------------------- help
def test_help_lists_the_planning_commands(run) -> None:
    code, out, _ = run("--help")
    assert code == 0 and all(c in out for c in ("scenario", "shocks", "reorder"))


@pytest.mark.parametrize(("command", "defaults"), [
    ("scenario", ["default: 12", "default: 2000", "default: 25", "default: 0.05,0.5,0.95",
                  "default: a fresh random seed", "default: no file", "default: auto"]),
    ("shocks", ["default: 24", "default: recursive", "default: sd", "default: 1000",
                "default: 68,90", "default: a fresh random seed", "default: all",
                "default: the data's column"]),
    ("reorder", ["default: 0.95 unless --fill-rate", "default: 4000", "default: 0",
                 "default: 1", "default: 0.05,0.5,0.95", "default: a fresh random seed"]),
    ("forecast", ["default: no file", "default: a fresh random seed"]),
    ("fit", ["default: a fresh random seed"]),
    ("backtest", ["default: a fresh random seed"]),
])
def test_planning_help_states_defaults(run, command: str, defaults: list[str]) -> None:
    code, out, _ = run(command, "--help")
    text = " ".join(out.split())
    assert code == 0
    for default in defaults:
        assert default in text
