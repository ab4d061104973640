"""Kaiser-Meyer-Olkin measure of sampling adequacy, overall and per variable."""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .collinearity import Spectrum

#: Kaiser's (1974) verbal bands, lower bound first.
KAISER_BANDS = (
    (0.9, "marvelous"),
    (0.8, "meritorious"),
    (0.7, "middling"),
    (0.6, "mediocre"),
    (0.5, "miserable"),
    (0.0, "unacceptable"),
)


def kaiser_band(value: float | None) -> str | None:
    """Kaiser's (1974) word for a KMO value."""
    if value is None:
        return None
    for bound, word in KAISER_BANDS:
        if value >= bound:
            return word
    return "unacceptable"


@dataclass
class KmoResult:
    """Overall and per-variable KMO, Kaiser's bands, and the features below ``floor``."""

    overall: float | None
    overall_band: str | None
    per_variable: dict[str, float | None]
    per_variable_band: dict[str, str | None]
    candidates_to_drop: list[str]
    floor: float
    reason: str | None


def kmo(r: np.ndarray, columns: list[str], spec: Spectrum, n: int, floor: float = 0.5) -> KmoResult:
    """Kaiser-Meyer-Olkin measure of sampling adequacy.

    With r_ij the correlations and a_ij = -S_ij / sqrt(S_ii S_jj) the partial correlations
    from S = R^-1, KMO = sum_{i != j} r_ij^2 / (sum_{i != j} r_ij^2 + sum_{i != j} a_ij^2),
    and the measure of variable j restricts both sums to i != j in row j. Undefined when R
    is singular or p >= n (R^-1 does not exist).

    References
    ----------
    H. F. Kaiser (1970), "A second generation little jiffy", Psychometrika 35(4), 401-415.
    H. F. Kaiser and J. Rice (1974), "Little jiffy, mark IV", Educational and Psychological
    Measurement 34(1), 111-117.
    H. F. Kaiser (1974), "An index of factorial simplicity", Psychometrika 39(1), 31-36.
    """
    p = len(columns)
    if p >= n or spec.singular:
        why = f"{p} features and {n} rows (p >= n)" if p >= n else f"R is singular (rank {spec.rank} of {p})"
        return KmoResult(None, None, {c: None for c in columns}, {c: None for c in columns}, [], floor, f"undefined: {why}, so R^-1 does not exist")
    s = (spec.vectors / spec.values) @ spec.vectors.T
    d = np.sqrt(np.diag(s))
    partial = -s / np.outer(d, d)
    off = ~np.eye(p, dtype=bool)
    r2 = np.where(off, r**2, 0.0)
    a2 = np.where(off, partial**2, 0.0)
    total = float(r2.sum() + a2.sum())
    if total == 0.0:  # every correlation and every partial correlation is exactly 0
        none = {c: None for c in columns}
        return KmoResult(None, None, none, none, [], floor, "undefined: every correlation between the features is 0")
    overall = float(r2.sum() / total)
    row_r, row_a = r2.sum(axis=1), a2.sum(axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        per = row_r / (row_r + row_a)
    per_variable = {c: (float(v) if np.isfinite(v) else None) for c, v in zip(columns, per)}
    bands = {c: kaiser_band(v) for c, v in per_variable.items()}
    drop = [c for c, v in per_variable.items() if v is not None and v < floor]
    return KmoResult(overall, kaiser_band(overall), per_variable, bands, drop, floor, None)
