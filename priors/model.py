"""Estimator facade: ``FanfoldVAR(...).fit(data)`` then ``.forecast(h, rng=...)``.

``__init__`` only stores settings; ``fit`` validates, chooses lags and hyperparameters,
computes the closed-form posterior and sets the fitted attributes (names ending in ``_``).
"""

from __future__ import annotations

import dataclasses
import inspect
import warnings
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd

from ._model_gibbs import GibbsParts
from ._model_pool import LocalTrendPool
from ._model_summaries import PosteriorSummaries
from ._types import FloatArray
from .autoconfig import (
    AutoRequest,
    Configuration,
    choose_configuration,
    default_max_lags,
    resolve_prior_mean,
)
from .conjugate import NIWPosterior, flat_posterior, posterior, update_posterior
from .data import (
    Design,
    Deterministics,
    SeriesData,
    build_design,
    count_columns,
    future_exogenous_rows,
    load_series,
    split_ragged_edge,
)
from .errors import (
    DataError,
    ExogenousError,
    NegativeValuesWarning,
    NotFittedError,
    ShortHistoryWarning,
    SpecificationError,
    TimeIndexError,
    TooFewObservationsError,
)
from .forecast import Forecast
from .gibbs import (
    GibbsDraws,
    GibbsSettings,
    independent_minnesota_prior,
)
from .predictive import (
    companion_spectral_radius,
    simulate_paths,
    simulate_paths_from_draws,
)
from .sampling import Draws, check_size
from .scenarios import (
    DEFAULT_SWEEPS,
    Condition,
    Scenario,
    conditional_paths,
    conditions_from_table,
    model_unit_conditions,
)
from .shrinkage import MinnesotaHyper, NIWPrior, ar_residual_variances, minnesota_prior
from .transforms import inverse_paths
from .tuning import tune_hyperparameters

__all__ = ["FanfoldVAR", "LagChoice", "default_max_lags"]

PRIORS = ("minnesota", "flat", "independent")


@dataclass(frozen=True)
class LagChoice:
    """One candidate lag order: its score on the common sample and tuned tightness."""

    lags: int
    score: float
    tightness: float | None
    criterion: str  # "log_ml" or "bic"


def _is_count(value: object) -> bool:
    return isinstance(value, int | np.integer) and not isinstance(value, bool) and value >= 1


def _bic(design: Design) -> float:
    """Schwarz criterion of the OLS VAR (Lutkepohl 2005, sec. 4.3): lower is better."""
    coef, *_ = np.linalg.lstsq(design.X, design.Y, rcond=None)
    E = design.Y - design.X @ coef
    T = design.nobs
    _, logdet = np.linalg.slogdet(E.T @ E / T)
    return float(logdet + np.log(T) / T * design.n * design.k)



def _advice(series: SeriesData, design: Design) -> list[tuple[str, type[Warning]]]:
    """Advice about the fitted data: negative values in what looks like demand, a short
    history for the lag order (messages and their warning classes)."""
    from .data import check_history, negative_values_message

    found = [(negative_values_message(series), NegativeValuesWarning),
             (check_history(design), ShortHistoryWarning)]
    return [(message, category) for message, category in found if message]

