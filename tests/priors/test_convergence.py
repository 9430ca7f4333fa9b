"""Convergence diagnostics against known truths and against ArviZ itself.

Sources: Vehtari, Gelman, Simpson, Carpenter & Buerkner (2021), Bayesian Analysis 16(2)
667-718 (rank-normalised split R-hat, bulk and tail ESS, thresholds 1.01 and 400); the
integrated autocorrelation time of a Gaussian AR(1), tau = (1 + phi) / (1 - phi), so
ESS = N (1 - phi) / (1 + phi) and MCSE = sd / sqrt(ESS) (e.g. Geyer 1992, Statistical
Science 7(4), sec. 3); ArviZ's ``rhat``, ``ess`` and ``mcse`` as the reference
implementation (0.23 on Python 3.11, 1.x on 3.12; the same public calls on a
(chain, draw) array work in both).
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

from priors.convergence import TAIL_PROBS, chain_diagnostics
from priors.errors import SpecificationError

NUMBERS = ["mean", "sd", "mcse_mean", "ess_bulk", "ess_tail", "r_hat"]


def ar1(rng: np.random.Generator, phi: float, chains: int, draws: int,
        elements: int = 1) -> np.ndarray:
    """Stationary Gaussian AR(1) chains (chains, draws, elements), unit innovations."""
    e = rng.standard_normal((chains, draws, elements))
    x = np.empty_like(e)
    x[:, 0] = e[:, 0] / np.sqrt(1 - phi**2)
    for t in range(1, draws):
        x[:, t] = phi * x[:, t - 1] + e[:, t]
    return x


def arviz_reference(x: np.ndarray) -> dict[str, float]:
    """ArviZ on one element's (chain, draw) array: the same public calls in 0.x and 1.x."""
    import arviz

    def scalar(value: object) -> float:
        # ArviZ 0.x returns a one-element array instead of a scalar from some estimators
        # when numba is installed (its compiled path)
        arr = np.asarray(value, dtype=np.float64)
        assert arr.size == 1
        return float(arr.reshape(()))

    return {
        "r_hat": scalar(arviz.rhat(x, method="rank")),
        "ess_bulk": scalar(arviz.ess(x, method="bulk")),
        "ess_tail": scalar(arviz.ess(x, method="tail", prob=TAIL_PROBS)),
        "mcse_mean": scalar(arviz.mcse(x, method="mean")),
        "mean": float(x.mean()),
        "sd": float(x.std(ddof=1)),
    }


def awkward_elements(rng: np.random.Generator, draws: int) -> np.ndarray:
    """(4, draws, 8): i.i.d., AR(0.9), AR(0.99), shifted chains, heavy tails, rounded
    (many ties), antithetic AR(-0.7), and +-1 values (the folded draws are constant)."""
    columns = [
        rng.standard_normal((4, draws)),
        ar1(rng, 0.9, 4, draws)[..., 0],
        ar1(rng, 0.99, 4, draws)[..., 0],
        rng.standard_normal((4, draws)) + np.arange(4)[:, None],
        rng.standard_t(2, (4, draws)),
        np.round(rng.standard_normal((4, draws))),
        ar1(rng, -0.7, 4, draws)[..., 0],
        np.sign(rng.standard_normal((4, draws))),
    ]
    return np.stack(columns, axis=2)


def test_iid_normal_chains_pass():
    rng = np.random.default_rng(20261201)
    report = chain_diagnostics({"B": rng.standard_normal((4, 1000, 3, 2))})
    t = report.table
    assert len(t) == 6
    assert np.all(np.abs(t["r_hat"] - 1) < 0.01)
    np.testing.assert_allclose(t["ess_bulk"], 4000, rtol=0.15)
    assert report.ok and report.messages == []
    assert report.worst_r_hat == t["r_hat"].max()
    assert report.min_ess_bulk == t["ess_bulk"].min()
    assert report.min_ess_tail == t["ess_tail"].min()


