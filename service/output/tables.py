"""Plain fixed-width text views of the dicts built by :mod:`service.serialization`.

Each ``format_*`` function takes such a dict and returns the text as one string, so the
text and the JSON output always come from the same numbers.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Sequence
from typing import Any

__all__ = ["decimals_for", "format_fit", "format_forecast", "render_table"]

_MISSING = "-"


def render_table(header: Sequence[str], rows: Iterable[Sequence[str]], indent: str = "  ") -> str:
    """Columns padded to their widest cell: the first left-aligned, the others right."""
    rows = [list(r) for r in rows]
    widths = [max(len(str(c)) for c in col) for col in zip(header, *rows, strict=True)]

    def line(cells: Sequence[str]) -> str:
        parts = [str(cells[0]).ljust(widths[0])]
        parts += [str(c).rjust(w) for c, w in zip(cells[1:], widths[1:], strict=True)]
        return (indent + "  ".join(parts)).rstrip()

    return "\n".join([line(header), *(line(r) for r in rows)])


def decimals_for(values: Iterable[float | None], digits: int = 4) -> int:
    """Decimals that show the largest absolute value with about ``digits`` significant
    digits (0 for values of 1000 and more, at most 6)."""
    finite = [abs(v) for v in values if v is not None and math.isfinite(v) and v != 0]
    if not finite:
        return 0
    return min(max(digits - 1 - math.floor(math.log10(max(finite))), 0), 6)


def _fixed(value: float | None, decimals: int) -> str:
    return _MISSING if value is None else f"{value:.{decimals}f}"


def _g(value: float | None, digits: int = 4) -> str:
    return _MISSING if value is None else f"{value:.{digits}g}"


def _hyper_line(hyper: dict[str, float | None]) -> str:
    if all(v is None for v in hyper.values()):
        return "hyperparameters: none (flat prior)"
    return "hyperparameters: " + "  ".join(
        f"{k}={'off' if v is None else _g(v)}" for k, v in hyper.items()
    )


def _log_ml_line(payload: dict[str, Any]) -> str:
    log_ml = payload["log_marginal_likelihood"]
    if log_ml is not None:
        shown = f"{log_ml:.2f}"
    else:
        shown = f"n/a ({payload.get('log_marginal_likelihood_note') or 'not available'})"
    return f"log marginal likelihood: {shown}"


def _configuration_lines(payload: dict[str, Any], *, reasons: bool) -> list[str]:
    """What the automatic configuration chose (and, with ``reasons``, why)."""
    config = payload.get("configuration")
    if not config:
        return []
    out = [f"configuration (auto: {', '.join(config['chosen'])}): {config['summary']}"]
    if reasons:
        out += [f"  - {r}" for r in config["reasons"]]
    return out


def _convergence_lines(diagnostics: dict[str, Any]) -> list[str]:
    """The Gibbs chains' convergence summary and, if they fail a threshold, why."""
    limits = diagnostics["thresholds"]
    out = [f"convergence: worst R-hat {_g(diagnostics['worst_r_hat'])} (at most "
           f"{_g(limits['rhat_max'])}), min ESS bulk {_g(diagnostics['min_ess_bulk'])}, "
           f"tail {_g(diagnostics['min_ess_tail'])} (at least {_g(limits['ess_min'])}): "
           + ("ok" if diagnostics["ok"] else "NOT converged")]
    out += [f"do not trust this fit: {message}" for message in diagnostics["messages"]]
    return out


def format_forecast(payload: dict[str, Any]) -> str:
    """One table per series: date, mean, median and the quantiles, step by step."""
    forecasts = payload["forecasts"]
    out = [
        f"Fanfold forecast: {len(forecasts)} series, {payload['horizon']} steps ahead, "
        f"VAR({payload['lags']}), {payload['draws']} draws, seed {payload['seed']} "
        f"(rerun with --seed {payload['seed']} to reproduce)",
        *_configuration_lines(payload, reasons=False),
        _hyper_line(payload["hyperparameters"]),
        _log_ml_line(payload),
        *(_convergence_lines(payload["convergence"]) if payload.get("convergence") else []),
    ]
    if payload.get("cumulative"):
        out.append("values are running totals from the first forecast step")
    share = payload.get("rejected_explosive_share")
    if share is not None:
        out.append(f"explosive parameter draws rejected: {100 * share:.1f}%")
    for name, fc in forecasts.items():
        columns = {"mean": fc["mean"], "median": fc["median"]}
        # the median is the 0.5 quantile: one column, not two with the same numbers
        columns.update({f"q{k}": v for k, v in fc["quantiles"].items() if k != "0.5"})
        dec = decimals_for(v for col in columns.values() for v in col)
        rows = [
            [date, *(_fixed(col[h], dec) for col in columns.values())]
            for h, date in enumerate(fc["dates"])
        ]
        out += ["", name, render_table(["date", *columns], rows)]
    totals = payload.get("lead_time_totals")
    if totals:
        first = next(iter(totals.values()))
        keys = list(first["quantiles"])
        dec = decimals_for(v for t in totals.values()
                           for v in [t["mean"], *t["quantiles"].values()])
        keys = [k for k in keys if k != "0.5"]  # shown as the median
        rows = [[name, _fixed(t["mean"], dec), _fixed(t["median"], dec),
                 *(_fixed(t["quantiles"][k], dec) for k in keys)] for name, t in totals.items()]
        out += ["", "total over the lead time (summed path by path):",
                render_table(["series", "mean", "median", *(f"q{k}" for k in keys)], rows)]
    return "\n".join(out)


