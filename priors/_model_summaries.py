"""Posterior summaries of a fitted :class:`priors.model.FanfoldVAR`: one-step and h-step
predictive densities, the companion matrix's spectral radius, impulse responses and
variance decompositions, coefficient tables, Sigma and the chosen hyperparameters.

A mixin: the methods read the fitted attributes that ``FanfoldVAR.fit`` sets and draw
parameters through ``sample``.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Sequence

import numpy as np
import pandas as pd
from scipy import stats
from scipy.linalg import solve_triangular

from ._types import FloatArray
from .data import future_exogenous_rows
from .density import differenced_flags, mixture_log_scores, model_unit_outcomes
from .draw_summaries import coefficient_table, mixture_log_density
from .errors import SpecificationError
from .predictive import companion_spectral_radius
from .propagation import ShockResponses, VarianceShares, shock_responses, variance_shares

__all__ = ["PosteriorSummaries"]


class PosteriorSummaries:
    """What a fitted model says about its parameters and predictive densities."""

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

    @property
    def log_ml_note(self) -> str | None:
        """Why :attr:`log_ml_` is None (None when it is a number): in plain words."""
        if getattr(self, "log_ml_", None) is not None:
            return None
        if self.prior == "flat":  # type: ignore[attr-defined]
            return "flat prior: improper, so no marginal likelihood"
        if self.volatility == "common":  # type: ignore[attr-defined]
            return "no closed form with stochastic volatility (sampled by Gibbs)"
        return "no closed form with the independent prior (sampled by Gibbs)"

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
