"""``fanfold batch`` on its default in-process LocalCluster, and its input errors."""

from __future__ import annotations

import pandas as pd

from .data import long_table, with_bad_groups

FLAGS = ["--lags", "2", "--tightness", "0.2", "--sum-coef", "off", "--initial", "off",
         "--seasonal", "off", "--transform", "none", "--season-scale", "off"]


def test_the_default_local_cluster_writes_forecasts_and_every_groups_status(run, tmp_path):
    data, out = tmp_path / "demand.csv", tmp_path / "results.csv"
    with_bad_groups(long_table(4)).to_csv(data, index=False)
    code, stdout, stderr = run("batch", data, "--group-by", "warehouse,family", "--horizon",
                               2, "--draws", 30, "--out", out, "--local-workers", 1, *FLAGS)
    assert code == 0, stderr
    assert "on a local cluster (1)" in stderr and "7/7 groups (100%" in stderr
    assert "7 groups: 4 forecast, 3 failed (seed " in stdout
    assert "failed bad, constant: ConstantSeriesError" in stdout
    status = pd.read_csv(tmp_path / "results.status.csv", keep_default_na=False)
    assert len(status) == 7 and (status["status"] == "ok").sum() == 4
    assert set(status.loc[status["status"] == "failed", "error_type"]) == {
        "TooFewObservationsError", "ConstantSeriesError", "MissingValuesError"}
    table = pd.read_csv(out)
    assert len(table) == 2 * sum(len(set(g["series"])) for _, g in
                                 long_table(4).groupby(["warehouse", "family"]))
    assert table["date"].str.fullmatch(r"\d{4}-\d{2}-\d{2}").all()


def test_input_errors_name_the_column_and_nothing_starts(run, tmp_path):
    data = tmp_path / "demand.csv"
    long_table(2).rename(columns={"value": "units"}).to_csv(data, index=False)
    code, _, stderr = run("batch", data, "--group-by", "warehouse", "--horizon", 2,
                          "--out", tmp_path / "r.csv")
    assert code == 1 and "no column 'value'" in stderr and "'units'" in stderr
    code, _, stderr = run("batch", data, "--group-by", "warehouse", "--horizon", 2,
                          "--value-column", "units", "--out", tmp_path / "r.xlsx")
    assert code == 2 and "name it .parquet or .csv" in stderr
    code, _, stderr = run("batch", tmp_path / "none.csv", "--group-by", "warehouse",
                          "--horizon", 2, "--out", tmp_path / "r.csv")
    assert code == 1 and "not found" in stderr