def _lag_search(search: list[dict[str, Any]], chosen: int) -> list[str]:
    criterion = search[0]["criterion"]
    better = "higher" if criterion == "log_ml" else "lower"
    tuned = any(c["tightness"] is not None for c in search)
    rows = [
        [("* " if c["lags"] == chosen else "  ") + str(c["lags"]),
         _MISSING if c["score"] is None else f"{c['score']:.2f}",
         *([_g(c["tightness"])] if tuned else [])]
        for c in search
    ]
    header = ["lags", "score", *(["tightness"] if tuned else [])]
    return [f"lag search ({criterion} on a common sample, {better} is better; * chosen):",
            render_table(header, rows)]


def format_fit(payload: dict[str, Any], *, prior: str, level: float, summary: bool,
               sampler: str | None = None) -> str:
    """The fitted model; with ``summary`` also lag search, coefficients, Sigma and (Gibbs
    fits, ``payload["diagnostics"]``) the chains' convergence, whose warnings show even
    without ``summary``. ``sampler`` describes a Gibbs run, e.g. "4 chains x 1000 draws"."""
    span = payload["span"]
    out = [
        f"Fanfold fit: VAR({payload['lags']}), {prior} prior"
        + (f" (Gibbs sampler: {sampler})" if sampler else ""),
        f"estimation sample: {span['start']} to {span['end']} "
        f"({span['observations']} observations)",
        *_configuration_lines(payload, reasons=summary),
        _hyper_line(payload["hyperparameters"]),
        _log_ml_line(payload),
    ]
    diagnostics = payload.get("diagnostics")
    if not summary:
        if diagnostics is not None and not diagnostics["ok"]:
            out += [f"do not trust this fit: {m}" for m in diagnostics["messages"]]
        out.append("(add --summary for coefficients, the error covariance and the "
                   "convergence of the chains)" if sampler else
                   "(add --summary for coefficients and the error covariance)")
        return "\n".join(out)
    if diagnostics is not None:
        out += ["", *_convergence_lines(diagnostics)]
    if payload["lag_search"]:
        out += ["", *_lag_search(payload["lag_search"], payload["lags"])]
    out += ["", f"coefficients (posterior mean, sd and {100 * level:g}% credible interval):"]
    equations: dict[str, list[list[str]]] = {}
    for c in payload["coefficients"]:
        equations.setdefault(c["equation"], []).append(
            [c["regressor"], *(_g(c[k]) for k in ("mean", "sd", "lower", "upper"))]
        )
    for eq, rows in equations.items():
        out += ["", f"equation {eq}",
                render_table(["regressor", "mean", "sd", "lower", "upper"], rows)]
    names = payload["sigma"]["names"]
    rows = [[nm, *(_g(v) for v in row)] for nm, row in
            zip(names, payload["sigma"]["mean"], strict=True)]
    out += ["", "error covariance Sigma (posterior mean):", render_table(["", *names], rows)]
    if "spectral_radius" in payload:
        r = payload["spectral_radius"]
        seed = f", seed {payload['seed']}" if payload.get("seed") is not None else ""
        out += ["", f"spectral radius of the companion matrix ({r['draws']} draws{seed}): median "
                f"{_g(r['median'])}, 90% interval {_g(r['q0.05'])} to {_g(r['q0.95'])}, "
                f"share explosive (>= 1) {_g(r['share_explosive'])}"]
    if payload.get("outlier_scales"):
        rows = [[o["start"], str(o["periods"]), _g(o["median"]), _g(o["q0.05"]), _g(o["q0.95"])]
                for o in payload["outlier_scales"]]
        out += ["", "outlier periods: shock scale (1 = an ordinary period; posterior median "
                    "and 90% interval)",
                render_table(["first period", "periods", "median", "q0.05", "q0.95"], rows)]
    return "\n".join(out)


