"""Outlier screen before the reduction: classical Mahalanobis distances of the rows."""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..moments import Moments
from .collinearity import Spectrum
from .distributions import chi2_ppf
from .rowpass import largest_first, mahalanobis_distances


@dataclass
class FlaggedRow:
    row: int          # 1-based data row of the input
    label: str
    distance_squared: float


@dataclass
class OutlierScreen:
    """Rows beyond the chi-squared limit of the squared Mahalanobis distance."""

    method: str
    quantile: float
    df: int | None
    limit: float | None
    count: int | None
    share: float | None
    worst: list[FlaggedRow]
    reason: str | None


def mahalanobis_screen(
    rows: np.ndarray,
    moments: Moments,
    spec: Spectrum,
    labels: list[str],
    row_numbers: np.ndarray,
    quantile: float = 0.975,
    worst: int = 10,
) -> OutlierScreen:
    """Squared Mahalanobis distance of each row from the mean, against chi2(quantile, df).

    D^2 = (x - mean)^T S^-1 (x - mean) with S the sample covariance; computed from the
    eigendecomposition of R on standardized rows, which is the same number. When R is
    singular the inverse is taken on its non-null eigenvectors and df is the rank.
    Undefined when p >= n (every row is then at nearly the same distance). Classical
    distances are themselves pulled by outliers (masking), so the screen is a first look.

    References
    ----------
    P. C. Mahalanobis (1936), "On the generalised distance in statistics", Proceedings
    of the National Institute of Sciences of India 2, 49-55.
    P. J. Rousseeuw and B. C. van Zomeren (1990), "Unmasking multivariate outliers and
    leverage points", JASA 85(411), 633-639 (the 97.5% chi-squared cut-off).
    """
    n, p = moments.n, moments.p
    d2 = None if p >= n else mahalanobis_distances(rows, moments, spec)
    return screen_of_distances(d2, n, p, spec, labels, row_numbers, quantile, worst)


def screen_of_distances(
    d2: np.ndarray | None, n: int, p: int, spec: Spectrum, labels, row_numbers: np.ndarray, quantile: float = 0.975,
    worst: int = 10,
) -> OutlierScreen:
    """The screen of :func:`mahalanobis_screen` from squared distances already computed."""
    method = "classical Mahalanobis distance"
    if p >= n or d2 is None:
        return OutlierScreen(method, quantile, None, None, None, None, [], f"undefined: {p} features and {n} rows (p >= n)")
    keep = spec.values > spec.tolerance
    df = int(keep.sum())
    limit = float(chi2_ppf(quantile, df))
    over = d2 > limit
    order = largest_first(d2, worst)
    flagged = [FlaggedRow(int(row_numbers[i]), str(labels[i]), float(d2[i])) for i in order if over[i]]
    reason = None if keep.all() else f"R is singular: distances use its {df} non-null directions"
    return OutlierScreen(method, quantile, df, limit, int(over.sum()), float(over.mean()), flagged, reason)

