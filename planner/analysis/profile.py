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
    out = []
    for j, col in enumerate(moments.columns):
        mean = float(moments.mean[j])
        out.append(
            ColumnProfile(
                column=col,
                n=int(moments.n),
                missing=int(moments.missing[j]),
                mean=mean,
                std=float(std[j]),
                cv=float(std[j] / abs(mean)) if mean != 0 else None,
                minimum=float(moments.minimum[j]),
                maximum=float(moments.maximum[j]),
                zero_share=float(moments.zeros[j] / moments.n) if moments.n else 0.0,
                skewness=float(skew[j]) if np.isfinite(skew[j]) else None,
                excess_kurtosis=float(kurt[j]) if np.isfinite(kurt[j]) else None,
            )
        )
    return out