def test_ar1_bulk_ess_and_mcse_match_the_autocorrelation_time():
    # 10000 draws a chain: the ESS estimate's relative sd is then about 6%
    phi, chains, draws = 0.9, 4, 10_000
    x = ar1(np.random.default_rng(7), phi, chains, draws, elements=3)
    t = chain_diagnostics({"x": x}).table
    N = chains * draws
    ess_theory = N * (1 - phi) / (1 + phi)  # about 2105
    np.testing.assert_allclose(t["ess_bulk"], ess_theory, rtol=0.25)
    np.testing.assert_allclose(t["mcse_mean"], t["sd"] / np.sqrt(t["ess_bulk"]), rtol=0.1)
    sd_theory = 1 / np.sqrt(1 - phi**2)
    np.testing.assert_allclose(t["mcse_mean"], sd_theory / np.sqrt(ess_theory), rtol=0.25)


def test_shifted_chains_fail_on_r_hat():
    rng = np.random.default_rng(3)
    x = rng.standard_normal((4, 500, 2))
    x[3, :, 1] += 2.0  # one chain stuck in another mode
    report = chain_diagnostics({"B": x}, labels={"B": ["const -> tyres",
                                                       "tyres[t-1] -> chains"]})
    r = report.table.set_index("element")["r_hat"]
    assert r["tyres[t-1] -> chains"] > 1.1
    assert abs(r["const -> tyres"] - 1) < 0.01
    assert not report.ok
    assert report.worst_r_hat == r.max()
    assert report.messages[0].startswith("R-hat above 1.01 for 1 of 2 parameters (worst ")
    assert "at tyres[t-1] -> chains)" in report.messages[0]
    assert report.summary()["ok"] is False


def test_slow_mixing_fails_on_ess():
    x = ar1(np.random.default_rng(5), 0.99, 4, 400)
    report = chain_diagnostics({"rho": x[..., 0]}, ess_min=400)
    assert not report.ok
    assert report.min_ess_bulk < 400
    assert any(m.startswith("Bulk ESS below 400 for 1 of 1 parameters (lowest ")
               and "at rho)" in m for m in report.messages)


@pytest.mark.parametrize("draws", [300, 301])  # odd: split chains drop the middle draw
def test_one_element_matches_arviz(draws):
    x = awkward_elements(np.random.default_rng(11), draws).reshape(4, draws, 2, 4)
    table = chain_diagnostics({"B": x}).table.set_index("element")
    for i, j in [(0, 1), (1, 2), (1, 3)]:
        expected = arviz_reference(x[:, :, i, j])
        got = table.loc[f"B[{i},{j}]", NUMBERS]
        for name in NUMBERS:
            assert got[name] == pytest.approx(expected[name], rel=1e-9), (i, j, name)


def test_table_follows_permuted_elements():
    rng = np.random.default_rng(12)
    x = awkward_elements(rng, 200)
    names = [f"e{i}" for i in range(x.shape[2])]
    perm = rng.permutation(x.shape[2])
    straight = chain_diagnostics({"v": x}, labels={"v": names}).table
    shuffled = chain_diagnostics({"v": x[:, :, perm]},
                                 labels={"v": [names[p] for p in perm]}).table
    assert list(shuffled["element"]) == [names[p] for p in perm]
    pd.testing.assert_frame_equal(shuffled.set_index("element").loc[names],
                                  straight.set_index("element"), rtol=1e-12)


def test_arviz_backend_gives_the_same_table():
    rng = np.random.default_rng(13)
    x = awkward_elements(rng, 101)
    x[..., 0] = 0.0  # constant
    x[..., 1] = np.arange(4)[:, None]  # each chain stuck at its own value
    variables = {"B": x.reshape(4, 101, 2, 4), "s": rng.standard_normal((4, 101))}
    ours = chain_diagnostics(variables).table
    theirs = chain_diagnostics(variables, backend="arviz").table
    # chains stuck at different values: the within-chain variance is zero up to rounding,
    # so R-hat is rounding noise divided by rounding noise (ArviZ with and without numba
    # gives 6.8e7 or 3.2e16 here); both must only say "not converged, by far"
    stuck = 1
    assert ours["r_hat"].iloc[stuck] > 1e6 and theirs["r_hat"].iloc[stuck] > 1e6
    ours.loc[stuck, "r_hat"] = theirs.loc[stuck, "r_hat"] = np.inf
    pd.testing.assert_frame_equal(ours, theirs, rtol=1e-9)


