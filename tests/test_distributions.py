"""The distribution functions and the large-table null, against outside computations.

References: scipy.stats (the quantile and tail functions the audit uses are the special
functions scipy.stats itself evaluates); the Marchenko-Pastur law and Johnstone's (2001)
Tracy-Widom centring, checked against eigenvalues of simulated normal tables drawn with
numpy and decomposed with numpy.linalg.eigvalsh.
"""
from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.integrate
import scipy.stats

from planner.analysis import distributions as dist
from planner.analysis import random_matrix as rm


@pytest.mark.parametrize("q", [0.5, 0.9, 0.95, 0.975, 0.99, 0.999])
@pytest.mark.parametrize("df", [1, 2, 3.5, 10, 99, 4950])
def test_chi2_quantile_and_tail_equal_scipy_stats(q, df):
    # Source: scipy.stats.chi2.ppf and scipy.stats.chi2.sf.
    assert dist.chi2_ppf(q, df) == pytest.approx(float(scipy.stats.chi2.ppf(q, df)), rel=1e-13)
    x = float(scipy.stats.chi2.ppf(q, df))
    assert dist.chi2_sf(x, df) == pytest.approx(float(scipy.stats.chi2.sf(x, df)), rel=1e-12)


@pytest.mark.parametrize("q", [0.95, 0.99])
@pytest.mark.parametrize("dfn,dfd", [(1, 10), (3, 97), (10, 999_990), (40, 60)])
def test_f_quantile_equals_scipy_stats(q, dfn, dfd):
    # Source: scipy.stats.f.ppf.
    assert dist.f_ppf(q, dfn, dfd) == pytest.approx(float(scipy.stats.f.ppf(q, dfn, dfd)), rel=1e-13)


@pytest.mark.parametrize("q", [0.5, 0.95, 0.975, 0.99])
def test_normal_quantile_equals_scipy_stats(q):
    # Source: scipy.stats.norm.ppf.
    assert dist.norm_ppf(q) == pytest.approx(float(scipy.stats.norm.ppf(q)), rel=1e-15, abs=1e-15)


@pytest.mark.parametrize("beta", [0.01, 0.2, 0.5, 0.9, 1.0])
def test_marchenko_pastur_cdf_equals_the_integrated_density(beta):
    # Marchenko and Pastur (1967): density sqrt((b - t)(t - a)) / (2 pi beta t) on [a, b],
    # integrated here with scipy.integrate.quad.
    a, b = (1 - math.sqrt(beta)) ** 2, (1 + math.sqrt(beta)) ** 2

    def density(t):
        return math.sqrt(max((b - t) * (t - a), 0.0)) / (2 * math.pi * beta * t)

    for x in np.linspace(a, b, 9)[1:-1]:
        expected = scipy.integrate.quad(density, a, x, limit=400, epsabs=1e-13)[0]
        assert float(rm.marchenko_pastur_cdf(x, beta)) == pytest.approx(expected, abs=1e-9)
    assert float(rm.marchenko_pastur_cdf(a, beta)) == 0.0
    assert float(rm.marchenko_pastur_cdf(b, beta)) == 1.0


def _simulated_eigenvalues(n, p, draws, seed):
    """Eigenvalues (descending) of sample covariances (divisor n - 1) of normal tables."""
    rng = np.random.default_rng(seed)
    return np.array([np.linalg.eigvalsh(np.cov(rng.standard_normal((n, p)), rowvar=False))[::-1] for _ in range(draws)])


@pytest.mark.parametrize("n,p", [(400, 80), (120, 300)])
def test_large_table_null_matches_simulated_noise(n, p):
    # Direct simulation (numpy normal draws, numpy.linalg.eigvalsh): the classical
    # locations follow the mean eigenvalues, and the first position's 95% bound (Johnstone
    # 2001 centring with the Tracy-Widom 95th percentile) sits near the simulated 95th
    # percentile of the largest eigenvalue; bulk bounds are above the simulated ones.
    sim = _simulated_eigenvalues(n, p, 150, seed=2001)
    m = min(p, n - 1)
    upper, typical = rm.marchenko_pastur_null(p, p, n)
    mean = sim[:, :m].mean(axis=0)
    # Away from the edges the location is within 3% of the simulated mean.
    inner = slice(m // 10, m - m // 10)
    np.testing.assert_allclose(typical[:m][inner], mean[inner], rtol=0.03)
    top95 = float(np.percentile(sim[:, 0], 95))
    assert upper[0] == pytest.approx(top95, rel=0.03)
    sim95 = np.percentile(sim[:, :m], 95, axis=0)
    assert np.all(upper[1:m] >= sim95[1:m] * 0.99)
    assert np.all(upper[m:] == 0.0) and np.all(typical[m:] == 0.0)


def test_parallel_analysis_of_a_table_above_the_simulation_limit_uses_the_limits():
    # Above 400 dimensions parallel analysis takes its null from the random-matrix limits;
    # on pure noise it keeps nothing, and with three strong components it keeps three
    # (the eigenvalues from numpy.linalg.eigvalsh of the sample correlation matrix).
    from planner.analysis import retention

    rng = np.random.default_rng(7)
    n, p = 900, 420
    noise = rng.standard_normal((n, p))
    lam = np.linalg.eigvalsh(np.corrcoef(noise, rowvar=False))[::-1]
    rule = retention.parallel_analysis(lam, n, p, rng, standardized=True)
    assert "Marchenko" in rule.source
    assert rule.k == 0
    f = rng.standard_normal((n, 3))
    x = noise + f @ (rng.uniform(0.5, 1.0, (3, p)) * (rng.random((3, p)) < 0.3))
    lam = np.linalg.eigvalsh(np.corrcoef(x, rowvar=False))[::-1]
    assert retention.parallel_analysis(lam, n, p, rng, standardized=True).k == 3
