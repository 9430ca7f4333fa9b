"""Automatic configuration: what to model, chosen per data set by marginal likelihood.

Each setting the user leaves at ``"auto"`` is chosen here; explicit settings are kept:

- **transform** of each series: its levels, or ``log`` (strictly positive series) /
  ``log1p`` (non-negative series with zeros);
- **seasonal dummies** for the data's calendar (months, quarters, weekdays), whose
  coefficients get a proper prior with a tuned scale (``season_scale``);
- **lag order**, 1..max_lags;
- the **sum-of-coefficients** and **dummy-initial-observation** priors, their weights
  tuned under the Gamma hyperpriors of Giannone, Lenza & Primiceri (2015).

Every candidate is scored by the log density of the data *in the user's units* on one
common sample (the first ``max_lags`` rows are presample for all): the closed-form log
marginal likelihood of the model-unit data plus the log-Jacobian of the transform,
``-sum log y`` for log and ``-sum log(1 + y)`` for log1p, so that levels and logs compare.
Hyperparameters are tuned per candidate (empirical Bayes), which favours candidates with
more tuned hyperparameters a little; a richer candidate must therefore gain at least
:data:`OCCAM_NATS` per extra tuned hyperparameter (our choice, in the spirit of AIC's
penalty of one nat per parameter).

Why a tuned scale for the seasonal dummies: under a nearly flat prior (the constant's
``det_scale``) each dummy costs about log(det_scale) nats per equation whatever the data
say (Lindley's paradox), so the marginal likelihood would never choose seasonality.

The search is staged, not exhaustive (each stage fixes what the one before chose):

1. for each structure (seasonal or not x all levels or all log-type), tune the season
   scale at lag 1, then choose the lag order with the fast tightness profile;
2. flip each series' transform alone, keeping flips that raise the score;
3. tune the tightness, season scale and dummy weights jointly, and keep the dummies if
   they pay (a weight at its upper bound switches that prior off).

Posterior model probabilities of the structures (equal prior odds) are reported; they
are nearly always degenerate (one structure gets more than 0.99), which is why the model
uses the best structure rather than averaging across them.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field, replace

import numpy as np
import pandas as pd

from ._types import FloatArray
from .cancellation import checkpoint
from .conjugate import posterior
from .data import Deterministics, SeriesData, _as_frame, _numeric, build_design, load_series
from .errors import (
    ExplosiveDataError,
    SpecificationError,
    TooFewObservationsError,
)
from .shrinkage import MinnesotaHyper, ar_residual_variances, minnesota_prior
from .transforms import default_prior_mean
from .tuning import BOUNDS, tune_hyperparameters

__all__ = [
    "OCCAM_NATS",
    "AutoRequest",
    "Candidate",
    "Configuration",
    "choose_configuration",
    "default_max_lags",
    "log_jacobian",
    "log_type_transform",
    "resolve_prior_mean",
]

#: nats a candidate must gain per extra tuned hyperparameter to be preferred
OCCAM_NATS = 1.0
#: start of the season scale's search (prior s.d. of a seasonal effect, in residual s.d.
#: per unit of the dummy's root mean square)
SEASON_SCALE_START = 1.0
_MAX_LAGS = {"monthly": 13, "quarterly": 5, "weekly": 8, "daily": 14}


def default_max_lags(kind: str) -> int:
    """Largest lag order searched by ``lags='auto'``: a year and one period for monthly
    and quarterly data, 8 weeks, two weeks of days, else 8 (common practice)."""
    return _MAX_LAGS.get(kind, 8)


def log_type_transform(column: FloatArray) -> str:
    """The log-type transform a series admits: "log" when every value is > 0, "log1p"
    when every value is >= 0 with some zeros, else "none"."""
    finite = column[np.isfinite(column)]
    if finite.size and np.all(finite > 0):
        return "log"
    if finite.size and np.all(finite >= 0):
        return "log1p"
    return "none"


def log_jacobian(levels: FloatArray, transforms: Sequence[str]) -> float:
    """log |d model units / d user units| summed over the (T, n) ``levels`` rows: the
    term that turns the density of transformed data into the density of the data.

    log and logdiff: -sum log y; log1p: -sum log(1 + y); none and diff: 0 (a difference
    given the previous value is a shift).
    """
    total = 0.0
    for j, t in enumerate(transforms):
        if t in ("log", "logdiff"):
            total -= float(np.sum(np.log(levels[:, j])))
        elif t == "log1p":
            total -= float(np.sum(np.log1p(levels[:, j])))
    return total


@dataclass(frozen=True)
class Candidate:
    """One scored configuration: its description, score (log density of the data in the
    user's units on the common sample) and the number of tuned hyperparameters."""

    label: str
    score: float
    tuned: int


@dataclass(frozen=True)
class Configuration:
    """The chosen configuration and why.

    seasonal : seasonal dummies or not.  transforms : one per series.  lags : order.
    hyper : hyperparameters tuned on the common sample (the model tunes ``tune`` again on
    its full sample, starting there).  tune : the hyperparameters left to tune.
    reasons : one plain sentence per choice.  candidates : every scored candidate.
    weights : posterior probabilities of the structures (equal prior odds).
    chosen : which settings were chosen here (the rest were given).
    lag_table : (lags, score, tightness) of each order tried for the chosen structure.
    """

    seasonal: bool
    transforms: tuple[str, ...]
    lags: int
    hyper: MinnesotaHyper
    tune: tuple[str, ...]
    reasons: tuple[str, ...]
    candidates: tuple[Candidate, ...] = ()
    weights: Mapping[str, float] = field(default_factory=dict)
    chosen: tuple[str, ...] = ()
    lag_table: tuple[tuple[int, float, float], ...] = ()

    def describe(self, names: Sequence[str]) -> str:
        """One line: what the configuration is."""
        by = {}
        for name, t in zip(names, self.transforms, strict=True):
            by.setdefault("levels" if t == "none" else t, []).append(name)
        tr = "; ".join(f"{t}: {', '.join(v)}" for t, v in by.items())
        parts = [f"lags {self.lags}",
                 "seasonal dummies" if self.seasonal else "no seasonal dummies", tr]
        h = self.hyper
        if h.sum_coef is not None:
            parts.append(f"sum-of-coefficients {h.sum_coef:.3g}")
        if h.initial is not None:
            parts.append(f"initial observation {h.initial:.3g}")
        return ", ".join(parts)

    def to_dict(self, names: Sequence[str]) -> dict[str, object]:
        """JSON-ready: the chosen settings, the reasons and the structures' weights
        (:meth:`from_dict` reads it back, with the hyperparameters given apart)."""
        return {
            "chosen": list(self.chosen),
            "seasonal": self.seasonal,
            "transforms": dict(zip(names, self.transforms, strict=True)),
            "lags": self.lags,
            "summary": self.describe(names),
            "reasons": list(self.reasons),
            "weights": {k: round(float(v), 6) for k, v in self.weights.items()},
        }

    @classmethod
    def from_dict(cls, payload: Mapping[str, object], hyper: MinnesotaHyper | None
                  ) -> Configuration:
        """The report of :meth:`to_dict` again (for a stored model); nothing left to tune."""
        transforms = payload.get("transforms") or {}
        weights = payload.get("weights") or {}
        assert isinstance(transforms, Mapping) and isinstance(weights, Mapping)
        return cls(seasonal=bool(payload.get("seasonal")),
                   transforms=tuple(str(t) for t in transforms.values()),
                   lags=int(payload.get("lags", 1)),  # type: ignore[call-overload]
                   hyper=hyper if hyper is not None else MinnesotaHyper(), tune=(),
                   reasons=tuple(str(r) for r in payload.get("reasons", ())),  # type: ignore[attr-defined]
                   weights={str(k): float(v) for k, v in weights.items()},
                   chosen=tuple(str(c) for c in payload.get("chosen", ())))  # type: ignore[attr-defined]


@dataclass(frozen=True)
class AutoRequest:
    """What to choose and what is given (``"auto"`` marks a choice).

    transforms : "auto" or the user's transforms (as :func:`load_series` takes them).
    seasonal : "auto" or bool.  lags : "auto" or int.  max_lags : largest order (None:
    :func:`default_max_lags` of the data's calendar).
    tightness, sum_coef, initial, season_scale : "auto", a number, or None (dummies off).
    """

    transforms: object = "auto"
    seasonal: bool | str = "auto"
    lags: int | str = "auto"
    max_lags: int | None = None
    tightness: float | str = "auto"
    sum_coef: float | str | None = "auto"
    initial: float | str | None = "auto"
    season_scale: float | str | None = "auto"
    hyperprior: bool = True
    decay: float = 1.0
    det_scale: float = 1000.0
    constant: bool = True
    trend: bool = False
    prior_mean: Sequence[float] | Mapping[str, float] | None = None
    dummies_allowed: bool = True  # False for the flat prior


class _Scorer:
    """Scores candidates on one common sample, caching the loaded series per transform."""

    def __init__(self, data: pd.DataFrame | FloatArray, request: AutoRequest, *,
                 exog: object, names: Sequence[str] | None, period: int | None,
                 loaded: SeriesData | None = None) -> None:
        self.data, self.request = data, request
        self.exog, self.names, self.period = exog, names, period
        # series per transform; ``loaded`` is already validated, so it is not read again
        self._series: dict[tuple[str, ...], SeriesData] = (
            {} if loaded is None else {loaded.transforms: loaded})
        self.start = 0

    def series(self, transforms: tuple[str, ...]) -> SeriesData:
        if transforms not in self._series:
            self._series[transforms] = load_series(self.data, transforms=list(transforms),
                                                   exog=self.exog, names=self.names,
                                                   period=self.period)
        return self._series[transforms]

    def det(self, seasonal: bool) -> Deterministics:
        return Deterministics(self.request.constant, self.request.trend, seasonal)

    def prior_mean(self, series: SeriesData) -> FloatArray:
        return resolve_prior_mean(self.request.prior_mean, series)

    def score(self, transforms: tuple[str, ...], seasonal: bool, lags: int,
              hyper: MinnesotaHyper, tune: tuple[str, ...],
              prior_mean: FloatArray | None = None) -> tuple[float, MinnesotaHyper]:
        """(log density of the data in user units, tuned hyperparameters)."""
        checkpoint()  # one candidate fit between checks
        series = self.series(transforms)
        design = build_design(series, lags, self.det(seasonal), start=self.start)
        prior_mean = self.prior_mean(series) if prior_mean is None else prior_mean
        psi = ar_residual_variances(design)
        if tune:  # a weight at a bound is judged later, so no warning here
            res = tune_hyperparameters(design, hyper, prior_mean, tune=tune,
                                       hyperprior=self.request.hyperprior, psi=psi, warn=False)
            lml, hyper = res.log_ml, res.hyper
        else:
            lml = posterior(design, minnesota_prior(design, hyper, prior_mean, psi)).log_ml
        assert lml is not None
        drop = series.levels.shape[0] - series.nobs
        rows = series.levels[drop + self.start:]
        return float(lml) + log_jacobian(rows, transforms), hyper


def resolve_prior_mean(given: Sequence[float] | Mapping[str, float] | None,
                       series: SeriesData) -> FloatArray:
    """Own-lag prior means for ``series``: by transform when ``given`` is None (random walk
    for levels and logs, white noise for differences), else the user's values: a mapping
    name -> mean of the first own lag (others by transform), one value per series (n,), or
    one row per lag (L, n)."""
    base = default_prior_mean(series.transforms)
    if given is None:
        return base
    if isinstance(given, Mapping):
        unknown = sorted(set(given) - set(series.names))
        if unknown:
            raise SpecificationError(f"prior_mean given for unknown series {unknown[0]!r}")
        return np.array([float(given.get(nm, b)) for nm, b in zip(series.names, base,
                                                                  strict=True)])
    pm = np.asarray(given, dtype=np.float64)
    if pm.shape != (series.n,) and not (pm.ndim == 2 and pm.shape[1] == series.n):
        raise SpecificationError(f"prior_mean needs one value per series ({series.n}), "
                                 f"or one row per lag (lags, {series.n})")
    return pm


def _auto(v: object) -> bool:
    return isinstance(v, str) and v == "auto"


def _base_hyper(req: AutoRequest, seasonal: bool) -> tuple[MinnesotaHyper, tuple[str, ...]]:
    """Hyperparameters with the given values and start values for the tuned ones, and
    the names tuned in the structure stages (no dummies yet)."""
    tune = []
    tight = 0.2 if _auto(req.tightness) else float(req.tightness)  # type: ignore[arg-type]
    if _auto(req.tightness):
        tune.append("tightness")
    scale = None
    if seasonal:
        if _auto(req.season_scale):
            scale = SEASON_SCALE_START
            tune.append("season_scale")
        elif req.season_scale is not None:
            scale = float(req.season_scale)  # type: ignore[arg-type]
    fixed = {}
    for name in ("sum_coef", "initial"):
        v = getattr(req, name)
        fixed[name] = None if (v is None or _auto(v)) else float(v)
    return (MinnesotaHyper(tightness=tight, decay=req.decay, det_scale=req.det_scale,
                           season_scale=scale, **fixed), tuple(tune))


def _softmax(scores: Mapping[str, float]) -> dict[str, float]:
    top = max(scores.values())
    w = {k: math.exp(v - top) for k, v in scores.items()}
    total = sum(w.values())
    return {k: v / total for k, v in w.items()}


def _feasible_max(scorer: _Scorer, transforms: tuple[str, ...], seasonal: bool,
                  want: int) -> int:
    series = scorer.series(transforms)
    for p in range(want, 0, -1):
        try:
            build_design(series, p, scorer.det(seasonal), start=p)  # enough rows for p?
            return p
        except TooFewObservationsError:
            continue
    return 0


def _nothing_to_choose(req: AutoRequest, transforms: tuple[str, ...]) -> Configuration | None:
    """The configuration when every structural setting is given (only the tightness, and
    given dummy weights, may be left to tune): no candidates to score."""
    if (_auto(req.transforms) or _auto(req.seasonal) or _auto(req.lags)
            or (req.dummies_allowed and (_auto(req.sum_coef) or _auto(req.initial)))):
        return None
    seasonal = bool(req.seasonal)
    hyper, tune = _base_hyper(req, seasonal)
    if not req.dummies_allowed:
        hyper = replace(hyper, sum_coef=None, initial=None)
    return Configuration(seasonal, transforms, int(req.lags),  # type: ignore[arg-type]
                         hyper, tune, ())


def choose_configuration(
    data: pd.DataFrame | FloatArray,
    request: AutoRequest,
    *,
    exog: object = None,
    names: Sequence[str] | None = None,
    period: int | None = None,
) -> Configuration:
    """Choose the settings ``request`` leaves at "auto" for the (T, n) ``data``.

    ``data``, ``exog``, ``names`` and ``period`` are as :func:`priors.data.load_series`
    takes them (complete rows only). Raises the data errors of ``load_series`` and
    :class:`TooFewObservationsError` when not even one lag fits.
    """
    req = request
    auto_tr = _auto(req.transforms)
    given = None if auto_tr else req.transforms
    explodes = False
    try:
        plain = load_series(data, transforms=given, exog=exog, names=names, period=period)
    except ExplosiveDataError:
        if not auto_tr:
            raise
        # levels grow by orders of magnitude: only the log-type transforms are candidates
        raw = _numeric(_as_frame(data, names), "series")
        logs_only = [log_type_transform(raw[:, j]) for j in range(raw.shape[1])]
        plain = load_series(data, transforms=logs_only, exog=exog, names=names, period=period)
        explodes = True
    fixed = _nothing_to_choose(req, plain.transforms)
    if fixed is not None:
        return fixed
    scorer = _Scorer(data, req, exog=exog, names=names, period=period, loaded=plain)
    levels_tr = plain.transforms
    names_ = plain.names
    chosen: list[str] = []

    # ---- candidate structures
    tr_options: list[tuple[str, ...]] = [levels_tr]
    if auto_tr and not explodes:
        logs = tuple(log_type_transform(plain.levels[:, j]) for j in range(plain.n))
        if logs != levels_tr:
            tr_options.append(logs)
        chosen.append("transforms")
    season_options = [bool(req.seasonal)] if not _auto(req.seasonal) else [False]
    if _auto(req.seasonal):
        chosen.append("seasonal")
        try:
            plain.calendar.season_labels()
            season_options.append(True)
        except SpecificationError:  # no seasons in this calendar (plain rows, other kinds)
            pass

    # one common sample for every candidate
    if not _auto(req.lags):
        want = int(req.lags)  # type: ignore[arg-type]
    else:
        want = req.max_lags or default_max_lags(plain.calendar.kind)
    p_max = min(_feasible_max(scorer, tr, s, want) for tr in tr_options for s in season_options)
    if p_max < 1 and True in season_options and len(season_options) > 1:
        season_options = [False]  # too short for seasonal dummies
        p_max = min(_feasible_max(scorer, tr, False, want) for tr in tr_options)
    if p_max < 1:
        build_design(plain, 1, scorer.det(season_options[0]))  # raises the informative error
    if not _auto(req.lags) and p_max < int(req.lags):  # type: ignore[arg-type]
        build_design(plain, int(req.lags), scorer.det(season_options[0]))  # raises
    scorer.start = p_max
    lag_options = list(range(1, p_max + 1)) if _auto(req.lags) else [int(req.lags)]  # type: ignore[arg-type]
    if _auto(req.lags):
        chosen.append("lags")

    # ---- stage 1: structures, each with its season scale and lag order
    best: dict[str, tuple[float, tuple[str, ...], bool, int, MinnesotaHyper, list]] = {}
    candidates: list[Candidate] = []
    for tr in tr_options:
        for seasonal in season_options:
            base, tune = _base_hyper(req, seasonal)
            if "season_scale" in tune:  # tune the scale once, at the smallest order
                _, base = scorer.score(tr, seasonal, lag_options[0], base, tune)
            lag_tune = tuple(t for t in tune if t != "season_scale")
            table = []
            for p in lag_options:
                s, h = scorer.score(tr, seasonal, p, base, lag_tune)
                table.append((s, p, h))
            s, p, h = max(table, key=lambda r: r[0])
            label = ("log-type" if explodes or tr != levels_tr else "levels") + (
                " + seasonal" if seasonal else "")
            candidates.append(Candidate(f"{label}, lags {p}", s, len(tune)))
            best[label] = (s, tr, seasonal, p, h, table)
    weights = _softmax({k: v[0] for k, v in best.items()})

    # a seasonal structure with its scale tuned has one more tuned hyperparameter
    extra = OCCAM_NATS if "season_scale" in _base_hyper(req, True)[1] else 0.0
    pick = max(best, key=lambda k: best[k][0] - extra * best[k][2])
    score, transforms, seasonal, lags, hyper, table = best[pick]
    lag_table = tuple((p, s, h.tightness) for s, p, h in table) if len(table) > 1 else ()
    reasons = []
    if explodes:
        reasons.append("levels grow by orders of magnitude, so only log-type transforms "
                       "were tried")
    if len(best) > 1:
        others = sorted(((best[k][0], k) for k in best if k != pick), reverse=True)
        reasons.append(
            f"structure {pick!r} by marginal likelihood (data in their own units, "
            f"log-Jacobian included): {score:.1f} against {others[0][0]:.1f} for "
            f"{others[0][1]!r}; weight {weights[pick]:.3f}")
    if seasonal and hyper.season_scale is not None:
        reasons.append(f"seasonal dummies with prior scale {hyper.season_scale:.3g} (tuned)")
    if len(table) > 1:
        ranked = sorted(table, key=lambda r: r[0], reverse=True)
        reasons.append(f"lags {lags} of 1..{p_max} by marginal likelihood"
                       + (f" (next best {ranked[1][1]}: {ranked[1][0] - score:+.1f})"
                          if len(ranked) > 1 else ""))

    # ---- stage 2: per-series transforms
    _, tune = _base_hyper(req, seasonal)
    lag_tune = tuple(t for t in tune if t != "season_scale")
    if auto_tr and not explodes and plain.n > 1 and len(tr_options) > 1:
        flipped = []
        for j in range(plain.n):
            alt = levels_tr[j] if transforms[j] != levels_tr[j] else tr_options[1][j]
            if alt == transforms[j]:
                continue
            trial = tuple(alt if i == j else t for i, t in enumerate(transforms))
            s, h = scorer.score(trial, seasonal, lags, hyper, lag_tune)
            if s > score:
                transforms, score, hyper = trial, s, h
                flipped.append(names_[j])
        if flipped:
            reasons.append(f"transform changed alone for {', '.join(flipped)} (higher "
                           "marginal likelihood)")
            candidates.append(Candidate("per-series transforms", score, len(tune)))

    prior_mean = scorer.prior_mean(scorer.series(transforms))
    # ---- stage 3: tune jointly; sum-of-coefficients and initial-observation dummies
    dummy_names = tuple(nm for nm in ("sum_coef", "initial")
                        if _auto(getattr(req, nm)) and req.dummies_allowed)
    if "sum_coef" in dummy_names and not np.any(prior_mean == 1.0):
        dummy_names = tuple(nm for nm in dummy_names if nm != "sum_coef")
    if tune:
        score, hyper = scorer.score(transforms, seasonal, lags, hyper, tune,
                                    prior_mean=prior_mean)
    if dummy_names:
        chosen.extend(dummy_names)
        trial_h = replace(hyper, **dict.fromkeys(dummy_names, 1.0))
        names_all = tune + dummy_names
        s, h = scorer.score(transforms, seasonal, lags, trial_h, names_all,
                            prior_mean=prior_mean)
        # a weight at its upper bound: the data switch that prior off
        off = [nm for nm in dummy_names if getattr(h, nm) >= BOUNDS[nm][1] * 0.999]
        if off:
            keep = tuple(nm for nm in dummy_names if nm not in off)
            trial_h = replace(hyper, **dict.fromkeys(keep, 1.0))
            s, h = (scorer.score(transforms, seasonal, lags, trial_h, tune + keep,
                                 prior_mean=prior_mean) if keep else (-np.inf, hyper))
            dummy_names = keep
        label = " and ".join({"sum_coef": "sum-of-coefficients",
                              "initial": "initial-observation"}[nm] for nm in dummy_names)
        if dummy_names:
            candidates.append(Candidate(f"with {label} dummies", s,
                                        len(tune) + len(dummy_names)))
        if dummy_names and s - score >= OCCAM_NATS * len(dummy_names):
            reasons.append(f"{label} dummies (GLP hyperpriors) raise the marginal likelihood "
                           f"by {s - score:.1f}")
            score, hyper, tune = s, h, tune + dummy_names
        else:
            reasons.append("no sum-of-coefficients or initial-observation dummies (they do "
                           "not raise the marginal likelihood enough)")
    else:
        for nm in ("sum_coef", "initial"):
            if _auto(getattr(req, nm)):
                hyper = replace(hyper, **{nm: None})
    if not seasonal:
        hyper = replace(hyper, season_scale=None)
    if auto_tr:
        logged = [nm for nm, t in zip(names_, transforms, strict=True) if t != "none"]
        if logged:
            reasons.append(f"{' / '.join(sorted(set(transforms) - {'none'}))} for "
                           f"{', '.join(logged)}")
    return Configuration(seasonal, tuple(transforms), int(lags), hyper, tuple(tune),
                         tuple(reasons), tuple(candidates), weights, tuple(chosen),
                         lag_table)