def format_backtest(scores: Any, coverage: float, log_scores: Any = None,
                    dm_tests: Any = None, *, energy_scores: Any = None,
                    calibration: Sequence[dict[str, Any]] | None = None,
                    origins: int | None = None, seed: int | None = None) -> str:
    """Scores averaged over series per model and horizon, then relative to the OLS VAR
    (or the random walk) per series, the Diebold-Mariano tests, the joint log scores and
    energy scores per horizon, and the PIT calibration tests (``calibration``: the
    records of ``BacktestResult.pit_tests()``, empty when not tested; ``origins``: how
    many origins were scored, for the note saying why)."""
    out = [f"Fanfold backtest: scores averaged over series (coverage of the central "
           f"{100 * coverage:g}% interval)" + _seed_note(seed)]
    cols = ["rmse", "mae", "crps", "pinball", "coverage"]
    by_h = scores.groupby(["model", "horizon"])[cols].mean()
    rows = [[m, str(h), *(_g(v) for v in vals)] for (m, h), vals in
            zip(by_h.index, by_h.to_numpy().tolist(), strict=True)]
    out += ["", render_table(["model", "h", *cols], rows)]
    models = set(scores["model"])
    base = "ols_var" if "ols_var" in models else "random_walk"
    if "model" in models and base in models:
        per = scores.groupby(["series", "model"])[["rmse", "crps"]].mean().unstack("model")
        rows = [[name, _g(per.loc[name, ("rmse", "model")] / per.loc[name, ("rmse", base)]),
                 _g(per.loc[name, ("crps", "model")] / per.loc[name, ("crps", base)])]
                for name in per.index]
        out += ["", f"relative to {base} (below 1: the model is better), mean over horizons:",
                render_table(["series", "rmse", "crps"], rows)]
    if dm_tests is not None and len(dm_tests):
        rows = []
        for bench, grp in dm_tests.groupby("benchmark"):
            better = int(((grp["statistic"] < 0) & (grp["p_value"] < 0.05)).sum())
            worse = int(((grp["statistic"] > 0) & (grp["p_value"] < 0.05)).sum())
            rows.append([str(bench), str(better), str(worse), str(len(grp))])
        out += ["", "Diebold-Mariano tests on CRPS (HLN correction, 5%), series x horizons "
                "where the model is significantly better / worse:",
                render_table(["benchmark", "better", "worse", "of"], rows)]
    if log_scores is not None and len(log_scores):
        wide = log_scores.pivot(index="horizon", columns="model", values="log_score")
        rows = [[str(h), *(_g(v) for v in wide.loc[h])] for h in wide.index]
        out += ["", "log predictive density of all series jointly, mean over origins "
                "(higher is better):", render_table(["h", *wide.columns], rows)]
    if energy_scores is not None and len(energy_scores):
        wide = energy_scores.pivot(index="horizon", columns="model", values="energy")
        rows = [[str(h), *(_g(v) for v in wide.loc[h])] for h in wide.index]
        out += ["", "energy score of all series jointly (each divided by the s.d. of its "
                "one-step changes), mean over origins (lower is better):",
                render_table(["h", *wide.columns], rows)]
    if calibration is not None:
        out += ["", *_calibration_lines(calibration, origins, int(scores["horizon"].max()))]
    return "\n".join(out)


#: fewer scored origins than this at a horizon and its PITs are not tested (as in
#: ``priors.backtest.BacktestResult.pit_tests``)
_PIT_MIN_ORIGINS = 10


def _calibration_lines(records: Sequence[dict[str, Any]], origins: int | None,
                       horizon: int) -> list[str]:
    """PIT calibration per model and horizon: how many series' tests reject at 5%,
    which, and the smallest p-value; or why nothing was tested."""
    title = ("PIT calibration (HAC test of the PITs' first two moments; a p-value below "
             "0.05 flags miscalibrated bands):")
    if not records:
        got = "" if origins is None else f"; got {origins}"
        return [title, f"  not tested: needs at least {_PIT_MIN_ORIGINS} scored origins "
                f"per horizon{got} (raise --origins)"]
    groups: dict[tuple[str, int], list[dict[str, Any]]] = {}
    for r in records:
        groups.setdefault((str(r["model"]), int(r["horizon"])), []).append(r)
    rows = []
    for (model, h), group in groups.items():
        flagged = [str(r["series"]) for r in group if r["p_value"] < 0.05]
        rows.append([model, str(h), str(len(flagged)), str(len(group)),
                     _g(min(r["p_value"] for r in group), 2), ", ".join(flagged) or _MISSING])
    out = [title, render_table(["model", "h", "flagged", "of", "min p", "flagged series"],
                               rows)]
    untested = sorted(set(range(1, horizon + 1)) - {h for _, h in groups})
    if untested:
        out.append(f"  horizons {untested[0]}-{untested[-1]} not tested (fewer than "
                   f"{_PIT_MIN_ORIGINS} scored origins)" if len(untested) > 1 else
                   f"  horizon {untested[0]} not tested (fewer than {_PIT_MIN_ORIGINS} "
                   "scored origins)")
    return out


def _seed_note(seed: int | None) -> str:
    return "" if seed is None else f", seed {seed} (rerun with --seed {seed} to reproduce)"


def format_ranking(table: Any, seed: int | None = None) -> str:
    """Candidate settings ranked by CRPS relative to the random walk."""
    rows = [[str(r.candidate), _g(r.relative_crps), _g(r.relative_rmse), _g(r.coverage)]
            for r in table.itertuples()]
    head = ("Fanfold backtest: settings ranked by CRPS relative to the random walk (lower "
            f"is better){_seed_note(seed)}")
    return head + "\n\n" + render_table(["candidate", "rel. crps", "rel. rmse", "coverage"],
                                        rows)
