"""Estimator facade: ``FanfoldVAR(...).fit(data)`` then ``.forecast(h, rng=...)``.

``__init__`` only stores settings; ``fit`` validates, chooses lags and hyperparameters,
computes the closed-form posterior and sets the fitted attributes (names ending in ``_``).
"""

from __future__ import annotations

import dataclasses
import inspect
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy import stats
from scipy.linalg import solve_triangular

from ._types import FloatArray
from .autoconfig import (
    AutoRequest,
    Configuration,
    choose_configuration,
    default_max_lags,
    resolve_prior_mean,
)
from .conjugate import NIWPosterior, flat_posterior, posterior, update_posterior
from .convergence import ConvergenceReport
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
from .density import differenced_flags, mixture_log_scores, model_unit_outcomes
from .draw_summaries import coefficient_table, mixture_log_density
from .errors import (
    DataError,
    ExogenousError,
    NotFittedError,
    SpecificationError,
    TooFewObservationsError,
)
from .forecast import Forecast
from .gibbs import (
    GibbsDraws,
    GibbsSettings,
    gibbs_convergence,
    independent_minnesota_prior,
    precompute,
    run_chains,
)
from .hyper_mh import HyperSampler, gamma_from_mode_sd
from .predictive import (
    companion_spectral_radius,
    recursion_with_shocks,
    simulate_paths,
    simulate_paths_from_draws,
)
from .propagation import ShockResponses, VarianceShares, shock_responses, variance_shares
from .sampling import Draws, check_size, sample_posterior
from .scenarios import (
    DEFAULT_SWEEPS,
    Condition,
    Scenario,
    conditional_paths,
    conditions_from_table,
    model_unit_conditions,
)
from .shrinkage import MinnesotaHyper, NIWPrior, ar_residual_variances, minnesota_prior
from .stochvol import run_sv_chains, simulate_log_volatility
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


