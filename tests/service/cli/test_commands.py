"""The ``fanfold`` command, run in-process through ``service.cli.commands.main``."""

from __future__ import annotations

import json
import subprocess
import sys
import warnings
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from priors import ConvergenceWarning, FanfoldVAR
from service.cli.commands import main

ROOT = Path(__file__).resolve().parents[3]
DEMO = ROOT / "examples" / "bike_parts_demand.csv"
NAMES = ["tyres", "inner_tubes", "brake_pads", "chains", "cassettes"]
FAST = ["--lags", "2", "--draws", "200"]




def _forecast_json(run, *extra: object) -> dict:
    code, out, err = run("forecast", DEMO, "--horizon", 3, *FAST, "--json", *extra)
    assert code == 0, err
    return json.loads(out)


# ---------------------------------------------------------------------- forecast
def test_forecast_json_layout(run) -> None:
    out = _forecast_json(run, "--seed", 1)
    assert set(out) == {"forecasts", "configuration", "lags", "hyperparameters",
                        "log_marginal_likelihood", "log_marginal_likelihood_note",
                        "seed", "draws", "horizon", "convergence", "warnings",
                        "rejected_explosive_share", "cumulative", "lead_time_totals"}
    assert (out["lags"], out["seed"], out["draws"], out["horizon"]) == (2, 1, 200, 3)
    assert set(out["hyperparameters"]) == {"tightness", "cross", "decay", "det_scale",
                                           "sum_coef", "initial", "season_scale"}
    assert isinstance(out["log_marginal_likelihood"], float)
    assert list(out["forecasts"]) == NAMES
    for fc in out["forecasts"].values():
        assert set(fc) == {"dates", "mean", "median", "quantiles"}
        assert fc["dates"] == ["2026-01-01", "2026-02-01", "2026-03-01"]
        assert list(fc["quantiles"]) == ["0.05", "0.5", "0.95"]
        assert all(len(v) == 3 for v in [fc["mean"], fc["median"], *fc["quantiles"].values()])


def test_forecast_quantiles_are_monotone(run) -> None:
    out = _forecast_json(run, "--seed", 2, "--quantiles", "0.9,0.1,0.25,0.5,0.75")
    for fc in out["forecasts"].values():
        assert list(fc["quantiles"]) == ["0.1", "0.25", "0.5", "0.75", "0.9"]
        q = np.array(list(fc["quantiles"].values()))
        assert np.all(np.diff(q, axis=0) >= 0)
        np.testing.assert_allclose(fc["quantiles"]["0.5"], fc["median"])


def test_same_seed_same_json_and_seed_is_reported(run) -> None:
    args = ("forecast", DEMO, "--horizon", 2, *FAST, "--json")
    first, second = run(*args, "--seed", 42), run(*args, "--seed", 42)
    assert first[0] == 0 and first[1] == second[1]
    assert run(*args, "--seed", 43)[1] != first[1]

    drawn = json.loads(run(*args)[1])  # no --seed: a fresh one, reported
    assert isinstance(drawn["seed"], int) and 0 <= drawn["seed"] < 2**32
    again = json.loads(run(*args, "--seed", drawn["seed"])[1])
    assert again == drawn


def test_forecast_text_table(run) -> None:
    code, out, err = run("forecast", DEMO, "--horizon", 2, *FAST, "--seed", 5)
    assert code == 0 and err == ""
    assert "seed 5" in out.splitlines()[0]
    for name in NAMES:
        assert f"\n{name}\n" in out
    header = next(line for line in out.splitlines() if line.strip().startswith("date"))
    # the 0.5 quantile is the median: one column (both were printed, same numbers)
    assert header.split() == ["date", "mean", "median", "q0.05", "q0.95"]
    assert out.count("2026-02-01") == len(NAMES)


def test_forecast_out_writes_tidy_csv(run, tmp_path: Path) -> None:
    path = tmp_path / "fc.csv"
    code, out, err = run("forecast", DEMO, "--horizon", 4, *FAST, "--seed", 3,
                         "--quantiles", "0.1,0.9", "--out", path)
    assert code == 0 and "wrote 20 rows" in err
    table = pd.read_csv(path)
    assert list(table.columns) == ["series", "date", "step", "values", "mean", "median", "q0.1",
                                   "q0.9"]
    assert set(table["values"]) == {"per period"}
    assert len(table) == len(NAMES) * 4
    assert table["series"].unique().tolist() == NAMES
    assert table["step"].tolist() == [1, 2, 3, 4] * len(NAMES)
    assert (table["q0.1"] <= table["median"]).all() and (table["median"] <= table["q0.9"]).all()
    totals = tmp_path / "totals.csv"  # running totals say so in the file itself
    assert run("forecast", DEMO, "--horizon", 4, *FAST, "--seed", 3, "--cumulative",
               "--out", totals)[0] == 0
    assert set(pd.read_csv(totals)["values"]) == {"running total from step 1"}
    _, js, _ = run("forecast", DEMO, "--horizon", 4, *FAST, "--seed", 3,
                   "--quantiles", "0.1,0.9", "--json")
    np.testing.assert_allclose(table["mean"][:4], json.loads(js)["forecasts"]["tyres"]["mean"])


