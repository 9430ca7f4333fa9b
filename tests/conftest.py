"""Shared fixtures: a seeded generator and a simulated VAR with known parameters."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pytest


@dataclass(frozen=True)
class KnownVAR:
    """A stationary VAR(p) with constant: y_t = c + sum_l A_l y_{t-l} + e_t."""

    c: np.ndarray  # (n,)
    A: list[np.ndarray]  # p arrays (n, n); A[l][i, j] = effect of y_j lag l+1 on y_i
    Sigma: np.ndarray  # (n, n)

    @property
    def n(self) -> int:
        return self.c.size

    def simulate(self, rng: np.random.Generator, T: int, burn: int = 200) -> np.ndarray:
        p = len(self.A)
        L = np.linalg.cholesky(self.Sigma)
        y = np.zeros((T + burn + p, self.n))
        for t in range(p, T + burn + p):
            y[t] = self.c + sum(self.A[l] @ y[t - l - 1] for l in range(p))
            y[t] += L @ rng.standard_normal(self.n)
        return y[burn + p :]


@pytest.fixture
def rng() -> np.random.Generator:
    return np.random.default_rng(20261201)


@pytest.fixture(scope="session")
def known_var() -> KnownVAR:
    """Three-series VAR(2) (values chosen for these tests; spectral radius about 0.7)."""
    A1 = np.array([[0.5, 0.1, 0.0], [0.2, 0.4, 0.1], [0.0, -0.2, 0.3]])
    A2 = np.array([[0.1, 0.0, 0.0], [0.0, 0.1, 0.0], [0.05, 0.0, 0.1]])
    Sigma = np.array([[1.0, 0.3, 0.1], [0.3, 1.5, 0.2], [0.1, 0.2, 0.8]])
    return KnownVAR(np.array([1.0, 0.5, -0.5]), [A1, A2], Sigma)