class FanfoldVAR:
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
    ) -> FanfoldVAR:
        """Fit to ``data`` (T, n): a DataFrame with a regular DatetimeIndex or an array.

        ``rng`` and ``progress(done, total)`` are used by the Gibbs sampler of
        ``prior="independent"`` (required there; the same seed gives the same draws).

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
        from .data import warn_short_history  # the chosen order only, not the search's
        warn_short_history(design)
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
        return self

    def _run_sv(self, rng: np.random.Generator | None,
                progress: Callable[[int, int], None] | None) -> None:
        """Common stochastic volatility by Gibbs (:mod:`priors.stochvol`) at the tuned
        prior; sets ``sampler_`` (with the volatility state) and ``log_volatility_``."""
        if rng is None:
            raise SpecificationError("volatility='common' is sampled by Gibbs: pass "
                                     "rng=np.random.default_rng(seed) to fit")
        settings = self._gibbs_settings()
        assert self.prior_ is not None
        sv = run_sv_chains(rng.spawn(settings.chains), self.design_, self.prior_,
                           burn=settings.burn, keep=settings.keep, thin=settings.thin,
                           progress=progress, workers=settings.workers)
        vol = np.stack([sv.h[:, :, -1], sv.phi, sv.sig2], axis=-1)
        self.sampler_ = GibbsDraws(sv.B, sv.Sigma, settings, volatility=vol)
        self.log_volatility_ = sv.h
        self.sv_acceptance_ = sv.acceptance
        self.log_ml_ = None

    def _run_gibbs(self, rng: np.random.Generator | None,
                   progress: Callable[[int, int], None] | None) -> None:
        """Independent prior at the chosen hyperparameters (cross applied), Gibbs chains
        started at the conjugate posterior mean; sets ``prior_`` and ``sampler_``."""
        if rng is None:
            raise SpecificationError("prior='independent' is sampled by Gibbs: pass "
                                     "rng=np.random.default_rng(seed) to fit")
        assert self.hyper_ is not None and self.posterior_ is not None
        hyper = dataclasses.replace(self.hyper_, cross=float(self.cross))
        prior = independent_minnesota_prior(self.design_, hyper, self.prior_mean_)
        pre = precompute(self.design_, prior, self._outlier_rows())
        sampler = None
        if self.sample_hyper:
            m = self.design_.n_det
            own = np.tile(np.eye(self.design_.n, dtype=bool), (self.lags_, 1))
            unit = hyper.tightness**2 * np.where(own, 1.0, hyper.cross**2)
            sampler = HyperSampler(prior.V[:m], prior.V[m:] / unit, own, prior.B0,
                                   gamma_from_mode_sd(0.2, 0.4), gamma_from_mode_sd(0.5, 0.5))
        draws = run_chains(rng, pre, self.posterior_.B, self.posterior_.sigma_mean(),
                           self._gibbs_settings(), progress=progress, hyper=sampler,
                           hyper_start=(hyper.tightness, hyper.cross))
        self.hyper_ = hyper
        self.prior_ = prior
        self.sampler_ = draws
        self.log_ml_ = None

    def _outlier_rows(self) -> list[list[int]]:
        """Rows of the design covered by each outlier period (see :meth:`_outlier_spans`)."""
        return [rows for rows, _ in self._outlier_spans()]

    def _outlier_future(self) -> list[tuple[int, list[int]]]:
        """(period, forecast steps) for periods that run past the last complete period:
        their estimated scale carries into those forecast steps."""
        return [(k, steps) for k, (_, steps) in enumerate(self._outlier_spans()) if steps]

    def _outlier_spans(self) -> list[tuple[list[int], list[int]]]:
        """Per outlier period: the design rows it covers, and the forecast steps (1 = the
        first period after the complete data) it still covers. Dates, or 0-based data
        rows for plain arrays, as given by the user."""
        if not self.outliers:
            return []
        series, design = self.series_, self.design_
        first = series.levels.shape[0] - design.nobs  # data row of design row 0
        index = self._level_index() if series.calendar.index is not None else None
        spans = []
        for item in self.outliers:
            try:
                start, length = item
            except (TypeError, ValueError):
                raise SpecificationError(f"an outlier period is (first period, number of "
                                         f"periods); got {item!r}") from None
            if int(length) != length or length < 1:
                raise SpecificationError(f"outlier period length must be >= 1; got {length!r}")
            if index is not None:
                hit = np.flatnonzero(index == pd.Timestamp(start))
                if not hit.size:
                    raise SpecificationError(f"outlier period start {start!r} is not a date "
                                             "of the data")
                row0 = int(hit[0])
            else:
                row0 = int(start)
            rows = [r - first for r in range(row0, row0 + int(length))]
            if not 0 <= rows[0] < design.nobs:
                raise SpecificationError(
                    f"outlier period {item!r} must start within the estimation sample (after "
                    f"the first {first} rows used as lags, up to the last complete period), "
                    "so that its scale can be estimated")
            spans.append(([r for r in rows if r < design.nobs],
                          [r - design.nobs + 1 for r in rows if r >= design.nobs]))
        return spans

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
        for name in ("transforms", "seasonal"):
            if isinstance(params.get(name, "auto"), str) and params.get(name, "auto") == "auto":
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
        end incomplete. A model sampled by Gibbs (:attr:`uses_gibbs`) has no exact update:
        its chains run again on all the data (pass ``rng``).
        """
        self._check_fitted()
        old = self.series_
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
        return model

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
    def sample(self, draws: int, *, rng: np.random.Generator) -> Draws:
        """Posterior draws of (B, Sigma): exact i.i.d. draws for the conjugate and flat
        priors; for "independent", draws picked at random from the stored Gibbs draws
        (without replacement while there are enough)."""
        self._check_fitted()
        if self.sampler_ is None:
            return sample_posterior(rng, self.posterior_, draws)
        return self._pick(draws, rng)[0]

    def _pick(self, draws: int, rng: np.random.Generator) -> tuple[Draws, FloatArray | None]:
        """Stored draws picked at random, with their volatility state (S, 3) if any."""
        picked, state, _ = self._pick_all(draws, rng)
        return picked, state

    def _pick_all(self, draws: int, rng: np.random.Generator
                  ) -> tuple[Draws, FloatArray | None, FloatArray | None]:
        """Stored draws picked at random, with their volatility state (S, 3) and outlier
        scales (S, K) where the model has them."""
        assert self.sampler_ is not None
        draws = check_size(draws)
        B, Sig = self.sampler_.flat()
        pick = rng.choice(B.shape[0], size=draws, replace=draws > B.shape[0])
        vol, sc = self.sampler_.volatility, self.sampler_.scales
        state = None if vol is None else vol.reshape(-1, 3).astype(np.float64)[pick]
        scales = None if sc is None else sc.reshape(B.shape[0], -1).astype(np.float64)[pick]
        return Draws(B[pick], Sig[pick]), state, scales

    def time_varying_shocks(self) -> bool:  # public: the backtest asks it too
        """Whether forecast shocks have a draw- and step-dependent scale (stochastic
        volatility, or an outlier period running into the forecast)."""
        return self.sampler_ is not None and (self.sampler_.volatility is not None
                                              or bool(self._outlier_future()))

    def _scaled_paths(self, rng: np.random.Generator, draws: int, history: FloatArray,
                      exog_rows: FloatArray) -> FloatArray:
        """Paths whose shocks are scaled per draw and step: exp(h/2) of simulated
        log-volatility, and the outlier scales over the forecast steps they cover."""
        picked, state, scales = self._pick_all(draws, rng)
        horizon, n = exog_rows.shape[0], self.series_.n
        mult = np.ones((draws, horizon))
        if state is not None:
            h = simulate_log_volatility(rng, state[:, 0], state[:, 1], state[:, 2], horizon)
            mult *= np.exp(h / 2)
        if scales is not None:
            for k, steps in self._outlier_future():
                inside = [s - 1 for s in steps if s <= horizon]
                mult[:, inside] *= scales[:, k][:, None]
        z = rng.standard_normal((draws, horizon, n))
        shocks = mult[:, :, None] * np.einsum("sij,shj->shi",
                                               np.linalg.cholesky(picked.Sigma), z)
        return recursion_with_shocks(picked.B, shocks, history, exog_rows)

    def convergence(self) -> ConvergenceReport | None:
        """R-hat, bulk and tail ESS and MCSE of every coefficient and Sigma element of the
        Gibbs draws, with ``ok`` False when any R-hat > 1.01 or ESS < 400 (then do not
        trust the fit: run longer chains). None for exact samplers (no chains) and for a
        single chain. Computed on first call (seconds for large models), then kept."""
        self._check_fitted()
        if self.sampler_ is None:
            return None
        cached = getattr(self, "_convergence", None)
        if cached is None or cached[0] is not self.sampler_:
            cached = (self.sampler_, gibbs_convergence(self.sampler_, self.design_))
            self._convergence = cached
        return cached[1]

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
        user = inverse_paths(paths, series.transforms, series.levels[-1])
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

    def one_step_log_density(
        self,
        y_next: FloatArray,
        *,
        exog_next: pd.DataFrame | FloatArray | None = None,
    ) -> float:
        """log p(y_T+1 | data), exactly: the one-step predictive is multivariate t,
        t_{nu-n+1}(B_bar'x, (1 + x'P^-1 x) S / (nu - n + 1)) (Zellner 1971). For
        "independent", the mixture of normals over the stored Gibbs draws.

        ``y_next`` (n,) is in model units (after transforms; the same as the data's units
        when no transform is used). Equals log p(data + y_next) - log p(data) under the
        fitted prior.
        """
        self._check_fitted()
        post, n = self.posterior_, self.posterior_.n
        exog = future_exogenous_rows(self.series_, self.deterministics_, 1, exog_next)[0]
        x = np.concatenate([exog, self.series_.values[-self.lags_:][::-1].ravel()])
        if self.sampler_ is not None:
            B, Sig = self.sampler_.flat()
            return mixture_log_density(B, Sig, x, np.asarray(y_next, dtype=np.float64))
        v = solve_triangular(post.R, x, trans=1, lower=False, check_finite=False)
        dof = post.df - n + 1
        shape = (1.0 + v @ v) * post.S / dof
        dist = stats.multivariate_t(loc=post.B.T @ x, shape=shape, df=dof)
        return float(dist.logpdf(np.asarray(y_next, dtype=np.float64)))

    def log_predictive_density(
        self,
        actual: pd.DataFrame | FloatArray,
        *,
        rng: np.random.Generator,
        draws: int = 1000,
        exog_future: pd.DataFrame | FloatArray | None = None,
    ) -> FloatArray:
        """log p(y_{T+h} | data) of realised outcomes (H, n) in the user's units, for
        h = 1..H, each the joint density of all series at that step; (H,).

        Step 1 of the conjugate and flat models is exact (multivariate t, see
        :meth:`one_step_log_density`); otherwise the Rao-Blackwellised mixture over
        ``draws`` posterior draws (:mod:`priors.density`). Transformed series include the
        Jacobian, so scores compare across transforms. NaN where an outcome is missing.
        """
        self._check_fitted()
        if self.ragged_ is not None or self.time_varying_shocks():
            raise SpecificationError("log predictive densities are not available with "
                                     "incomplete last periods or time-varying shock scales")
        y = np.asarray(actual, dtype=np.float64)
        series = self.series_
        if y.ndim != 2 or y.shape[1] != series.n:
            raise SpecificationError(f"outcomes must have shape (H, {series.n}); got {y.shape}")
        H = y.shape[0]
        w, logjac = model_unit_outcomes(y, series.transforms, series.levels[-1])
        exog_rows = future_exogenous_rows(series, self.deterministics_, H, exog_future)
        d = self.sample(draws, rng=rng)
        out = mixture_log_scores(d.B, d.Sigma, series.values[-self.lags_:], exog_rows, w,
                                 differenced_flags(series.transforms),
                                 n_det=self.design_.n_det) + logjac
        if self.sampler_ is None and np.all(np.isfinite(w[0])):
            exog_next = None if exog_future is None else (
                exog_future.iloc[:1] if isinstance(exog_future, pd.DataFrame)
                else np.asarray(exog_future)[:1])
            out[0] = self.one_step_log_density(w[0], exog_next=exog_next) + logjac[0]
        return out

    def spectral_radius(self, draws: int = 1000, *, rng: np.random.Generator) -> FloatArray:
        """Posterior draws of the companion matrix's spectral radius, (draws,).

        Values >= 1 mean explosive dynamics. Costs one (n p) x (n p) eigenvalue problem
        per draw.
        """
        self._check_fitted()
        B = self.sample(draws, rng=rng).B
        return companion_spectral_radius(B, self.design_.n_det, self.lags_)

    def impulse_responses(
        self,
        horizon: int = 24,
        *,
        rng: np.random.Generator,
        draws: int = 1000,
        identification: str = "recursive",
        shock_size: str = "sd",
        ordering: Sequence[str] | None = None,
        cumulative: bool = False,
    ) -> ShockResponses:
        """How a shock to one series spreads to the others, with posterior bands.

        One response per exact posterior draw of (B, Sigma), steps 0 (impact) to
        ``horizon``, in the user's units where the transform allows (see
        :func:`priors.irf.response_units`). ``identification``: "recursive" (Cholesky,
        series in ``ordering``, a list of names, default the data's order) or
        "generalised" (Pesaran & Shin 1998, no ordering). ``shock_size``: "sd" or
        "unit". ``cumulative`` sums the responses over steps.
        """
        self._check_fitted()
        d = self.sample(draws, rng=rng)
        return shock_responses(d.B, d.Sigma, n_det=self.design_.n_det, lags=self.lags_,
                               horizon=horizon, names=self.series_.names,
                               transforms=self.series_.transforms,
                               identification=identification, shock_size=shock_size,
                               ordering=ordering, cumulative=cumulative)

    def variance_decomposition(
        self,
        horizon: int = 24,
        *,
        rng: np.random.Generator,
        draws: int = 1000,
        identification: str = "recursive",
        ordering: Sequence[str] | None = None,
    ) -> VarianceShares:
        """Shares of each series' 1..horizon-step forecast error variance due to each
        shock (Lutkepohl 2005, sec. 2.3.3), one decomposition per posterior draw."""
        self._check_fitted()
        d = self.sample(draws, rng=rng)
        return variance_shares(d.B, d.Sigma, n_det=self.design_.n_det, lags=self.lags_,
                               horizon=horizon, names=self.series_.names,
                               identification=identification, ordering=ordering)

    def coefficients(self, level: float = 0.9) -> pd.DataFrame:
        """Posterior mean, s.d. and central credible interval of every coefficient.

        Analytic matrix-t marginals: B_ri ~ t_{nu-n+1}(B_bar_ri, P^-1_rr S_ii / (nu-n+1));
        for "independent", moments and quantiles of the Gibbs draws.
        Columns: equation, regressor, mean, sd, lower, upper.
        """
        self._check_fitted()
        if not 0 < level < 1:
            raise SpecificationError(f"level must lie strictly between 0 and 1; got {level}")
        if self.sampler_ is not None:
            return coefficient_table(self.sampler_.flat()[0], self.design_.labels,
                                     self.design_.names, level)
        post, design = self.posterior_, self.design_
        n = post.n
        dof = post.df - n + 1
        scale2 = np.outer(post.row_cov_diag(), np.diag(post.S)) / dof
        sd = np.sqrt(scale2 * dof / (dof - 2)) if dof > 2 else np.full_like(scale2, np.inf)
        tq = stats.t.ppf(0.5 + level / 2, dof)
        half = tq * np.sqrt(scale2)
        rows = [
            {"equation": design.names[i], "regressor": design.labels[r], "mean": post.B[r, i],
             "sd": sd[r, i], "lower": post.B[r, i] - half[r, i],
             "upper": post.B[r, i] + half[r, i]}
            for i in range(n) for r in range(post.k)
        ]
        return pd.DataFrame(rows)

    def sigma_mean(self) -> pd.DataFrame:
        """Posterior mean of Sigma, labelled by series."""
        self._check_fitted()
        names = list(self.design_.names)
        mean = (self.posterior_.sigma_mean() if self.sampler_ is None
                else self.sampler_.flat()[1].mean(axis=0))
        return pd.DataFrame(mean, index=names, columns=names)

    def hyperparameters(self) -> dict[str, float | int | None]:
        """Chosen lags and hyperparameters (None where switched off or flat); with
        ``sample_hyper``, the posterior medians of the tightness and cross tightness."""
        self._check_fitted()
        h = self.hyper_
        if h is not None and self.sampler_ is not None and self.sampler_.hyper is not None:
            med = np.median(self.sampler_.hyper.reshape(-1, 2), axis=0)
            h = dataclasses.replace(h, tightness=float(med[0]), cross=float(med[1]))
        return {
            "lags": self.lags_,
            "tightness": None if h is None else h.tightness,
            "cross": None if h is None else h.cross,
            "decay": None if h is None else h.decay,
            "det_scale": None if h is None else h.det_scale,
            "sum_coef": None if h is None else h.sum_coef,
            "initial": None if h is None else h.initial,
            "season_scale": None if h is None else h.season_scale,
        }