def test_forecast_with_transforms_and_deterministics(run) -> None:
    out = _forecast_json(run, "--seed", 4, "--transform", "tyres=log,chains=diff",
                         "--seasonal", "--trend", "--tightness", "0.2")
    assert out["hyperparameters"]["tightness"] == pytest.approx(0.2)
    assert min(out["forecasts"]["tyres"]["quantiles"]["0.05"]) > 0


def test_python_m_service_entry_point() -> None:
    args = ["forecast", str(DEMO), "--horizon", "3", "--draws", "200", "--seed", "1", "--json"]
    proc = subprocess.run([sys.executable, "-m", "service", *args], cwd=ROOT,
                          capture_output=True, text=True, timeout=120, check=False)
    assert proc.returncode == 0, proc.stderr
    out = json.loads(proc.stdout)
    assert out["seed"] == 1 and out["horizon"] == 3 and list(out["forecasts"]) == NAMES


# ---------------------------------------------------------------------- fit
def test_fit_json_layout_with_lag_search(run) -> None:
    code, out, err = run("fit", DEMO, "--max-lags", 3, "--json")
    assert code == 0, err
    fit = json.loads(out)
    assert set(fit) == {"lags", "configuration", "hyperparameters", "log_marginal_likelihood",
                        "log_marginal_likelihood_note", "lag_search", "seed",
                        "coefficients", "sigma", "span", "spectral_radius", "diagnostics"}
    assert fit["diagnostics"] is None  # exact sampler: nothing to diagnose
    assert [c["lags"] for c in fit["lag_search"]] == [1, 2, 3]
    assert set(fit["lag_search"][0]) == {"lags", "score", "tightness", "criterion"}
    best = max(fit["lag_search"], key=lambda c: c["score"])
    assert fit["lags"] == best["lags"]
    assert len(fit["coefficients"]) == len(NAMES) * (1 + len(NAMES) * fit["lags"])
    assert fit["sigma"]["names"] == NAMES
    assert fit["span"]["end"] == "2025-12-01"
    assert fit["span"]["observations"] == 120 - fit["lags"]


def test_fit_text_summary(run) -> None:
    code, out, _ = run("fit", DEMO, "--max-lags", 2, "--summary", "--level", "0.8")
    assert code == 0
    assert "lag search" in out and "80% credible interval" in out
    assert all(f"equation {name}" in out for name in NAMES)
    assert "Sigma" in out
    code, short, _ = run("fit", DEMO, "--lags", 2)
    assert code == 0 and "VAR(2)" in short and "equation" not in short


def test_flat_prior_matches_statsmodels_ols(run) -> None:
    from statsmodels.tsa.api import VAR

    code, out, err = run("fit", DEMO, "--prior", "flat", "--lags", 2, "--json")
    assert code == 0, err
    fit = json.loads(out)
    n, k = len(NAMES), 1 + 2 * len(NAMES)
    coefs = fit["coefficients"]
    assert [c["regressor"] for c in coefs[:k]] == [
        "const", *(f"{nm}[t-{lag}]" for lag in (1, 2) for nm in NAMES)]
    mean = np.array([c["mean"] for c in coefs]).reshape(n, k).T  # (k, n) like statsmodels
    sd = np.array([c["sd"] for c in coefs]).reshape(n, k).T

    ols = VAR(pd.read_csv(DEMO, index_col=0).to_numpy(np.float64)).fit(2, trend="c")
    dof = ols.df_resid  # T - k
    np.testing.assert_allclose(mean, ols.params, rtol=1e-7, atol=1e-9)
    # matrix-t marginal of B under IW(E'E, T-k): sd^2 = se_ols^2 (T-k) / (T-k-n-1)
    np.testing.assert_allclose(sd, ols.stderr * np.sqrt(dof / (dof - n - 1)), rtol=1e-7)
    np.testing.assert_allclose(fit["sigma"]["mean"], ols.sigma_u * dof / (dof - n - 1),
                               rtol=1e-7)
    assert fit["log_marginal_likelihood"] is None
    assert fit["span"]["observations"] == ols.nobs


