"""Seeded market samples for the estimator tests."""

from __future__ import annotations

import numpy as np
import pytest

from tailtrace.estimators.samples import linear_sample


def correlated_returns(
    rng: np.random.Generator, n: int, vols: np.ndarray, corr: float, dof: float | None = None
) -> np.ndarray:
    """Daily log returns with equal pairwise correlation; Student-t margins when ``dof`` is set."""
    k = len(vols)
    chol = np.linalg.cholesky(np.full((k, k), corr) + (1 - corr) * np.eye(k))
    z = rng.standard_normal((n, k)) @ chol.T
    if dof is not None:
        z *= np.sqrt((dof - 2) / rng.chisquare(dof, size=n))[:, None]
    return z * vols


@pytest.fixture
def make_returns():
    """The :func:`correlated_returns` builder, for tests that need their own market."""
    return correlated_returns


@pytest.fixture
def normal_sample():
    rng = np.random.default_rng(20240601)
    returns = correlated_returns(rng, 750, np.array([0.012, 0.008, 0.015]), 0.4)
    values = np.array([[1.0e6, 2.0e6, -0.5e6], [0.0, 3.0e6, 1.0e6]])
    return linear_sample(returns[-500:], values, history=returns)


@pytest.fixture
def fat_sample():
    rng = np.random.default_rng(20240602)
    returns = correlated_returns(rng, 750, np.array([0.012, 0.008, 0.015]), 0.4, dof=4.0)
    values = np.array([[1.0e6, 2.0e6, -0.5e6], [0.0, 3.0e6, 1.0e6]])
    return linear_sample(returns[-500:], values, history=returns)
