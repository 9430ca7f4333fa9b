"""Overall and cross-variable tightness sampled inside the Gibbs loop (Metropolis).

The independent Minnesota prior's lag variances are ``lambda^2 a_ri`` for a series' own
lags and ``lambda^2 theta^2 a_ri`` for other series' lags (a_ri from the lag decay and the
scales psi; deterministic rows do not depend on lambda or theta). Given the coefficients,

    log p(lambda, theta | B) = sum_lag-rows log N(beta_ri; b0_ri, V_ri(lambda, theta))
                               + log Gamma(lambda) + log Gamma(theta) + const,

which costs O(k n) to evaluate. A random-walk Metropolis step on (log lambda, log theta)
(Jacobian included) leaves this full conditional invariant, so alternating it with the
coefficient and Sigma steps is a valid Metropolis-within-Gibbs sampler. Gamma
hyperpriors are given by mode and s.d. (Giannone, Lenza & Primiceri 2015 use mode 0.2 and
s.d. 0.4 for the overall tightness; the cross-tightness default, mode 0.5 and s.d. 0.5, is
our weakly informative choice).

After an accepted move the chain's per-equation eigendecompositions are recomputed
(n eigh of k x k), so this mode costs more per sweep than fixed hyperparameters.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import special

from ._types import FloatArray
from .errors import SpecificationError

__all__ = ["GammaPrior", "HyperSampler", "gamma_from_mode_sd"]


@dataclass(frozen=True)
class GammaPrior:
    """Gamma(shape, scale) hyperprior."""

    shape: float
    scale: float

    def logpdf(self, x: FloatArray) -> FloatArray:
        return ((self.shape - 1.0) * np.log(x) - x / self.scale - special.gammaln(self.shape)
                - self.shape * np.log(self.scale))


def gamma_from_mode_sd(mode: float, sd: float) -> GammaPrior:
    """The Gamma with this mode and s.d.: scale = (sqrt(mode^2 + 4 sd^2) - mode) / 2,
    shape = mode / scale + 1 (mode 0.2, s.d. 0.4 gives 1.640388 and 0.312311)."""
    if not (mode > 0 and sd > 0):
        raise SpecificationError(f"a Gamma hyperprior needs mode > 0 and sd > 0; got "
                                 f"{mode!r}, {sd!r}")
    scale = (np.sqrt(mode**2 + 4.0 * sd**2) - mode) / 2.0
    return GammaPrior(mode / scale + 1.0, scale)


@dataclass(frozen=True)
class HyperSampler:
    """What the Metropolis step needs.

    V_det : (m, n) prior variances of the deterministic rows (fixed).
    lag_base : (n p, n) lag-row variances per unit lambda^2 (and theta^2 off the own rows).
    own : (n p, n) bool, own-lag rows.  B0 : (k, n) prior means.
    tightness, cross : Gamma hyperpriors.  step : random-walk s.d. on the log scale.
    """

    V_det: FloatArray
    lag_base: FloatArray
    own: np.ndarray
    B0: FloatArray
    tightness: GammaPrior
    cross: GammaPrior
    step: float = 0.15

    def variances(self, lam: float, theta: float) -> FloatArray:
        """V (k, n) at overall tightness ``lam`` and cross tightness ``theta``."""
        lag = lam**2 * self.lag_base * np.where(self.own, 1.0, theta**2)
        return np.vstack([self.V_det, lag])

    def log_target(self, B: FloatArray, lam: FloatArray, theta: FloatArray) -> FloatArray:
        """log p(lambda, theta | B) + log Jacobian of (log lambda, log theta), per chain:
        B (C, k, n), lam and theta (C,)."""
        m = self.V_det.shape[0]
        dev2 = (B[:, m:] - self.B0[m:]) ** 2 / self.lag_base  # (C, np, n)
        scale2 = (lam[:, None, None] ** 2
                  * np.where(self.own[None], 1.0, theta[:, None, None] ** 2))
        loglik = -0.5 * np.sum(np.log(scale2) + dev2 / scale2, axis=(1, 2))
        return (loglik + self.tightness.logpdf(lam) + self.cross.logpdf(theta)
                + np.log(lam) + np.log(theta))

    def step_all(self, rngs: list[np.random.Generator], B: FloatArray, lam: FloatArray,
                 theta: FloatArray) -> tuple[FloatArray, FloatArray, np.ndarray]:
        """One random-walk Metropolis move per chain; (lam, theta, accepted (C,) bool)."""
        C = B.shape[0]
        eps = np.stack([rng.standard_normal(2) for rng in rngs]) * self.step
        u = np.array([rng.random() for rng in rngs])
        lam_p, theta_p = lam * np.exp(eps[:, 0]), theta * np.exp(eps[:, 1])
        ok = (lam_p > 1e-6) & (lam_p < 1e3) & (theta_p > 1e-6) & (theta_p < 1e3)
        log_ratio = np.where(ok, self.log_target(B, lam_p, theta_p)
                             - self.log_target(B, lam, theta), -np.inf)
        accept = np.log(u) < log_ratio
        assert accept.shape == (C,)
        return np.where(accept, lam_p, lam), np.where(accept, theta_p, theta), accept