# ---------------------------------------------------------------------- errors
def _write(tmp_path: Path, name: str, edit) -> Path:
    frame = pd.read_csv(DEMO)
    frame = edit(frame)
    path = tmp_path / name
    frame.to_csv(path, index=False)
    return path


def _nan_inside(f: pd.DataFrame) -> pd.DataFrame:
    f.loc[30, "chains"] = np.nan
    return f


def _duplicate_date(f: pd.DataFrame) -> pd.DataFrame:
    f.loc[10, "date"] = f.loc[9, "date"]
    return f


def _text_column(f: pd.DataFrame) -> pd.DataFrame:
    f["brake_pads"] = f["brake_pads"].astype(str) + " units"
    return f


def _no_dates(f: pd.DataFrame) -> pd.DataFrame:
    f["date"] = [f"month {i}" for i in range(len(f))]
    return f


def _numbers_as_dates(f: pd.DataFrame) -> pd.DataFrame:
    f["date"] = range(len(f))
    return f


def _dates_only(f: pd.DataFrame) -> pd.DataFrame:
    return f[["date"]]


@pytest.mark.parametrize(("edit", "match"), [
    (_nan_inside, "'chains' has a missing value (an empty cell, NaN or null) at 2018-07-01 "
                  "(data row 31)"),
    (_duplicate_date, "appears more than once"),
    (_text_column, "'brake_pads' is not numeric (dtype str); the first cell that is not a "
                   "number is '900 units' at 2016-01-01 (data row 1)"),
    (_no_dates, "as dates"),
    (_numbers_as_dates, "must hold dates"),
    (_dates_only, "at least one series column"),
])
def test_bad_data_is_one_line_and_exit_1(run, tmp_path: Path, edit, match: str) -> None:
    path = _write(tmp_path, "bad.csv", edit)
    for command in (["forecast", path, "--horizon", 2, *FAST], ["fit", path, "--lags", 2]):
        code, out, err = run(*command)
        assert code == 1
        assert out == ""
        assert err.count("\n") == 1 and err.startswith("fanfold: error: ")
        assert match in err and "Traceback" not in err


@pytest.mark.parametrize("content", [b"", b"\xff\xfe\x00garbage", b'date,a\n"2020-01-01,1\n'])
def test_unreadable_csv_exit_1(run, tmp_path: Path, content: bytes) -> None:
    path = tmp_path / "broken.csv"
    path.write_bytes(content)
    code, _, err = run("forecast", path, "--horizon", 2)
    assert code == 1 and err.startswith("fanfold: error: ") and err.count("\n") == 1


def test_missing_file_exit_1(run, tmp_path: Path) -> None:
    code, out, err = run("fit", tmp_path / "nope.csv")
    assert (code, out) == (1, "")
    assert err == f"fanfold: error: data file '{tmp_path / 'nope.csv'}' not found\n"


@pytest.mark.parametrize("args", [
    [],
    ["forecast", DEMO],  # --horizon missing
    ["forecast", DEMO, "--horizon", "0"],
    ["forecast", DEMO, "--horizon", "two"],
    ["forecast", DEMO, "--horizon", "2", "--draws", "-5"],
    ["forecast", DEMO, "--horizon", "2", "--quantiles", "0.5,1.5"],
    ["forecast", DEMO, "--horizon", "2", "--quantiles", ","],
    ["forecast", DEMO, "--horizon", "2", "--lags", "0"],
    ["forecast", DEMO, "--horizon", "2", "--tightness", "-1"],
    ["forecast", DEMO, "--horizon", "2", "--prior", "wishart"],
    ["forecast", DEMO, "--horizon", "2", "--transform", "sqrt"],
    ["forecast", DEMO, "--horizon", "2", "--transform", "tyres=log,tyres=diff"],
    ["forecast", DEMO, "--horizon", "2", "--transform", "pedals=log"],  # unknown series
    ["forecast", DEMO, "--horizon", "2", "--seed", "-1"],
    ["forecast", DEMO, "--horizon", "2", "--no-such-option"],
    ["fit", DEMO, "--level", "1"],
    ["fit", DEMO, "--prior", "independent", "--chains", "0"],
    ["fit", DEMO, "--prior", "independent", "--burn", "-1"],
    ["fit", DEMO, "--prior", "independent", "--cross", "0"],
    ["fit", DEMO, "--lags", "1", "--cross", "0.5"],  # cross needs --prior independent
    ["backtest", DEMO, "--prior", "independent", "--chains", "0"],
    ["predict", DEMO],
])
def test_bad_options_exit_2(run, args: list[object]) -> None:
    code, out, err = run(*args)
    assert code == 2 and out == ""
    assert err.count("\n") == 1 and err.startswith("fanfold: error: ")


