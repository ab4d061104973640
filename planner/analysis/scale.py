"""Scale disparity and shape of the features, from the Moments."""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..moments import Moments


@dataclass
class ScaleResult:
    """How far the features' spreads differ, and which ones a log transform might suit.

    ``sd_ratio`` is the largest standard deviation over the smallest. ``positive_skewness``
    holds the skewness of the strictly positive features (the only ones a log transform
    applies to); ``log_candidates`` are those above ``skew_threshold``.
    """

    sd_ratio: float | None
    largest_sd: str
    smallest_sd: str
    cv: dict[str, float | None]
    skewness: dict[str, float | None]
    excess_kurtosis: dict[str, float | None]
    positive_skewness: dict[str, float | None]
    log_candidates: list[str]
    skew_threshold: float


def _finite_or_none(x: float) -> float | None:
    return float(x) if np.isfinite(x) else None


def scale_disparity(moments: Moments, skew_threshold: float = 1.0) -> ScaleResult:
    """Standard-deviation ratio, coefficients of variation, skewness and log candidates.

    Skewness g1 and excess kurtosis g2 are the moment ratios of the Moments (population
    central moments); a strictly positive feature with g1 above ``skew_threshold`` is
    named as a candidate for a log transform.
    """
    sd = moments.std()
    columns = moments.columns
    hi, lo = int(np.argmax(sd)), int(np.argmin(sd))
    ratio = float(sd[hi] / sd[lo]) if sd[lo] > 0 else None
    skew, kurt = moments.skewness(), moments.excess_kurtosis()
    with np.errstate(divide="ignore", invalid="ignore"):
        cv = sd / np.abs(moments.mean)
    positive = moments.minimum > 0
    pos_skew = {c: _finite_or_none(skew[j]) for j, c in enumerate(columns) if positive[j]}
    candidates = [c for c, g in pos_skew.items() if g is not None and g > skew_threshold]
    return ScaleResult(
        sd_ratio=ratio,
        largest_sd=columns[hi],
        smallest_sd=columns[lo],
        cv={c: _finite_or_none(cv[j]) for j, c in enumerate(columns)},
        skewness={c: _finite_or_none(skew[j]) for j, c in enumerate(columns)},
        excess_kurtosis={c: _finite_or_none(kurt[j]) for j, c in enumerate(columns)},
        positive_skewness=pos_skew,
        log_candidates=candidates,
        skew_threshold=float(skew_threshold),
    )


@dataclass
class SampleSize:
    """Rows, features and rows per feature, for the rules of thumb of the rulebook."""

    n: int
    p: int
    n_per_feature: float


def sample_size(moments: Moments) -> SampleSize:
    return SampleSize(n=int(moments.n), p=int(moments.p), n_per_feature=float(moments.n / moments.p))
