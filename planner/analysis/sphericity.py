"""Bartlett's test of sphericity: is the correlation matrix the identity?"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .collinearity import Spectrum
from .distributions import chi2_sf

CAVEAT = (
    "For large n the test rejects sphericity almost always, even for weak correlations: "
    "a significant result is necessary for a useful PCA, not sufficient."
)


@dataclass
class BartlettResult:
    """Statistic, degrees of freedom and p-value; None with ``reason`` when undefined."""

    statistic: float | None
    df: int
    p_value: float | None
    log_det_r: float | None
    reason: str | None
    caveat: str = CAVEAT


def bartlett_sphericity(n: int, p: int, spec: Spectrum) -> BartlettResult:
    """Bartlett's test that the population correlation matrix is the identity.

    statistic = -(n - 1 - (2p + 5) / 6) ln det R, referred to chi-squared on p(p - 1)/2
    degrees of freedom; ln det R is the sum of the log-eigenvalues of R. Undefined when R
    is singular (det R = 0) or when n - 1 - (2p + 5)/6 <= 0.

    References
    ----------
    M. S. Bartlett (1951), "The effect of standardization on a chi-square approximation in
    factor analysis", Biometrika 38(3/4), 337-344.
    """
    df = p * (p - 1) // 2
    if spec.singular:
        return BartlettResult(None, df, None, None, f"undefined: R is singular (rank {spec.rank} of {p}), det R = 0")
    multiplier = n - 1 - (2 * p + 5) / 6
    if multiplier <= 0:
        return BartlettResult(None, df, None, None, f"undefined: n - 1 - (2p + 5)/6 = {multiplier:.3g} <= 0")
    log_det = float(np.sum(np.log(spec.values)))
    statistic = -multiplier * log_det
    p_value = float(chi2_sf(statistic, df))
    return BartlettResult(float(statistic), df, p_value, log_det, None)