def test_warnings_become_one_line_notes(run, monkeypatch: pytest.MonkeyPatch) -> None:
    fit = FanfoldVAR.fit

    def warn_then_fit(self, *args, **kwargs):
        warnings.warn("tightness stopped at its upper bound 5", ConvergenceWarning,
                      stacklevel=2)
        return fit(self, *args, **kwargs)

    monkeypatch.setattr(FanfoldVAR, "fit", warn_then_fit)
    code, out, err = run("fit", DEMO, "--lags", 1)
    assert code == 0 and "VAR(1)" in out
    assert err == "fanfold: warning: tightness stopped at its upper bound 5\n"


def test_huge_tightness_is_a_clean_error(run) -> None:
    code, _, err = run("fit", DEMO, "--lags", 1, "--tightness", "1e300")
    assert code in (1, 2) and err.startswith("fanfold: error: ")


# ---------------------------------------------------------------------- help
def test_help_lists_commands_and_version(run) -> None:
    code, out, _ = run("--help")
    assert code == 0 and "forecast" in out and "fit" in out
    code, out, _ = run("--version")
    assert code == 0 and out.startswith("fanfold ")


@pytest.mark.parametrize(("command", "defaults"), [
    ("forecast", ["default: 2000", "default: 0.05,0.5,0.95", "default: auto",
                  "default: minnesota", "default: none", "default: a fresh random seed",
                  "default: keep it", "default: False", "default: by data frequency"]),
    ("fit", ["default: 0.9", "default: auto", "default: minnesota", "default: none",
             "--cross X", "(default: 1.0)", "--chains N", "(default: 4)", "--burn N",
             "(default: 500)", "--keep N", "(default: 1000)", "--thin N", "--workers N"]),
])
def test_command_help_states_defaults(run, command: str, defaults: list[str]) -> None:
    code, out, _ = run(command, "--help")
    text = " ".join(out.split())  # undo argparse's line wrapping
    assert code == 0
    for default in defaults:
        assert default in text


def test_dummy_priors_hyperprior_and_explosive_screening_options(run) -> None:
    code, out, err = run("fit", DEMO, "--lags", 2, "--sum-coef", "0.7", "--initial", "0.5",
                         "--hyperprior", "--decay", "2", "--json")
    assert code == 0, err
    hp = json.loads(out)["hyperparameters"]
    assert hp["initial"] == 0.5 and hp["decay"] == 2.0 and hp["sum_coef"] == 0.7
    # 'auto': used only when it raises the marginal likelihood, and reported as chosen
    code, out, err = run("fit", DEMO, "--lags", 2, "--sum-coef", "auto", "--initial", "off",
                         "--no-hyperprior", "--json")
    assert code == 0, err
    fit = json.loads(out)
    assert "sum_coef" in fit["configuration"]["chosen"]
    assert fit["hyperparameters"]["initial"] is None
    radius = json.loads(out)["spectral_radius"]
    assert 0 < radius["q0.05"] <= radius["median"] <= radius["q0.95"]
    code, out, err = run("forecast", DEMO, "--horizon", 2, "--draws", 200, "--seed", 3,
                         "--lags", 1, "--reject-explosive", "--json")
    assert code == 0, err
    assert 0.0 <= json.loads(out)["rejected_explosive_share"] < 1.0
    code, _, err = run("fit", DEMO, "--sum-coef", "-1")
    assert code == 2 and "--sum-coef" in err


def test_blas_threads_option(run) -> None:
    a = run("--blas-threads", 0, "forecast", DEMO, "--horizon", 2, "--draws", 100,
            "--seed", 4, "--lags", 1, "--json")
    b = run("--blas-threads", 1, "forecast", DEMO, "--horizon", 2, "--draws", 100,
            "--seed", 4, "--lags", 1, "--json")
    assert a[0] == b[0] == 0
    # thread count changes speed, not the numbers (to rounding in BLAS sums)
    fa, fb = json.loads(a[1])["forecasts"], json.loads(b[1])["forecasts"]
    for name in fa:
        assert fa[name]["mean"] == pytest.approx(fb[name]["mean"], rel=1e-9)
    code, _, err = run("--blas-threads", -1, "forecast", DEMO, "--horizon", 2)
    assert code == 2 and "--blas-threads" in err


