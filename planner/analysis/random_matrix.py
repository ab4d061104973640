"""The eigenvalues of pure noise when the table is large: the Marchenko-Pastur law and the
Tracy-Widom fluctuation of its edge.

Parallel analysis simulates null eigenvalues up to a few hundred dimensions; beyond that a
draw costs too much and the random-matrix limits are accurate, so the null comes from
them instead. The Gavish-Donoho threshold needs the law's median too.
"""
from __future__ import annotations

import math

import numpy as np

#: Percentiles of the Tracy-Widom law of order 1, Johnstone (2001), Table 1 (values from
#: memory).
TRACY_WIDOM_1 = {90.0: 0.4501, 95.0: 0.9793, 99.0: 2.0234}


def _support(beta: float) -> tuple[float, float]:
    root = math.sqrt(beta)
    return (1.0 - root) ** 2, (1.0 + root) ** 2


def marchenko_pastur_cdf(x, beta: float):
    """CDF of the Marchenko-Pastur law of ratio ``beta`` in (0, 1], unit variance.

    The density sqrt((b - t)(t - a)) / (2 pi beta t) on [a, b], a, b = (1 -+ sqrt(beta))^2,
    integrates in closed form: with r = sqrt((b - t)(t - a)),
    int r / t dt = r + (a + b)/2 asin((2t - a - b)/(b - a)) - sqrt(ab) asin(((a + b)t - 2ab)/(t(b - a))),
    which is -pi beta at t = a and pi beta at t = b.

    References
    ----------
    V. A. Marchenko and L. A. Pastur (1967), "Distribution of eigenvalues for some sets of
    random matrices", Mathematics of the USSR-Sbornik 1(4), 457-483.
    """
    a, b = _support(beta)
    x = np.asarray(x, dtype=float)
    inside = np.clip(x, a + 1e-300, b)
    r = np.sqrt(np.clip((b - inside) * (inside - a), 0.0, None))
    s1 = np.arcsin(np.clip((2.0 * inside - a - b) / (b - a), -1.0, 1.0))
    s2 = np.arcsin(np.clip(((a + b) * inside - 2.0 * a * b) / (inside * (b - a)), -1.0, 1.0))
    value = 0.5 + (r + 0.5 * (a + b) * s1 - math.sqrt(a * b) * s2) / (2.0 * math.pi * beta)
    return np.where(x <= a, 0.0, np.where(x >= b, 1.0, np.clip(value, 0.0, 1.0)))


def marchenko_pastur_quantile(q, beta: float) -> np.ndarray:
    """Quantiles of the Marchenko-Pastur law, by bisection on its closed-form CDF (to the
    last representable digit: the bracket is halved until it stops shrinking)."""
    q = np.atleast_1d(np.asarray(q, dtype=float))
    a, b = _support(beta)
    lo, hi = np.full(q.shape, a), np.full(q.shape, b)
    for _ in range(200):
        mid = 0.5 * (lo + hi)
        below = marchenko_pastur_cdf(mid, beta) < q
        new_lo, new_hi = np.where(below, mid, lo), np.where(below, hi, mid)
        if np.array_equal(new_lo, lo) and np.array_equal(new_hi, hi):
            break
        lo, hi = new_lo, new_hi
    return 0.5 * (lo + hi)


def marchenko_pastur_median(beta: float) -> float:
    """Median of the Marchenko-Pastur law with ratio ``beta`` in (0, 1]."""
    return float(marchenko_pastur_quantile(0.5, beta)[0])


def tracy_widom_edge(dof: int, p: int) -> tuple[float, float]:
    """Centre and scale of the largest eigenvalue of W ~ Wishart(dof, I_p), unnormalised:
    (l1 - mu) / sigma tends to the Tracy-Widom law of order 1, with
    mu = (sqrt(dof - 1) + sqrt(p))^2 and
    sigma = (sqrt(dof - 1) + sqrt(p)) (1 / sqrt(dof - 1) + 1 / sqrt(p))^(1/3).

    References
    ----------
    I. M. Johnstone (2001), "On the distribution of the largest eigenvalue in principal
    components analysis", Annals of Statistics 29(2), 295-327.
    """
    s = math.sqrt(dof - 1) + math.sqrt(p)
    return s * s, s * (1.0 / math.sqrt(dof - 1) + 1.0 / math.sqrt(p)) ** (1.0 / 3.0)


def marchenko_pastur_null(q: int, p: int, n: int, scale: float = 1.0, percentile: float = 95.0) -> tuple[np.ndarray, np.ndarray]:
    """Null eigenvalues (upper bound at ``percentile``, one of TRACY_WIDOM_1, and typical
    value) of the covariance (divisor
    n - 1) of n rows of p independent features of variance ``scale``, for the q leading
    positions.

    The typical value of the i-th of the m = min(p, n - 1) non-zero eigenvalues is its
    classical location, the Marchenko-Pastur quantile at 1 - (i - 1/2) / m (for p > n - 1
    the dual law of ratio (n - 1) / p, times p / (n - 1)). The bound of the first position
    is Johnstone's centre plus the Tracy-Widom fluctuation; every other position gets
    the same excess over its classical location as the first one. Eigenvalues below the
    edge fluctuate less than the largest one, so the bound is conservative there (a weak
    component near the noise edge is kept a little less readily). Positions beyond m have
    null eigenvalue 0.
    """
    if float(percentile) not in TRACY_WIDOM_1:
        raise ValueError(f"the large-table null has the percentiles {sorted(TRACY_WIDOM_1)}, not {percentile}")
    dof = n - 1
    m = min(p, dof)
    gamma = p / dof
    if gamma <= 1.0:
        beta, factor = gamma, 1.0
    else:
        beta, factor = 1.0 / gamma, gamma
    positions = np.arange(1, min(q, m) + 1)
    location = factor * marchenko_pastur_quantile(1.0 - (positions - 0.5) / m, beta)
    mu, sigma = tracy_widom_edge(dof, p)
    edge_bound = (mu + TRACY_WIDOM_1[float(percentile)] * sigma) / dof
    upper = location + (edge_bound - location[0]) if len(location) else location
    typical = np.zeros(q)
    bound = np.zeros(q)
    typical[: len(location)] = location
    bound[: len(upper)] = upper
    return bound * scale, typical * scale
