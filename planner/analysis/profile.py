"""Per-column profile of the features from the Moments: location, spread, range, shape."""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..moments import Moments


@dataclass
class ColumnProfile:
    """Summary of one feature over the rows used.

    ``std`` has the n - 1 divisor; ``skewness`` and ``excess_kurtosis`` are the moment
    ratios g1 = m3 / m2^1.5 and g2 = m4 / m2^2 - 3 with population central moments
    (the ``bias=True`` forms of ``scipy.stats.skew`` and ``scipy.stats.kurtosis``).
    ``cv`` is std / |mean| and None when the mean is 0.
    """

    column: str
    n: int
    missing: int
    mean: float
    std: float
    cv: float | None
    minimum: float
    maximum: float
    zero_share: float
    skewness: float | None
    excess_kurtosis: float | None


def column_profiles(moments: Moments) -> list[ColumnProfile]:
    """One :class:`ColumnProfile` per column of ``moments``."""
    std = moments.std()
    skew = moments.skewness()
    kurt = moments.excess_kurtosis()
    n = int(moments.n)
    mean = moments.mean
    with np.errstate(divide="ignore", invalid="ignore"):
        cv = std / np.abs(mean)
        zero_share = moments.zeros / moments.n if moments.n else np.zeros(moments.p)
    # Plain Python numbers, column by column (tolist() once per figure, not per value).
    rows = zip(
        moments.columns, moments.missing.tolist(), mean.tolist(), std.tolist(), cv.tolist(), (mean == 0).tolist(),
        moments.minimum.tolist(), moments.maximum.tolist(), np.asarray(zero_share, float).tolist(),
        skew.tolist(), np.isfinite(skew).tolist(), kurt.tolist(), np.isfinite(kurt).tolist(),
    )
    return [
        ColumnProfile(
            column=col, n=n, missing=int(miss), mean=m, std=s, cv=None if zero_mean else c, minimum=lo, maximum=hi,
            zero_share=z, skewness=sk if sk_ok else None, excess_kurtosis=ku if ku_ok else None,
        )
        for col, miss, m, s, c, zero_mean, lo, hi, z, sk, sk_ok, ku, ku_ok in rows
    ]