def test_cumulative_totals_are_sums_of_paths(run) -> None:
    args = ("forecast", DEMO, "--horizon", 3, "--draws", 400, "--seed", 8, "--lags", 1,
            "--json")
    per = json.loads(run(*args)[1])
    cum = json.loads(run(*args, "--cumulative")[1])
    assert cum["cumulative"] is True and per["cumulative"] is False
    for name, fc in per["forecasts"].items():
        # means add up exactly (same seed, same paths); quantiles of a sum do not
        assert cum["forecasts"][name]["mean"] == pytest.approx(np.cumsum(fc["mean"]).tolist())
        q95 = cum["forecasts"][name]["quantiles"]["0.95"]
        assert q95[2] < sum(fc["quantiles"]["0.95"])  # sum of 95% quantiles overshoots


def test_backtest_command_prints_scores_and_json(run) -> None:
    code, out, err = run("backtest", DEMO, "--origins", 4, "--horizon", 2, "--lags", 1,
                         "--draws", 100, "--period", 12)
    assert code == 0, err
    assert "relative to ols_var" in out and "seasonal_naive" in out
    code, out, err = run("backtest", DEMO, "--origins", 3, "--horizon", 2, "--lags", 1,
                         "--draws", 100, "--json")
    assert code == 0, err
    payload = json.loads(out)
    assert payload["origins"] == 3
    models = {r["model"] for r in payload["scores"]}
    assert models == {"model", "ols_var", "random_walk"}
    assert all(set(r) >= {"series", "horizon", "rmse", "crps", "coverage"}
               for r in payload["scores"])
    logs = {(r["model"], r["horizon"]) for r in payload["log_scores"]}
    assert logs == {(m, h) for m in ("model", "ols_var") for h in (1, 2)}
    assert {r["model"] for r in payload["energy_scores"]} == models
    assert {r["benchmark"] for r in payload["dm_tests"]} == {"ols_var", "random_walk"}
    assert all(r["pinball"] > 0 for r in payload["scores"])
    code, _, err = run("backtest", DEMO, "--origins", 200)
    assert code in (1, 2) and err.startswith("fanfold: error:")


def test_backtest_report_is_a_self_contained_page(run, tmp_path) -> None:
    report = tmp_path / "report.html"
    code, _, err = run("backtest", DEMO, "--origins", 5, "--horizon", 3, "--lags", 1,
                       "--draws", 100, "--period", 12, "--report", report)
    assert code == 0, err
    page = report.read_text()
    assert page.startswith("<!doctype html>") and page.rstrip().endswith("</html>")
    assert page.count("src='data:image/png;base64,") >= 5  # coverage, CRPS, PIT, fan charts
    assert "<table" in page and "review forecasts before committing" in page
    assert "http" not in page  # nothing to fetch


def test_backtest_text_shows_energy_score_and_why_pit_is_not_tested(run) -> None:
    code, out, err = run("backtest", DEMO, "--origins", 3, "--horizon", 2, "--lags", 1,
                         "--draws", 100)
    assert code == 0, err
    energy = out[out.index("energy score of all series jointly"):].splitlines()
    assert "lower is better" in energy[0]
    assert energy[1].split() == ["h", "model", "ols_var", "random_walk"]
    assert [row.split()[0] for row in energy[2:4]] == ["1", "2"]
    assert all(float(v) > 0 for row in energy[2:4] for v in row.split()[1:])
    assert "PIT calibration" in out
    assert "not tested: needs at least 10 scored origins per horizon; got 3" in out


def test_backtest_text_shows_the_pit_calibration_tests(run) -> None:
    code, out, err = run("backtest", DEMO, "--origins", 11, "--horizon", 2, "--lags", 1,
                         "--draws", 100, "--seed", 3)
    assert code == 0, err
    code, js, err = run("backtest", DEMO, "--origins", 11, "--horizon", 2, "--lags", 1,
                        "--draws", 100, "--seed", 3, "--json")
    assert code == 0, err
    tests = json.loads(js)["calibration"]
    pit = out[out.index("PIT calibration"):].splitlines()
    assert pit[1].split()[:5] == ["model", "h", "flagged", "of", "min"]
    rows = {(r.split()[0], int(r.split()[1])): r.split()[2:] for r in pit[2:6]}
    assert set(rows) == {(m, h) for m in ("model", "ols_var") for h in (1, 2)}
    for (model, h), (flagged, of, min_p, *_) in rows.items():
        ps = [t["p_value"] for t in tests if (t["model"], t["horizon"]) == (model, h)]
        assert int(of) == len(ps) == len(NAMES)
        assert int(flagged) == sum(p < 0.05 for p in ps)
        assert float(min_p) == pytest.approx(min(ps), rel=0.05)
    assert "energy score of all series jointly" in out


