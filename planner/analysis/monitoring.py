"""Per-row figures of the component model: SPE (Q residual) and Hotelling's T-squared, with
their control limits. These need a second pass over the rows."""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .distributions import chi2_ppf, f_ppf, norm_ppf


@dataclass
class SpeLimit:
    level: float
    value: float | None
    method: str
    h0: float | None


def spe_limit(residual_eigenvalues: np.ndarray, level: float = 0.95, negligible: float = 0.0) -> SpeLimit:
    """Upper control limit of the squared prediction error of a PCA model.

    With theta_i = sum over the discarded components of l^i (i = 1, 2, 3) and
    h0 = 1 - 2 theta1 theta3 / (3 theta2^2), Jackson and Mudholkar's limit is
    theta1 [z sqrt(2 theta2 h0^2) / theta1 + 1 + theta2 h0 (h0 - 1) / theta1^2]^(1/h0).
    Where h0 <= 0 that approximation fails and Box's g chi2(h), g = theta2 / theta1,
    h = theta1^2 / theta2, is used instead (the result says which). Discarded eigenvalues
    at or below ``negligible`` (rounding of an exact zero) count as zero; with nothing else
    discarded the limit is 0 and no row lies beyond it (see :func:`beyond_limit`).

    References
    ----------
    J. E. Jackson and G. S. Mudholkar (1979), "Control procedures for residuals associated
    with principal component analysis", Technometrics 21(3), 341-349.
    G. E. P. Box (1954), "Some theorems on quadratic forms applied in the study of
    analysis of variance problems, I", Annals of Mathematical Statistics 25(2), 290-302.
    """
    lam = np.clip(np.asarray(residual_eigenvalues, float), 0.0, None)
    lam = lam[lam > negligible]
    theta1, theta2, theta3 = (float(np.sum(lam**i)) for i in (1, 2, 3))
    if theta1 <= 0 or theta2 <= 0:
        return SpeLimit(level, 0.0, "no discarded variance: every row is reproduced exactly", None)
    h0 = 1.0 - 2.0 * theta1 * theta3 / (3.0 * theta2**2)
    if h0 > 0:
        z = norm_ppf(level)
        inner = z * np.sqrt(2.0 * theta2 * h0**2) / theta1 + 1.0 + theta2 * h0 * (h0 - 1.0) / theta1**2
        if inner > 0:
            return SpeLimit(level, float(theta1 * inner ** (1.0 / h0)), "Jackson and Mudholkar (1979)", float(h0))
    g, h = theta2 / theta1, theta1**2 / theta2
    return SpeLimit(level, float(g * chi2_ppf(level, h)), "Box (1954) g chi2(h), since h0 <= 0", float(h0))


def beyond_limit(values: np.ndarray, limit: float | None) -> np.ndarray:
    """Which rows lie beyond ``limit``. A limit of 0 means nothing was discarded: the rows
    the model was fitted on then have no discarded part, and what a computed SPE shows is
    rounding, so none is beyond."""
    values = np.asarray(values)
    if limit is None or limit <= 0:
        return np.zeros(values.shape, dtype=bool)
    return values > limit


def t2_limit(k: int, n: int, level: float = 0.95) -> float | None:
    """k (n - 1) / (n - k) F(level; k, n - k), the limit of Hotelling's T-squared of a row of
    the data the model was fitted on (Jackson 1991, A User's Guide to Principal Components).
    """
    if n - k <= 0:
        return None
    return float(k * (n - 1) / (n - k) * f_ppf(level, k, n - k))


@dataclass
class RowFigures:
    scores: np.ndarray   # (n, k)
    spe: np.ndarray      # (n,)
    t2: np.ndarray       # (n,)
    residual: np.ndarray  # (n, p) scaled residuals


def row_figures(z: np.ndarray, loadings: np.ndarray, eigenvalues: np.ndarray, k: int) -> RowFigures:
    """Scores, SPE = ||z - t P^T||^2 and T^2 = sum_c t_c^2 / l_c of scaled rows z."""
    p_k = loadings[:, :k]
    scores = z @ p_k
    residual = z - scores @ p_k.T
    spe = np.sum(residual**2, axis=1)
    with np.errstate(divide="ignore", invalid="ignore"):
        t2 = np.sum(scores**2 / eigenvalues[:k], axis=1)
    return RowFigures(scores, spe, t2, residual)


def contributions(residual_row: np.ndarray, columns: list[str], top: int = 3) -> list[dict]:
    """The features a row's SPE comes from: each one's share of the squared residual."""
    sq = residual_row**2
    total = float(sq.sum())
    order = np.argsort(-sq, kind="stable")[:top]
    return [{"column": columns[j], "share": float(sq[j] / total) if total > 0 else 0.0, "residual": float(residual_row[j])} for j in order]