class FanfoldVAR(GibbsParts, LocalTrendPool, PosteriorSummaries):
    """Bayesian VAR with a natural-conjugate Minnesota prior.

    Parameters
    ----------
    lags : int or "auto"
        Lag order, or "auto" to choose it by marginal likelihood over 1..max_lags on a
        common sample (Schwarz criterion with ``prior="flat"``).
    max_lags : int, optional
        Largest order tried by "auto"; default by frequency (see :func:`default_max_lags`).
    prior : "minnesota", "independent" or "flat"
        "minnesota": natural-conjugate form, closed-form posterior and exact draws.
        "independent": the full Minnesota pattern as an independent Normal prior on the
        coefficients (own and other series' lags shrunk separately, see ``cross``) with
        an inverse-Wishart prior on Sigma, sampled by Gibbs (:mod:`priors.gibbs`).
        "flat" is the flat-prior limit (OLS posterior mean, Jeffreys prior on Sigma).
    tightness : float or "auto"
        Prior s.d. of the own first lag; "auto" maximises the marginal likelihood (of
        the conjugate form, also for "independent", whose marginal likelihood has no
        closed form).
    cross : float
        "independent" only: other series' lags get prior s.d. ``cross`` times that of
        own lags (1 = the conjugate pattern; smaller shrinks cross-effects harder).
    decay : float
        Lag decay of the prior s.d. (s.d. ~ 1 / lag**decay).
    det_scale : float
        Prior s.d. of deterministic/exogenous coefficients, in residual s.d. units.
    sum_coef, initial : float, "auto" or None
        Weights of the sum-of-coefficients and dummy-initial-observation priors; None
        switches them off; "auto" lets the automatic configuration decide whether they
        pay and tunes their weights with the tightness.
    season_scale : float, "auto" or None
        Prior s.d. of the seasonal-dummy coefficients (units as ``det_scale``); "auto"
        tunes it by marginal likelihood; None uses ``det_scale`` (nearly flat).
    hyperprior : bool
        Tune by the posterior mode under Gamma hyperpriors (Giannone, Lenza & Primiceri
        2015) instead of the marginal likelihood alone (default).
    prior_mean : sequence, (lags, n) array or mapping, optional
        Prior mean of each series' own first lag (one value per series, or a mapping by
        name); default 1 for levels and logs, 0 for differenced series. A (L, n) array
        gives the own lags 1..L, e.g. 1 at lag 12 of monthly data for a seasonal random
        walk (:func:`priors.shrinkage.own_lag_means`).
    constant, trend : bool
        Deterministic terms.
    seasonal : bool or "auto"
        Seasonal dummies by the data's calendar; "auto" chooses by marginal likelihood.
    transforms : "auto", str, sequence or mapping, optional
        none, log, log1p, diff or logdiff, for all or per series; "auto" chooses each
        series' levels or log-type transform by marginal likelihood (None = levels).

    Settings left at "auto" (the defaults) are chosen per data set by
    :func:`priors.autoconfig.choose_configuration`; ``configuration_`` says what was
    chosen and why, and :meth:`resolved_params` gives the settings with every choice
    written out.
    outliers : sequence of (first period, number of periods), optional
        "independent" only: known-date periods (a promotion, a stock-out, a supply shock)
        whose shocks get their own scale, estimated (Lenza & Primiceri 2022); the first
        period is a date (or a 0-based row of the data for plain arrays).
    sample_hyper : bool
        "independent" only: sample the tightness and the cross tightness inside the Gibbs
        loop (Metropolis) under Gamma hyperpriors (tightness: mode 0.2, s.d. 0.4, as in
        Giannone, Lenza & Primiceri 2015; cross: mode 0.5, s.d. 0.5), starting from the
        tuned tightness and ``cross``; slower per sweep than fixed values.
    counts : bool or "auto"
        Count-aware demand: forecasts of count series (every value a whole number >= 0)
        are censored at zero, so no path, mean or quantile goes below zero; "auto" (the
        default) turns it on for the series that are counts, True for every series.
    volatility : "constant" or "common"
        "common" (prior "minnesota"): one stochastic volatility for all series, a log-AR(1)
        process (Carriero, Clark & Marcellino 2016), sampled by Gibbs; forecasts carry
        the volatility forward from its last value.
    local_trend : None, "auto" or float
        Pool the forecasts with a per-series local damped trend (see
        :mod:`priors._model_pool`): None the VAR alone; a number in [0, 1] the local
        trend's weight; "auto" a weight from a rolling-origin check over the last 16
        periods, leaning towards the VAR. Scenarios and impulse responses stay the VAR's.
    chains, burn, keep, thin, workers : int
        "independent" only: Gibbs chains, sweeps discarded and draws kept per chain,
        sweeps per kept draw, and worker processes (see :class:`priors.gibbs.GibbsSettings`).
    """

    def __init__(
        self,
        *,
        lags: int | str = "auto",
        max_lags: int | None = None,
        prior: str = "minnesota",
        tightness: float | str = "auto",
        decay: float = 1.0,
        det_scale: float = 1000.0,
        sum_coef: float | str | None = "auto",
        initial: float | str | None = "auto",
        season_scale: float | str | None = "auto",
        hyperprior: bool = True,
        prior_mean: Sequence[float] | Mapping[str, float] | None = None,
        constant: bool = True,
        trend: bool = False,
        seasonal: bool | str = "auto",
        transforms: str | Sequence[str] | Mapping[str, str] | None = "auto",
        cross: float = 1.0,
        outliers: Sequence[tuple[str | int, int]] | None = None,
        sample_hyper: bool = False,
        volatility: str = "constant",
        counts: bool | str = "auto",
        local_trend: float | str | None = None,
        chains: int = 4,
        burn: int = 500,
        keep: int = 1000,
        thin: int = 1,
        workers: int = 1,
    ) -> None:
        self.lags = lags
        self.max_lags = max_lags
        self.prior = prior
        self.tightness = tightness
        self.decay = decay
        self.det_scale = det_scale
        self.sum_coef = sum_coef
        self.initial = initial
        self.season_scale = season_scale
        self.hyperprior = hyperprior
        self.prior_mean = prior_mean
        self.constant = constant
        self.trend = trend
        self.seasonal = seasonal
        self.transforms = transforms
        self.cross = cross
        self.outliers = outliers
        self.sample_hyper = sample_hyper
        self.volatility = volatility
        self.counts = counts
        self.local_trend = local_trend
        self.chains = chains
        self.burn = burn
        self.keep = keep
        self.thin = thin
        self.workers = workers

    # ------------------------------------------------------------------ settings
    def _check_settings(self) -> None:
        if self.prior not in PRIORS:
            raise SpecificationError(
                f"prior must be one of {', '.join(PRIORS)}; got {self.prior!r}")
        if not (self.lags == "auto" or _is_count(self.lags)):
            raise SpecificationError(f"lags must be 'auto' or an integer >= 1; got {self.lags!r}")
        if self.max_lags is not None and not _is_count(self.max_lags):
            raise SpecificationError(f"max_lags must be an integer >= 1; got {self.max_lags!r}")
        for name in ("tightness", "sum_coef", "initial", "season_scale"):
            v = getattr(self, name)
            if isinstance(v, str) and v != "auto":
                raise SpecificationError(f"{name} must be a number or 'auto'; got {v!r}")
        if not (isinstance(self.counts, bool | np.bool_) or self.counts == "auto"):
            raise SpecificationError(f"counts must be true, false or 'auto'; got "
                                     f"{self.counts!r}")
        if not (isinstance(self.seasonal, bool | np.bool_) or self.seasonal == "auto"):
            raise SpecificationError(f"seasonal must be true, false or 'auto'; got "
                                     f"{self.seasonal!r}")
        if self.tightness is None:
            raise SpecificationError("tightness must be a number or 'auto'")
        if self.volatility not in ("constant", "common"):
            raise SpecificationError(f"volatility must be 'constant' or 'common'; got "
                                     f"{self.volatility!r}")
        if self.volatility == "common" and self.prior != "minnesota":
            raise SpecificationError("volatility='common' is built for prior='minnesota' "
                                     "(the conjugate form keeps its Kronecker structure)")
        if self.prior != "independent" and self.sample_hyper:
            raise SpecificationError("sample_hyper needs prior='independent'")
        if self.prior != "independent" and self.outliers:
            raise SpecificationError("outlier periods need prior='independent' (their "
                                     "shock scales are sampled by Gibbs)")
        if self.prior != "independent" and self.cross != 1.0:
            raise SpecificationError(
                f"cross = {self.cross!r} needs prior='independent': the conjugate Minnesota "
                "prior shrinks own and other series' lags alike (cross = 1)")
        self._gibbs_settings()  # validates chains, burn, keep, thin, workers
        self._check_local_trend()

    @property
    def uses_gibbs(self) -> bool:
        """Whether the settings need the Gibbs sampler (independent prior or stochastic
        volatility): then ``fit`` needs an ``rng``, draws are stored, and new data mean
        running the chains again."""
        return self.prior == "independent" or self.volatility == "common"

    def _gibbs_settings(self) -> GibbsSettings:
        return GibbsSettings(chains=self.chains, burn=self.burn, keep=self.keep,
                             thin=self.thin, workers=self.workers)

    def _auto_request(self) -> AutoRequest:
        """What the automatic configuration chooses ("auto") and what is given."""
        return AutoRequest(
            transforms=self.transforms, seasonal=self.seasonal, lags=self.lags,
            max_lags=self.max_lags, tightness=self.tightness, sum_coef=self.sum_coef,
            initial=self.initial, season_scale=self.season_scale,
            hyperprior=bool(self.hyperprior), decay=float(self.decay),
            det_scale=float(self.det_scale), constant=self.constant, trend=self.trend,
            prior_mean=self.prior_mean, dummies_allowed=self.prior != "flat")

    def _count_flags(self, series: SeriesData) -> tuple[bool, ...]:
        """Per series: whether forecasts are censored at zero (see ``counts``)."""
        if self.counts == "auto":
            return tuple(bool(c) for c in count_columns(series.levels))
        return (bool(self.counts),) * series.n

    def _prior_mean(self, series: SeriesData) -> FloatArray:
        return resolve_prior_mean(self.prior_mean, series)

    # ------------------------------------------------------------------ fitting
    def _fit_minnesota(self, design: Design, prior_mean: FloatArray,
                       config: Configuration) -> tuple[MinnesotaHyper, NIWPrior, NIWPosterior]:
        """Tune what ``config`` leaves to tune on ``design`` (starting at its values),
        then the closed-form posterior."""
        base, tune = config.hyper, config.tune
        psi = ar_residual_variances(design)
        hyper = base
        if tune:
            hyper = tune_hyperparameters(design, base, prior_mean, tune=tune,
                                         hyperprior=self.hyperprior, psi=psi).hyper
        prior = minnesota_prior(design, hyper, prior_mean, psi)
        return hyper, prior, posterior(design, prior)

    def _feasible_max_lags(self, series: SeriesData, det: Deterministics, want: int) -> int:
        for p in range(want, 0, -1):
            try:
                build_design(series, p, det)
                return p
            except TooFewObservationsError:
                continue
        build_design(series, 1, det)  # raises the informative error
        return 1

    def _bic_lags(self, series: SeriesData, det: Deterministics) -> tuple[int, list[LagChoice]]:
        """Lag order of the flat prior by the Schwarz criterion on a common sample."""
        want = self.max_lags or default_max_lags(series.calendar.kind)
        p_max = self._feasible_max_lags(series, det, want)
        table = [LagChoice(p, _bic(build_design(series, p, det, start=p_max)), None, "bic")
                 for p in range(1, p_max + 1)]
        return min(table, key=lambda c: c.score).lags, table

    def configure(self, data: pd.DataFrame | FloatArray, *,
                  exog: pd.DataFrame | FloatArray | None = None,
                  names: Sequence[str] | None = None,
                  period: int | None = None) -> Configuration:
        """The automatic configuration for ``data`` (complete rows): the settings left at
        "auto" chosen by marginal likelihood (see :mod:`priors.autoconfig`)."""
        return choose_configuration(data, self._auto_request(), exog=exog, names=names,
                                    period=period)

    def fit(
        self,
        data: pd.DataFrame | FloatArray,
        *,
        exog: pd.DataFrame | FloatArray | None = None,
        names: Sequence[str] | None = None,
        period: int | None = None,
        rng: np.random.Generator | None = None,
        progress: Callable[[int, int], None] | None = None,
        warn: bool = True,
    ) -> FanfoldVAR:
        """Fit to ``data`` (T, n): a DataFrame with a regular DatetimeIndex or an array.

        ``rng`` and ``progress(done, total)`` are used by the Gibbs sampler of
        ``prior="independent"`` (required there; the same seed gives the same draws).

        Advice about the data (a short history for the lag order, negative values in
        what looks like demand) is kept in ``warnings_`` (plain messages) and, with
        ``warn=True``, also issued as Python warnings (:class:`ShortHistoryWarning`,
        :class:`NegativeValuesWarning`). A server passes ``warn=False`` and reports
        ``warnings_`` in its answer: no process-wide warning filter is needed.

        The last rows may be incomplete (a "ragged edge": some series not yet known for
        the latest periods). The model is fitted on the complete rows, and forecasts
        start at the first incomplete period, conditioned on the values already known
        there (see :meth:`forecast`).
        """
        self._check_settings()
        data, exog, ragged = split_ragged_edge(data, exog, names)
        config = self.configure(data, exog=exog, names=names, period=period)
        series = load_series(data, transforms=list(config.transforms), exog=exog,
                             names=names, period=period)
        det = Deterministics(self.constant, self.trend, config.seasonal)
        prior_mean = self._prior_mean(series)
        lags, table = config.lags, [LagChoice(p, score, tight, "log_ml")
                                    for p, score, tight in config.lag_table]
        if self.prior == "flat" and self.lags == "auto":
            lags, table = self._bic_lags(series, det)
        design = build_design(series, lags, det)
        # once, on the data and lag order fitted (not for each candidate of the search)
        advice = _advice(series, design)
        self.warnings_ = [message for message, _ in advice]
        for message, category in advice if warn else ():
            warnings.warn(message, category, stacklevel=2)
        if self.prior == "flat":
            hyper, prior, post = None, None, flat_posterior(design)
        else:
            hyper, prior, post = self._fit_minnesota(design, prior_mean, config)
        self.configuration_ = config if hyper is None else dataclasses.replace(config, hyper=hyper)
        self.series_ = series
        self.counts_ = self._count_flags(series)
        self.ragged_ = ragged
        self.deterministics_ = det
        self.prior_mean_ = prior_mean
        self.design_ = design
        self.lags_ = lags
        self.lag_search_ = table
        self.hyper_ = hyper
        self.prior_ = prior
        self.posterior_ = post
        self.log_ml_ = post.log_ml
        self.sampler_ = None
        if self.prior == "independent":
            self._run_gibbs(rng, progress)
        elif self.volatility == "common":
            self._run_sv(rng, progress)
        self._fit_local_trend(None, rng)
        return self

    def get_params(self) -> dict[str, object]:
        """The settings given to ``__init__`` (enough to build an identical model)."""
        names = [p for p in inspect.signature(type(self).__init__).parameters if p != "self"]
        return {name: getattr(self, name) for name in names}

    def resolved_params(self) -> dict[str, object]:
        """:meth:`get_params` with every "auto" choice of the fit written out: transforms
        (per series), seasonal, lags and the tuned hyperparameters. A model built from
        them and fitted to the same data is the fitted model, without any search; this is
        what :meth:`restore` needs."""
        self._check_fitted()
        params = self.get_params()
        params.update(transforms=dict(zip(self.series_.names, self.series_.transforms,
                                          strict=True)),
                      seasonal=bool(self.deterministics_.seasonal), lags=int(self.lags_))
        h = self.hyper_
        if h is not None:
            params.update(tightness=h.tightness, sum_coef=h.sum_coef, initial=h.initial,
                          season_scale=h.season_scale)
        else:  # flat prior: no shrinkage, no dummies
            params.update(sum_coef=None, initial=None, season_scale=None)
        if self.local_trend is not None:
            params["local_trend"] = self.local_trend_weight_
        return params

    @classmethod
    def restore(
        cls,
        params: Mapping[str, object],
        data: pd.DataFrame | FloatArray,
        *,
        lags: int,
        hyper: MinnesotaHyper | None,
        posterior: NIWPosterior,
        exog: pd.DataFrame | FloatArray | None = None,
        names: Sequence[str] | None = None,
        period: int | None = None,
        draws: GibbsDraws | None = None,
        configuration: Mapping[str, object] | None = None,
    ) -> FanfoldVAR:
        """A fitted model from stored parts, without tuning or fitting again.

        ``draws``: the stored Gibbs draws of a ``prior="independent"`` model.
        ``configuration``: the original's ``configuration_.to_dict(names)`` (the report
        of what the automatic configuration chose and why), kept as
        ``configuration_``.

        ``params`` are :meth:`resolved_params` of the original (settings with no "auto"
        transforms or seasonality left); ``lags``, ``hyper`` and ``posterior`` its fitted
        ``lags_``, ``hyper_`` and ``posterior_``. The data are validated and the design
        rebuilt (cheap and deterministic); the posterior is taken as given, so forecasts
        equal those of the original model.
        """
        model = cls(**params)  # type: ignore[arg-type]
        model._check_settings()
        for name in ("transforms", "seasonal", "local_trend"):
            default = None if name == "local_trend" else "auto"  # stored before it existed
            if isinstance(params.get(name, default), str) and params.get(name) == "auto":
                raise SpecificationError(
                    f"restore needs the fitted model's {name}, not 'auto': pass "
                    "model.resolved_params()")
        data, exog, ragged = split_ragged_edge(data, exog, names)
        series = load_series(data, transforms=model.transforms, exog=exog, names=names,
                             period=period)
        det = Deterministics(model.constant, model.trend, model.seasonal)
        design = build_design(series, int(lags), det)
        if posterior.B.shape != (design.k, design.n):
            raise SpecificationError(
                f"stored posterior has shape {posterior.B.shape} but the data and settings "
                f"give {(design.k, design.n)}; the stored model does not match its data")
        prior_mean = model._prior_mean(series)
        prior = None if hyper is None else minnesota_prior(
            design, dataclasses.replace(hyper, cross=1.0), prior_mean)
        model.series_ = series
        model.counts_ = model._count_flags(series)
        model.ragged_ = ragged
        model.deterministics_ = det
        model.prior_mean_ = prior_mean
        model.design_ = design
        model.warnings_ = [message for message, _ in _advice(series, design)]
        model.lags_ = int(lags)
        model.lag_search_ = []
        model.configuration_ = (None if configuration is None
                                else Configuration.from_dict(configuration, hyper))
        model.hyper_ = hyper
        model.prior_ = prior
        model.posterior_ = posterior
        model.log_ml_ = posterior.log_ml
        model.sampler_ = None
        if model.uses_gibbs:
            if draws is None:
                raise SpecificationError("a model sampled by Gibbs (prior='independent' or "
                                         "stochastic volatility) needs its stored Gibbs "
                                         "draws to be restored")
            if model.prior == "independent":
                model.prior_ = independent_minnesota_prior(design, hyper, prior_mean)
            model.sampler_ = draws
            model.log_ml_ = None
        model._fit_local_trend(None, None)  # the weight is in params; the fits are cheap
        return model

    def append(
        self,
        new_data: pd.DataFrame | FloatArray,
        *,
        new_exog: pd.DataFrame | FloatArray | None = None,
        rng: np.random.Generator | None = None,
        progress: Callable[[int, int], None] | None = None,
    ) -> FanfoldVAR:
        """A new model with ``new_data`` appended, its posterior updated exactly.

        Lags, hyperparameters and the prior stay as fitted (no tuning again); the
        posterior equals a full refit on all the data under that same prior. The new
        rows must continue the complete data: same series, following dates. Incomplete
        last periods (a ragged edge) are replaced by the new rows, which may themselves
        end incomplete. New rows without dates (an array, or a frame without a
        DatetimeIndex) continue the model's own calendar: the model's dates are never
        replaced. A model sampled by Gibbs (:attr:`uses_gibbs`) has no exact update:
        its chains run again on all the data (pass ``rng``).
        """
        self._check_fitted()
        old = self.series_
        if isinstance(old.calendar.index, pd.DatetimeIndex):
            new_data = self.on_calendar(new_data)
        elif isinstance(new_data, pd.DataFrame) and isinstance(new_data.index,
                                                                pd.DatetimeIndex):
            raise TimeIndexError("the model's data have no dates; send the new periods "
                                 "without dates")
        if isinstance(new_data, pd.DataFrame) and isinstance(old.calendar.index, pd.DatetimeIndex):
            combined: pd.DataFrame | FloatArray = pd.concat(
                [pd.DataFrame(old.levels, index=self._level_index(), columns=old.names),
                 new_data])
        else:
            combined = np.vstack([old.levels, np.asarray(new_data, dtype=np.float64)])
        exog = None
        if old.exog_names:
            if new_exog is None:
                raise ExogenousError("the model uses exogenous regressors; give their values "
                                     "for the new periods")
            # rows lost to differencing never enter the design: any finite filler works
            lost = old.levels.shape[0] - old.nobs
            filler = np.zeros((lost, len(old.exog_names)))
            new_x = np.asarray(new_exog, dtype=np.float64).reshape(-1, len(old.exog_names))
            exog = pd.DataFrame(np.vstack([filler, old.exog, new_x]),
                                columns=list(old.exog_names))
            if isinstance(combined, pd.DataFrame):
                exog.index = combined.index
        combined, exog, ragged = split_ragged_edge(combined, exog, old.names)
        series = load_series(combined, transforms=list(old.transforms), exog=exog,
                             names=old.names, period=old.calendar.period)
        design = build_design(series, self.lags_, self.deterministics_)
        added = series.nobs - old.nobs
        if added < 1 and ragged is None:
            raise DataError("no new observations to append")
        post = (update_posterior(self.posterior_, design.X[-added:], design.Y[-added:])
                if added else self.posterior_)
        model = type(self)(**self.get_params())  # type: ignore[arg-type]
        model.series_ = series
        model.counts_ = model._count_flags(series)
        model.ragged_ = ragged
        model.deterministics_ = self.deterministics_
        model.prior_mean_ = self.prior_mean_
        model.design_ = design
        model.warnings_ = [message for message, _ in _advice(series, design)]
        model.lags_ = self.lags_
        model.lag_search_ = self.lag_search_
        model.configuration_ = self.configuration_
        model.hyper_ = self.hyper_
        model.prior_ = self.prior_
        model.posterior_ = post
        model.log_ml_ = post.log_ml
        model.sampler_ = None
        if self.prior == "independent":  # no exact update: the chains run again
            model.hyper_ = dataclasses.replace(self.hyper_, cross=1.0)
            model._run_gibbs(rng, progress)
        elif self.volatility == "common":
            model._run_sv(rng, progress)
        model._fit_local_trend(self.local_trend_weight_, rng)
        return model

    def on_calendar(self, new_data: pd.DataFrame | FloatArray) -> pd.DataFrame:
        """New rows for a model fitted on dated data, on dates: their own (a
        DatetimeIndex), or the periods right after the model's complete data (the model's
        calendar continued), for rows given without dates."""
        if isinstance(new_data, pd.DataFrame) and isinstance(new_data.index, pd.DatetimeIndex):
            return new_data
        old = self.series_
        frame = (new_data if isinstance(new_data, pd.DataFrame)
                 else pd.DataFrame(np.asarray(new_data, dtype=np.float64).reshape(-1, old.n),
                                   columns=list(old.names)))
        dates = old.calendar.future(frame.shape[0])
        assert dates is not None
        return frame.set_axis(dates.rename(self._level_index().name), axis=0)

    def _level_index(self) -> pd.DatetimeIndex:
        """Dates of the data as given (before any differencing dropped a row)."""
        index = self.series_.calendar.index
        assert index is not None
        lost = self.series_.levels.shape[0] - self.series_.nobs
        if not lost:
            return index
        return pd.date_range(end=index[0], periods=lost + 1, freq=index.freq)[:-1].append(index)

    def _check_fitted(self) -> None:
        if not hasattr(self, "posterior_"):
            raise NotFittedError("this FanfoldVAR is not fitted yet; call fit(data) first")

    # ------------------------------------------------------------------ results
    def forecast(
        self,
        horizon: int,
        *,
        rng: np.random.Generator,
        draws: int = 2000,
        exog_future: pd.DataFrame | FloatArray | None = None,
        reject_explosive: bool = False,
    ) -> Forecast:
        """Posterior predictive paths in the user's units.

        Parameters
        ----------
        horizon : number of steps ahead (>= 1).
        rng : the random generator; the same seed gives bit-identical paths.
        draws : number of paths (one parameter draw each).
        exog_future : (horizon, q) future values of exogenous regressors, if any.
        reject_explosive : drop parameter draws whose companion matrix has spectral
            radius >= 1 (this truncates the posterior; the share dropped is reported).

        With a ragged edge (data whose last r periods are incomplete), the forecast
        covers those r periods and then ``horizon`` more: the values already known are
        fixed as conditions and the missing ones are drawn given them (see
        :meth:`scenario`).
        """
        self._check_fitted()
        horizon = self._check_horizon(horizon)
        if self.ragged_ is not None:
            return self.scenario(horizon, [], rng=rng, draws=draws, exog_future=exog_future,
                                 reject_explosive=reject_explosive).forecast
        draws = check_size(draws)
        trend = self._pool_split(draws) if self.pools_local_trend() else 0
        if not trend:
            return self._var_forecast(horizon, rng, draws, exog_future, reject_explosive)
        parts, rejected = [], None
        if trend < draws:  # the VAR's paths first, then the local trend's
            var = self._var_forecast(horizon, rng, draws - trend, exog_future,
                                     reject_explosive)
            parts.append(var.paths)
            rejected = var.rejected_share
        parts.append(self._censor_counts(self._local_trend_paths(rng, trend, horizon)))
        return Forecast(np.concatenate(parts), self.series_.names,
                        self.series_.calendar.future(horizon), rejected)

    def _var_forecast(self, horizon: int, rng: np.random.Generator, draws: int,
                      exog_future: pd.DataFrame | FloatArray | None,
                      reject_explosive: bool) -> Forecast:
        """The VAR's own predictive paths (the whole forecast without a local-trend pool)."""
        series, post = self.series_, self.posterior_
        exog_rows = future_exogenous_rows(series, self.deterministics_, horizon, exog_future)
        history = series.values[-self.lags_:]
        rejected = None
        if reject_explosive and self.time_varying_shocks():
            raise SpecificationError("reject_explosive is not supported with stochastic "
                                     "volatility or an outlier period running into the "
                                     "forecast yet")
        if reject_explosive:
            kept, rejected = self._stable_draws(rng, draws)
            paths = simulate_paths_from_draws(rng, kept, history, exog_rows)
        elif self.time_varying_shocks():
            paths = self._scaled_paths(rng, draws, history, exog_rows)
        elif self.sampler_ is not None:
            paths = simulate_paths_from_draws(rng, self.sample(draws, rng=rng), history,
                                              exog_rows)
        else:
            paths = simulate_paths(rng, post, history, exog_rows, draws)
        return Forecast(self._user_paths(paths), series.names,
                        series.calendar.future(horizon), rejected)

    def _user_paths(self, paths: FloatArray) -> FloatArray:
        """Model-unit paths (S, h, n) in the user's units: transforms undone, and count
        series censored at zero (the model's mass below zero goes to zero demand)."""
        series = self.series_
        return self._censor_counts(inverse_paths(paths, series.transforms, series.levels[-1]))

    def _censor_counts(self, user: FloatArray) -> FloatArray:
        """User-unit paths (S, h, n) with count series censored at zero, in place."""
        counts = np.asarray(getattr(self, "counts_", ()), dtype=bool)
        if counts.any():
            user[:, :, counts] = np.maximum(user[:, :, counts], 0.0)
        return user

    @staticmethod
    def _check_horizon(horizon: int) -> int:
        if int(horizon) != horizon or horizon < 1:
            raise SpecificationError(f"horizon must be an integer >= 1; got {horizon!r}")
        return int(horizon)

    def _ragged_rows(self) -> int:
        return 0 if self.ragged_ is None else self.ragged_.values.shape[0]

    def _future_rows(self, steps: int, exog_future: pd.DataFrame | FloatArray | None
                     ) -> FloatArray:
        """Deterministic/exogenous rows for ``steps`` periods after the complete data; the
        exogenous values of a ragged edge come first, then ``exog_future``."""
        ragged = self.ragged_
        if ragged is not None and ragged.exog is not None and ragged.exog.size:
            names = list(self.series_.exog_names)
            if exog_future is None:
                fut = np.empty((0, len(names)))
            elif isinstance(exog_future, pd.DataFrame):
                missing = [c for c in names if c not in exog_future.columns]
                if missing:
                    raise ExogenousError(
                        f"future values of exogenous regressor {missing[0]!r} missing")
                fut = exog_future[names].to_numpy(dtype=np.float64, na_value=np.nan)
            else:
                fut = np.asarray(exog_future, dtype=np.float64).reshape(-1, len(names))
            exog_future = np.vstack([ragged.exog, fut])
        return future_exogenous_rows(self.series_, self.deterministics_, steps, exog_future)

    def condition(
        self,
        series: str,
        at: int | str | pd.Timestamp,
        *,
        value: float | None = None,
        lower: float | None = None,
        upper: float | None = None,
        horizon: int | None = None,
    ) -> Condition:
        """A scenario condition in the user's units, by series name and step or date.

        ``at`` is a step (1 = the first forecast period) or a date of a forecast period.
        Give ``value`` for a fixed level, or ``lower`` and/or ``upper`` for a range.
        ``horizon`` (the scenario's, before any ragged-edge rows) is needed for dates.
        """
        self._check_fitted()
        names = self.series_.names
        if series not in names:
            raise SpecificationError(f"unknown series {series!r}; series are {', '.join(names)}")
        j = names.index(series)
        if isinstance(at, int | np.integer) and not isinstance(at, bool):
            step = int(at)
        else:
            steps = self._ragged_rows() + (horizon if horizon is not None else 0)
            dates = self.series_.calendar.future(max(steps, 1))
            if dates is None:
                raise SpecificationError("the data have no dates; give the step as a number")
            when = pd.Timestamp(at)
            hits = np.flatnonzero(dates == when)
            if not hits.size:
                raise SpecificationError(
                    f"{when.date()} is not a forecast period; the forecast covers "
                    f"{dates[0].date()} to {dates[-1].date()} at the data's frequency")
            step = int(hits[0]) + 1
        if value is not None:
            if lower is not None or upper is not None:
                raise SpecificationError(f"condition on {series!r}: give a value or a range, "
                                         "not both")
            return Condition(j, step, float(value), float(value))
        if lower is None and upper is None:
            raise SpecificationError(f"condition on {series!r}: give a value, or a lower "
                                     "and/or upper bound")
        lo = -np.inf if lower is None else float(lower)
        hi = np.inf if upper is None else float(upper)
        if lo == hi:
            raise SpecificationError(f"condition on {series!r}: lower equals upper; give it "
                                     "as a value")
        return Condition(j, step, lo, hi)

    def scenario(
        self,
        horizon: int,
        conditions: Sequence[Condition],
        *,
        rng: np.random.Generator,
        draws: int = 2000,
        exog_future: pd.DataFrame | FloatArray | None = None,
        reject_explosive: bool = False,
        sweeps: int = DEFAULT_SWEEPS,
    ) -> Scenario:
        """Conditional forecast: paths drawn given fixed values and ranges.

        Parameters
        ----------
        horizon : steps ahead (after any ragged-edge periods, which are always included).
        conditions : from :meth:`condition`; steps count from the first forecast period.
        rng, draws, exog_future, reject_explosive : as in :meth:`forecast`.
        sweeps : Gibbs sweeps per draw for ranges (see :mod:`priors.scenarios`).

        Returns a :class:`~priors.scenarios.Scenario` with the conditional forecast, the
        unconditional baseline from the same parameter draws, and how likely each
        condition was before conditioning.
        """
        self._check_fitted()
        horizon = self._check_horizon(horizon)
        draws = check_size(draws)
        if self.time_varying_shocks():
            raise SpecificationError("scenarios and incomplete last periods are not "
                                     "supported with stochastic volatility or an outlier "
                                     "period running into the forecast yet")
        series = self.series_
        r = self._ragged_rows()
        steps = r + horizon
        conds = list(conditions)
        if self.ragged_ is not None:
            known = conditions_from_table(self.ragged_.values)
            cells = {(c.series, c.step) for c in known}
            for c in conds:
                if (c.series, c.step) in cells:
                    raise SpecificationError(
                        f"step {c.step} of {series.names[c.series]!r} is already known "
                        "(an incomplete last period of the data); drop that condition")
            conds = known + conds
        cset = model_unit_conditions(conds, series.transforms, series.levels[-1], steps,
                                     series.names)
        exog_rows = self._future_rows(steps, exog_future)
        rejected = None
        if reject_explosive:
            kept, rejected = self._stable_draws(rng, draws)
        else:
            kept = self.sample(draws, rng=rng)
        out = conditional_paths(rng, kept.B, np.linalg.cholesky(kept.Sigma),
                                series.values[-self.lags_:], exog_rows, cset,
                                n_det=self.design_.n_det, sweeps=sweeps)
        dates = series.calendar.future(steps)
        def user(paths: FloatArray) -> Forecast:
            return Forecast(self._user_paths(paths),
                            series.names, dates, rejected)
        return Scenario(user(out.conditional), user(out.baseline), tuple(conds),
                        out.prior_probability, out.soft_probability, out.sweeps, r)

    def _stable_draws(self, rng: np.random.Generator, draws: int,
                      max_rounds: int = 20) -> tuple[Draws, float]:
        kept_B, kept_S, total = [], [], 0
        have = 0
        for _ in range(max_rounds):
            batch = self.sample(draws, rng=rng)
            total += draws
            ok = companion_spectral_radius(batch.B, self.design_.n_det, self.lags_) < 1.0
            kept_B.append(batch.B[ok])
            kept_S.append(batch.Sigma[ok])
            have += int(ok.sum())
            if have >= draws:
                break
        if have < draws:
            raise SpecificationError(
                f"only {have} of {total} parameter draws were stable; the posterior puts "
                "most mass on explosive dynamics, so forecast without reject_explosive or "
                "difference the trending series"
            )
        B = np.concatenate(kept_B)[:draws]
        Sig = np.concatenate(kept_S)[:draws]
        return Draws(B, Sig), 1.0 - have / total