def test_backtest_report_explains_dm_tests_pinball_and_log_scores(run, tmp_path) -> None:
    report = tmp_path / "report.html"
    code, _, err = run("backtest", DEMO, "--origins", 4, "--horizon", 2, "--lags", 1,
                       "--draws", 100, "--report", report)
    assert code == 0, err
    page = report.read_text()
    sections = {}
    for chunk in page.split("<h2>")[1:]:
        heading, _, body = chunk.partition("</h2>")
        sections[heading] = body
    dm = next(b for h, b in sections.items() if h.startswith("Diebold-Mariano"))
    assert "negative statistic means the model" in dm and "p-value below 0.05" in dm
    assert "<table" in dm and "random_walk" in dm and "(p=" in dm
    pinball = next(b for h, b in sections.items() if h.startswith("Pinball loss"))
    assert "Lower is better" in pinball and "<table" in pinball
    log = next(b for h, b in sections.items() if h.startswith("Log score"))
    assert "Higher (less negative) is better" in log and "<table" in log
    energy = next(b for h, b in sections.items() if h.startswith("Energy score"))
    assert "Lower is better" in energy and "<table" in energy


def test_backtest_with_exponential_smoothing_benchmark(run) -> None:
    code, out, err = run("backtest", DEMO, "--origins", 3, "--horizon", 2, "--lags", 1,
                         "--draws", 100, "--period", 12, "--ets", "--json")
    assert code == 0, err
    ets = [r for r in json.loads(out)["scores"] if r["model"] == "ets"]
    assert len(ets) == 5 * 2 and all(r["crps"] > 0 for r in ets)


def test_backtest_ranks_candidate_settings(run) -> None:
    code, out, err = run("backtest", DEMO, "--origins", 4, "--horizon", 2, "--draws", 100,
                         "--candidate", "var1:lags=1", "--candidate",
                         "flat1:lags=1,prior=flat", "--json")
    assert code == 0, err
    ranking = json.loads(out)["ranking"]
    assert {r["candidate"] for r in ranking} == {"var1", "flat1"}
    crps = [r["relative_crps"] for r in ranking]
    assert crps == sorted(crps)
    code, _, err = run("backtest", DEMO, "--candidate", "bad:wheels=2")
    assert code == 2 and "unknown setting" in err


def test_forecast_lead_time_totals(capsys):
    # totals are per-path sums over steps 1..L: their mean is the sum of the step means
    code = main(["forecast", str(DEMO), "--horizon", "4", "--lead-time", "3", "--draws", "300",
                 "--seed", "2", "--json"])
    assert code == 0
    out = json.loads(capsys.readouterr().out)
    tyres = out["lead_time_totals"]["tyres"]
    assert tyres["mean"] == pytest.approx(sum(out["forecasts"]["tyres"]["mean"][:3]))
    assert main(["forecast", str(DEMO), "--horizon", "2", "--lead-time", "3"]) == 2
    assert "longer than the horizon" in capsys.readouterr().err


# ---------------------------------------------------------------------- independent prior
GIBBS = ["--prior", "independent", "--lags", 2, "--chains", 2, "--burn", 50, "--keep", 100]


def test_fit_independent_summary_shows_the_convergence(run) -> None:
    code, out, err = run("fit", DEMO, *GIBBS, "--cross", "0.5", "--seed", 3, "--summary")
    assert code == 0, err
    assert out.startswith("Fanfold fit: VAR(2), independent prior (Gibbs sampler: 2 chain(s) "
                          "x 100 draws after 50 burn-in sweeps, thin 1, seed 3)")
    assert "cross=0.5" in out and "no closed form with the independent prior" in out
    line = next(x for x in out.splitlines() if x.startswith("convergence:"))
    assert "worst R-hat" in line and "min ESS bulk" in line and "tail" in line
    assert line.endswith("NOT converged")  # 200 draws: too few for an ESS of 400
    assert "do not trust this fit: Bulk ESS below 400" in out
    assert "equation tyres" in out and "Sigma" in out
    code, short, _ = run("fit", DEMO, *GIBBS, "--seed", 3)
    assert code == 0 and "do not trust this fit" in short and "equation" not in short


