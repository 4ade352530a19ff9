"""Contact and gross-error tests of readings: limits, mean-shift estimate, held offset."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.stats import chi2

from ohmgraph.engine.readings.contact import contact_drop, contact_limit, gross_limit, mean_shift


def test_contact_limit_matches_the_maximum_of_uniform_errors():
    # No part spread, independent uniform instrument errors: w_j = e_j / (a_j / sqrt 3) is
    # uniform on [-sqrt 3, sqrt 3], so max over m readings has P(max <= q) =
    # ((q + sqrt 3) / (2 sqrt 3))^m (order statistics of independent uniforms).
    m, alpha = 4, 0.05
    limit = contact_limit(np.zeros((6, 6)), np.linspace(0.5, 2.0, 6),
                          np.array([True] * m + [False] * 2), alpha, draws=200000)
    exact = 2 * math.sqrt(3) * (1 - alpha) ** (1 / m) - math.sqrt(3)
    assert math.sqrt(limit) == pytest.approx(exact, abs=5e-3)


def test_contact_limit_with_normal_errors_is_near_sidak():
    # Parts only (normal), independent: max of m standard normals; 1 - alpha quantile is the
    # Sidak value Phi^-1((1 - alpha)^(1/m)) (Sidak, JASA 62, 1967).
    from scipy.stats import norm
    m, alpha = 5, 0.05
    limit = contact_limit(np.diag(np.full(m, 4.0)), np.full(m, 1e-9), np.ones(m, bool), alpha,
                          draws=200000)
    assert math.sqrt(limit) == pytest.approx(norm.ppf((1 - alpha) ** (1 / m)), abs=0.02)


def test_contact_limit_off():
    assert contact_limit(np.eye(3), np.ones(3), np.zeros(3, bool), 0.05) == math.inf
    assert contact_limit(np.eye(3), np.ones(3), np.ones(3, bool), 0.0) == math.inf


def test_gross_limit_is_bonferroni_chi2():
    assert gross_limit(65, 0.01) == pytest.approx(chi2.ppf(1 - 0.01 / 65, 1), rel=1e-12)
    assert gross_limit(0, 0.01) == math.inf


def test_mean_shift_is_the_residual_against_the_conditional_mean():
    # Textbook identity for a normal vector: the offset of reading j that best explains e is
    # e_j - Sigma_jo Sigma_oo^-1 e_o (the conditional mean of e_j given the others).
    rng = np.random.default_rng(3)
    root = rng.normal(size=(6, 6))
    covariance = root @ root.T + np.eye(6)
    residual = rng.normal(size=6)
    others = [0, 1, 3, 4, 5]
    expected = residual[2] - covariance[2, others] @ np.linalg.solve(
        covariance[np.ix_(others, others)], residual[others])
    assert mean_shift(residual, covariance, 2) == pytest.approx(expected, rel=1e-10)
    assert math.isnan(mean_shift(np.array([np.inf, 0.0]), np.eye(2), 1))


def test_contact_drop_holds_the_offset_within_its_range():
    # Cost quadratic in the offset, minimum at 4 with drop 16 (curvature 1): held at 2 the
    # drop is 16 - (4 - 2)^2 = 12; read low is no contact error.
    assert contact_drop(16.0, 4.0, 2.0) == pytest.approx(12.0)
    assert contact_drop(16.0, 4.0, 5.0) == 16.0
    assert contact_drop(16.0, -4.0, 5.0) == 0.0
    assert contact_drop(16.0, 4.0, 0.0) == 0.0
