"""The Gibbs-sampled side of :class:`priors.model.FanfoldVAR`: running the chains (the
independent prior, common stochastic volatility, outlier periods), picking stored draws,
forecast shocks whose scale varies by draw and step, and convergence diagnostics.

A mixin: the methods read the fitted attributes that ``FanfoldVAR.fit`` sets.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Callable

import numpy as np
import pandas as pd

from ._types import FloatArray
from .convergence import ConvergenceReport
from .errors import SpecificationError
from .gibbs import (
    GibbsDraws,
    gibbs_convergence,
    independent_minnesota_prior,
    precompute,
    run_chains,
)
from .hyper_mh import HyperSampler, gamma_from_mode_sd
from .predictive import recursion_with_shocks
from .sampling import Draws, check_size, sample_posterior
from .stochvol import run_sv_chains, simulate_log_volatility

__all__ = ["GibbsParts"]


class GibbsParts:
    """Chains, stored draws and time-varying shock scales of a fitted model."""

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