def test_fit_independent_json_includes_diagnostics_and_the_seed_reproduces(run) -> None:
    code, out, err = run("fit", DEMO, *GIBBS, "--seed", 3, "--json")
    assert code == 0, err
    fit = json.loads(out)
    assert set(fit["diagnostics"]) == {"worst_r_hat", "min_ess_bulk", "min_ess_tail", "ok",
                                       "messages", "thresholds"}
    assert fit["diagnostics"]["ok"] is False and fit["log_marginal_likelihood"] is None
    assert run("fit", DEMO, *GIBBS, "--seed", 3, "--json")[1] == out
    other = json.loads(run("fit", DEMO, *GIBBS, "--seed", 4, "--json")[1])
    assert other["coefficients"] != fit["coefficients"]
    # the same draws with the chains split over two processes, to rounding
    code, split, err = run("fit", DEMO, *GIBBS, "--seed", 3, "--workers", 2, "--json")
    assert code == 0, err
    np.testing.assert_allclose([c["mean"] for c in json.loads(split)["coefficients"]],
                               [c["mean"] for c in fit["coefficients"]], rtol=1e-6)


def test_forecast_independent_fresh_seed_reproduces_chains_and_paths(run) -> None:
    args = ("forecast", DEMO, "--horizon", 2, "--draws", 100, *GIBBS, "--json")
    code, out, err = run(*args)
    assert code == 0, err
    drawn = json.loads(out)
    assert drawn["log_marginal_likelihood"] is None
    assert json.loads(run(*args, "--seed", drawn["seed"])[1]) == drawn


def test_gibbs_progress_is_drawn_on_a_terminal(run, monkeypatch) -> None:
    import service.cli.commands as cli

    code, _, err = run("fit", DEMO, *GIBBS)
    assert code == 0 and err == ""  # not a terminal: no bar
    monkeypatch.setattr(cli, "_interactive", lambda: True)
    code, _, err = run("fit", DEMO, *GIBBS)
    assert code == 0
    assert "\rfanfold: Gibbs sampler, 2 chain(s) [" in err
    assert err.endswith("] 300/300 chain sweeps\n")  # 2 chains x (50 + 100) sweeps


def test_a_forecast_from_unconverged_chains_says_so(run) -> None:
    """It printed forecasts with no word while `fit --summary` said NOT converged."""
    code, out, err = run("forecast", DEMO, "--horizon", "2", "--prior", "independent",
                         "--lags", "1", "--keep", "20", "--burn", "0", "--chains", "2",
                         "--seed", "5")
    assert code == 0, err
    line = next(x for x in out.splitlines() if x.startswith("convergence:"))
    assert "worst R-hat" in line and "min ESS bulk" in line and line.endswith("NOT converged")
    assert "do not trust this fit: Bulk ESS below 400" in out
    assert "warning: the sampler's chains have not converged" in err
    code, out, err = run("forecast", DEMO, "--horizon", "2", "--prior", "independent",
                         "--lags", "1", "--keep", "20", "--burn", "0", "--chains", "2",
                         "--seed", "5", "--json")
    payload = json.loads(out)
    assert payload["convergence"]["ok"] is False and payload["warnings"]
    code, out, _ = run("forecast", DEMO, "--horizon", "2", "--lags", "1")
    assert "convergence:" not in out  # exact sampler: nothing to say


def test_fit_with_common_volatility_and_outlier_periods(run):
    code, out, err = run("fit", DEMO, "--lags", "1", "--volatility", "common", "--chains", "2",
                         "--burn", "20", "--keep", "40", "--seed", "1", "--json")
    assert code == 0, err
    assert json.loads(out)["diagnostics"] is not None
    assert "stochastic volatility" in json.loads(out)["log_marginal_likelihood_note"]
    code, out, err = run("forecast", DEMO, "--horizon", "2", "--lags", "1", "--volatility",
                         "common", "--chains", "2", "--burn", "20", "--keep", "40", "--seed",
                         "1")
    assert code == 0, err  # the label named the independent prior
    assert ("log marginal likelihood: n/a (no closed form with stochastic volatility"
            in out)
    code, out, err = run("fit", DEMO, "--lags", "1", "--prior", "independent", "--outlier",
                         "2020-04-01:2", "--chains", "2", "--burn", "20", "--keep", "40",
                         "--seed", "1", "--json")
    assert code == 0, err
    assert json.loads(out)["outlier_scales"][0]["start"] == "2020-04-01"
    code, out, err = run("fit", DEMO, "--lags", "1", "--prior", "independent", "--outlier",
                         "2020-04-01:2", "--chains", "2", "--burn", "20", "--keep", "40",
                         "--seed", "1", "--summary")
    assert code == 0, err  # the estimated scales were never shown
    assert "outlier periods: shock scale" in out
    row = next(x for x in out.splitlines() if x.strip().startswith("2020-04-01"))
    assert float(row.split()[2]) > 0  # the median scale
    code, _, err = run("fit", DEMO, "--outlier", "April:2")
    assert code == 2 and "DATE:PERIODS" in err



