"""The scaling choice: how each feature is centred and scaled before the decomposition.

Every method gives, per feature, a ``center`` and a ``scale`` with z = (x - center) / scale,
and the matrix decomposed is the covariance (divisor n - 1) of z:

* ``standardize``: mean and sample standard deviation; the matrix is the correlation matrix.
* ``center``: mean and 1; the covariance matrix, so that variance keeps its physical units.
* ``pareto``: mean and the square root of the standard deviation (van den Berg et al. 2006).
* ``robust``: mean and a robust spread, 1.4826 x the median absolute deviation from the
  median (Rousseeuw and Croux 1993); outlying rows no longer inflate a feature's scale,
  but the covariance of the rescaled features is the classical one, so they still pull the
  components.

``auto`` decides from the diagnostics (see :func:`choose_scaling`).
"""
from __future__ import annotations

import re
from dataclasses import dataclass, field

import numpy as np

from ..moments import Moments

METHODS = ("standardize", "center", "robust", "pareto")
#: Consistency factor of the MAD for the normal distribution, 1 / Phi^-1(3/4).
MAD_NORMAL = 1.482602218505602

#: Unit words recognised at the end of a column name, grouped by what they measure; two
#: different units among the features mean their variances are not comparable.
_UNITS = {
    "c": "degC", "degc": "degC", "celsius": "degC", "f": "degF", "degf": "degF", "k": "K", "kelvin": "K",
    "kg": "kg", "g": "g", "mg": "mg", "t": "t", "lb": "lb",
    "mm": "mm", "cm": "cm", "m": "m", "km": "km", "um": "um", "in": "in", "ft": "ft",
    "pct": "%", "percent": "%", "perc": "%", "ppm": "ppm", "ppb": "ppb",
    "bar": "bar", "mbar": "mbar", "pa": "Pa", "kpa": "kPa", "mpa": "MPa", "psi": "psi",
    "s": "s", "sec": "s", "ms": "ms", "min": "min", "h": "h", "hr": "h",
    "l": "L", "ml": "mL", "m3": "m3", "nm3": "Nm3", "m2": "m2", "v": "V", "mv": "mV", "a": "A", "ma": "mA", "w": "W", "kw": "kW",
    "hz": "Hz", "rpm": "rpm", "usd": "USD", "eur": "EUR", "gbp": "GBP", "db": "dB", "lux": "lux",
}
_COMPOUND = re.compile(r"^(?P<a>[a-z0-9]+)_(?:per_)?(?P<b>[a-z0-9]+)$")


def unit_of(name: str) -> str | None:
    """The unit a column name ends with (``zone1_temp_c`` -> degC, ``speed_m_min`` -> m/min)."""
    tokens = [t for t in re.split(r"[\s_\-.()\[\]/]+", name.strip().lower()) if t]
    if len(tokens) < 2:
        return None
    if len(tokens) >= 3 and tokens[-2] in _UNITS and tokens[-1] in _UNITS:
        return f"{_UNITS[tokens[-2]]}/{_UNITS[tokens[-1]]}"
    if len(tokens) >= 3 and tokens[-1] in _UNITS and tokens[-3] in _UNITS and tokens[-2] == "per":
        return f"{_UNITS[tokens[-3]]}/{_UNITS[tokens[-1]]}"
    if tokens[-1] in _UNITS:
        return _UNITS[tokens[-1]]
    return None


@dataclass
class Scaling:
    """The centring and scaling of every feature, and why it was chosen."""

    method: str
    center: np.ndarray
    scale: np.ndarray
    reasons: list[str] = field(default_factory=list)
    requested: str = "auto"

    def transform(self, x: np.ndarray) -> np.ndarray:
        return (x - self.center) / self.scale

    def matrix(self, moments: Moments) -> np.ndarray:
        """Covariance (n - 1) of the scaled features, from the Moments."""
        if self.method == "standardize":
            m = moments.correlation()
        else:
            inv = 1.0 / self.scale
            m = moments.covariance() * np.outer(inv, inv)
        return (m + m.T) / 2.0


def robust_spread(rows: np.ndarray) -> np.ndarray:
    """1.4826 x median absolute deviation per column; the IQR / 1.349 where the MAD is 0.

    References
    ----------
    P. J. Rousseeuw and C. Croux (1993), "Alternatives to the median absolute deviation",
    JASA 88(424), 1273-1283.
    """
    return _robust_spread_and_source(rows)[0]