def test_constant_element_is_nan_and_does_not_fail():
    x = np.random.default_rng(14).standard_normal((4, 500, 3))
    x[..., 1] = 0.0  # a coefficient restricted to zero
    report = chain_diagnostics({"B": x})
    row = report.table.iloc[1]
    assert np.isnan(row["r_hat"])
    assert row["ess_bulk"] == row["ess_tail"] == 2000  # ArviZ: all draws
    assert row["mcse_mean"] == 0 and row["sd"] == 0
    assert report.ok
    assert report.worst_r_hat == report.table["r_hat"].max()  # NaN skipped
    assert np.isfinite(report.worst_r_hat)


def test_labels_and_table_layout():
    rng = np.random.default_rng(15)
    report = chain_diagnostics({"B": rng.standard_normal((2, 20, 2, 2)),
                                "s": rng.standard_normal((2, 20))})
    t = report.table
    assert list(t.columns) == ["variable", "element", *NUMBERS]
    assert list(t["element"]) == ["B[0,0]", "B[0,1]", "B[1,0]", "B[1,1]", "s"]
    assert list(t["variable"]) == ["B"] * 4 + ["s"]
    labelled = chain_diagnostics({"B": rng.standard_normal((2, 20, 1, 2))},
                                 labels={"B": ["const -> tyres", "const -> chains"]})
    assert list(labelled.table["element"]) == ["const -> tyres", "const -> chains"]


def test_summary_is_json_ready():
    x = np.zeros((4, 100, 2))  # every element constant: all R-hat NaN
    summary = chain_diagnostics({"B": x}, rhat_max=1.05, ess_min=100).summary()
    text = json.dumps(summary, allow_nan=False)
    assert json.loads(text) == {
        "worst_r_hat": None, "min_ess_bulk": 400.0, "min_ess_tail": 400.0, "ok": True,
        "messages": [], "thresholds": {"rhat_max": 1.05, "ess_min": 100.0},
    }


GOOD = np.zeros((4, 10, 2)) + np.arange(10)[None, :, None]


@pytest.mark.parametrize(("variables", "kwargs", "match"), [
    ({}, {}, "non-empty mapping"),
    ({"B": np.zeros((1, 100, 2))}, {}, "at least 2 chains of at least 4 draws"),
    ({"B": np.zeros((4, 3, 2))}, {}, "at least 2 chains of at least 4 draws"),
    ({"B": np.zeros(10)}, {}, "shape \\(chains, draws, ...\\)"),
    ({"B": np.zeros((4, 10, 0))}, {}, "no elements"),
    ({"B": np.where(GOOD == 3, np.nan, GOOD)}, {}, "NaN or inf"),
    ({"B": np.where(GOOD == 3, np.inf, GOOD)}, {}, "NaN or inf"),
    ({"B": GOOD.astype(str)}, {}, "real numbers"),
    ({"B": GOOD + 0j}, {}, "real numbers"),
    ({"B": GOOD, "S": np.zeros((3, 10))}, {}, "same \\(chains, draws\\)"),
    ({"B": GOOD}, {"labels": {"B": ["a"]}}, "2 elements \\(2,\\) but 1 labels"),
    ({"B": GOOD}, {"labels": {"C": ["a", "b"]}}, "unknown variables \\['C'\\]"),
    ({"B": GOOD}, {"rhat_max": 0.99}, "rhat_max"),
    ({"B": GOOD}, {"rhat_max": "high"}, "rhat_max"),
    ({"B": GOOD}, {"ess_min": -1}, "ess_min"),
    ({"B": GOOD}, {"backend": "stan"}, "backend"),
])
def test_bad_input(variables, kwargs, match):
    with pytest.raises(SpecificationError, match=match):
        chain_diagnostics(variables, **kwargs)