def test_backtest_with_the_gibbs_sampler(run):
    # Gibbs-sampled settings are refitted (chains run again) at every origin
    code, out, err = run("backtest", DEMO, "--origins", "2", "--horizon", "2", "--lags", "1",
                         "--prior", "independent", "--cross", "0.5", "--chains", "2",
                         "--burn", "20", "--keep", "50", "--draws", "100", "--json")
    assert code == 0, err
    scores = json.loads(out)["scores"]
    assert {r["model"] for r in scores} >= {"model", "ols_var"}
    assert all(r["crps"] >= 0 for r in scores if r["crps"] is not None)


# ---------------------------------------------------------------------- input handling
def _one_cell(row: int, column: str, value: object):
    def edit(f: pd.DataFrame) -> pd.DataFrame:
        f[column] = f[column].astype(object)
        f.loc[row, column] = value
        return f

    return edit


def test_a_text_cell_is_named_with_its_date_and_data_row(run, tmp_path: Path) -> None:
    path = _write(tmp_path, "text.csv", _one_cell(29, "brake_pads", "4 units"))
    code, out, err = run("forecast", path, "--horizon", 2, *FAST)
    assert (code, out) == (1, "")
    assert ("series 'brake_pads' is not numeric (dtype str); the first cell that is not a "
            "number is '4 units' at 2018-06-01 (data row 30)") in err


def _day_first(f: pd.DataFrame) -> pd.DataFrame:
    f["date"] = pd.to_datetime(f["date"]).dt.strftime("%d/%m/%Y")  # 01/02/2016 = 1 February
    return f


def test_dayfirst_reads_day_first_dates(run, tmp_path: Path) -> None:
    path = _write(tmp_path, "dayfirst.csv", _day_first)
    code, _, err = run("forecast", path, "--horizon", 2, *FAST)
    assert code == 1 and "--dayfirst" in err and "'01/02/2016' as 2016-01-02" in err
    code, out, err = run("forecast", path, "--horizon", 2, *FAST, "--seed", 3, "--dayfirst",
                         "--json")
    assert code == 0, err
    assert out == run("forecast", DEMO, "--horizon", 2, *FAST, "--seed", 3, "--json")[1]


@pytest.mark.parametrize("command", [
    ["forecast", "--horizon", 2], ["fit"], ["backtest"], ["scenario", "--set", "tyres@1=5"],
    ["shocks"], ["reorder", "--lead-time", 2, "--stock", "tyres=5"],
])
def test_every_command_reading_a_data_file_takes_dayfirst(command) -> None:
    from service.cli.commands import build_parser

    name, *rest = command
    args = build_parser().parse_args([name, "data.csv", *map(str, rest), "--dayfirst"])
    assert args.dayfirst is True
    assert build_parser().parse_args([name, "data.csv", *map(str, rest)]).dayfirst is False


def test_incomplete_last_period_is_said_on_stderr(run, tmp_path: Path) -> None:
    path = _write(tmp_path, "ragged.csv", _one_cell(119, "tyres", np.nan))
    code, out, err = run("forecast", path, "--horizon", 3, *FAST, "--json")
    assert code == 0, err
    assert err == ("fanfold: note: the last period (2025-12-01) is incomplete: tyres is not "
                   "known yet; forecasting it plus 3 periods ahead\n")
    assert json.loads(out)["forecasts"]["tyres"]["dates"] == [
        "2025-12-01", "2026-01-01", "2026-02-01", "2026-03-01"]

    def two(f: pd.DataFrame) -> pd.DataFrame:
        f.loc[118:, "tyres"] = np.nan
        f.loc[119, "chains"] = np.nan
        return f

    code, _, err = run("forecast", _write(tmp_path, "two.csv", two), "--horizon", 1, *FAST)
    assert code == 0
    assert err.startswith("fanfold: note: the last 2 periods (2025-11-01 to 2025-12-01) are "
                          "incomplete: tyres and chains are not known yet; forecasting them "
                          "plus 1 period ahead\n")
    help_text = " ".join(run("forecast", "--help")[1].split())
    assert "When the last periods are incomplete" in help_text


def test_forecast_warns_about_negative_demand_on_stderr(run, tmp_path: Path) -> None:
    path = _write(tmp_path, "negative.csv", _one_cell(40, "chains", -35))
    code, out, err = run("forecast", path, "--horizon", 2, *FAST, "--seed", 1)
    assert code == 0 and out
    assert err == ("fanfold: warning: series 'chains' has 1 negative value(s), the first -35 "
                   "at 2019-05-01 (data row 41), though 99% of its values are >= 0; in demand "
                   "data a negative value is usually an error (e.g. returns booked as negative "
                   "sales): check the data. The model uses the values as given\n")