def _robust_spread_and_source(rows: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """:func:`robust_spread`, and per column which spread it is: "mad", "iqr" (the MAD is
    0, as for a feature that is mostly one value) or "sd" (the IQR is 0 too)."""
    med = np.median(rows, axis=0)
    mad = MAD_NORMAL * np.median(np.abs(rows - med), axis=0)
    q75, q25 = np.percentile(rows, [75, 25], axis=0)
    iqr = (q75 - q25) / 1.3489795003921634
    spread = np.where(mad > 0, mad, iqr)
    source = np.where(mad > 0, "mad", np.where(iqr > 0, "iqr", "sd"))
    return np.where(spread > 0, spread, np.std(rows, axis=0, ddof=1)), source


def robust_fallbacks(source: np.ndarray, columns: list[str]) -> list[str]:
    """Reasons in words for the features that robust scaling could not scale by their MAD
    (``source`` from :func:`_robust_spread_and_source`)."""
    reasons = []
    for kind, how in (("iqr", "their interquartile range / 1.349"), ("sd", "their standard deviation (the IQR is 0 too)")):
        named = [c for c, s in zip(columns, source) if s == kind]
        if named:
            shown = ", ".join(named[:10]) + (f" and {len(named) - 10} more" if len(named) > 10 else "")
            reasons.append(f"robust scale: the median absolute deviation is 0 for {shown}; they are scaled by {how}")
    return reasons


def scale_for(method: str, sd: np.ndarray, rows: np.ndarray | None) -> np.ndarray:
    """The per-feature scale of ``method`` from the standard deviations (and, for robust
    scaling, the rows): the one definition every refit (bootstrap, folds) uses too."""
    if method == "standardize":
        return sd
    if method == "center":
        return np.ones_like(sd)
    if method == "pareto":
        return np.sqrt(sd)
    if method == "robust":
        if rows is None:
            raise ValueError("robust scaling needs the rows")
        return robust_spread(rows)
    raise ValueError(f"unknown scaling {method!r}")


def make_scaling(method: str, moments: Moments, rows: np.ndarray | None, reasons: list[str], requested: str) -> Scaling:
    """Center and scale for ``method`` (``robust`` needs the rows)."""
    reasons = list(reasons)
    if method == "robust" and rows is not None:
        scale, source = _robust_spread_and_source(rows)
        reasons += robust_fallbacks(source, list(moments.columns))
    else:
        scale = scale_for(method, moments.std(), rows)
    return Scaling(method=method, center=moments.mean.copy(), scale=scale, reasons=reasons, requested=requested)


@dataclass
class ScalingEvidence:
    """What :func:`choose_scaling` looks at."""

    sd_ratio: float | None
    sd_ratio_threshold: float
    units: dict[str, str | None]
    outlier_share: float | None
    outlier_share_threshold: float


def choose_scaling(evidence: ScalingEvidence) -> tuple[str, list[str]]:
    """The ``auto`` policy: standardize, robust or center, with the reasons in words.

    1. Heavy outliers (a share of rows beyond the Mahalanobis limit above the threshold):
       robust scaling, so that a few rows do not set the features' weights.
    2. Mixed units, or standard deviations differing by more than the threshold ratio:
       standardize, so that every feature counts equally (Jolliffe 2002, section 2.3).
    3. Otherwise, one unit and comparable spread: center only, so that variance keeps its
       physical meaning.
    """
    reasons: list[str] = []
    found = {u for u in evidence.units.values() if u is not None}
    share, limit = evidence.outlier_share, evidence.outlier_share_threshold
    ratio, ratio_limit = evidence.sd_ratio, evidence.sd_ratio_threshold
    if share is not None and share > limit:
        reasons.append(
            f"{share:.1%} of the rows lie beyond the Mahalanobis limit (more than {limit:.0%}): "
            "robust scaling (median absolute deviation) keeps those rows from setting the features' weights"
        )
        reasons.append(
            "robust scaling changes the weights only; the components are still those of the "
            "classical covariance of the rescaled features, so outlying rows still pull them"
        )
        return "robust", reasons
    if len(found) > 1:
        shown = ", ".join(sorted(found)[:6]) + (" ..." if len(found) > 6 else "")
        reasons.append(f"the features are in different units ({shown}): standardize so that each counts equally")
        if ratio is not None and ratio > ratio_limit:
            reasons.append(f"their standard deviations differ by a factor of {ratio:.3g} (above {ratio_limit:g})")
        return "standardize", reasons
    if ratio is not None and ratio > ratio_limit:
        reasons.append(
            f"the standard deviations differ by a factor of {ratio:.3g} (above {ratio_limit:g}): "
            "standardize, or the largest-scale features would dominate the components"
        )
        return "standardize", reasons
    unit = next(iter(found)) if found else None
    what = f"all features are in {unit}" if unit else "no unit differences are visible in the column names"
    reasons.append(
        f"{what} and their spreads are comparable (largest / smallest standard deviation "
        f"{ratio:.3g}, at most {ratio_limit:g}): center only, so that the variance keeps its physical meaning"
    )
    return "center", reasons
