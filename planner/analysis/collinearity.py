"""Multicollinearity: variance inflation, exact linear dependencies, condition indices.

All three are functions of the Moments: the correlation matrix R for VIF and for the
dependencies, the uncentred cross-product matrix with an intercept for the condition
indices of Belsley, Kuh and Welsch.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import scipy.linalg

from ..moments import Moments

#: Relative eigenvalue tolerance below which R counts as singular: numpy's numerical-rank
#: rule (largest eigenvalue x p x machine epsilon), widened 100-fold so that values read
#: from decimal text, whose exact sums carry rounding of about 1e-16, still count as exact.
RANK_TOLERANCE_FACTOR = 100.0


def rank_tolerance(largest: float, p: int) -> float:
    """The eigenvalue at or below which a p x p symmetric matrix whose largest eigenvalue
    is ``largest`` counts as singular in that direction (an exact zero, rounded)."""
    return max(float(largest), 0.0) * p * np.finfo(float).eps * RANK_TOLERANCE_FACTOR


@dataclass
class Spectrum:
    """Symmetric eigendecomposition of a correlation matrix, eigenvalues descending."""

    values: np.ndarray
    vectors: np.ndarray
    tolerance: float

    @property
    def rank(self) -> int:
        return int(np.sum(self.values > self.tolerance))

    @property
    def singular(self) -> bool:
        return self.rank < len(self.values)


def spectrum(r: np.ndarray) -> Spectrum:
    """Eigenvalues (descending) and eigenvectors of the symmetric matrix ``r``."""
    values, vectors = np.linalg.eigh(r)
    order = np.argsort(values)[::-1]
    values, vectors = values[order], vectors[:, order]
    p = r.shape[0]
    tol = rank_tolerance(values[0], p)
    return Spectrum(values=values, vectors=vectors, tolerance=tol)


@dataclass
class VifResult:
    """Variance inflation factors VIF_j = (R^-1)_jj; None with ``reason`` when undefined."""

    values: dict[str, float | None]
    reason: str | None
    maximum: float | None


def variance_inflation(r: np.ndarray, columns: list[str], n: int, spec: Spectrum) -> VifResult:
    """Variance inflation factors from the diagonal of the inverse correlation matrix.

    VIF_j = (R^-1)_jj = 1 / (1 - R_j^2), where R_j^2 is the coefficient of determination of
    feature j regressed on all the others with an intercept; one inversion gives them all.
    Undefined (None) when p >= n or when R is singular.

    References
    ----------
    D. W. Marquardt (1970), "Generalized inverses, ridge regression, biased linear
    estimation, and nonlinear estimation", Technometrics 12(3), 591-612.
    """
    p = len(columns)
    if p >= n:
        reason = f"undefined: {p} features and {n} rows (p >= n), so R is singular"
        return VifResult({c: None for c in columns}, reason, None)
    if spec.singular:
        reason = (
            f"undefined: R is singular (rank {spec.rank} of {p}); the exact dependencies "
            "are named under exact_dependencies"
        )
        return VifResult({c: None for c in columns}, reason, None)
    # R^-1 from the eigendecomposition: diag(V diag(1/l) V^T).
    inv_diag = (spec.vectors**2) @ (1.0 / spec.values)
    values = {c: float(max(v, 1.0)) for c, v in zip(columns, inv_diag)}
    return VifResult(values, None, float(max(values.values())))


@dataclass
class Term:
    column: str
    coefficient: float


@dataclass
class LinearDependency:
    """``target = constant + sum(coefficient * column)`` holds exactly on the rows used."""

    target: str
    terms: list[Term]
    constant: float
    text: str


def _format_coefficient(value: float) -> str:
    rounded = round(value)
    if abs(value - rounded) < 1e-9 * max(1.0, abs(value)):
        return str(int(rounded))
    return f"{value:.6g}"


def _dependency_text(target: str, terms: list[Term], constant: float) -> str:
    parts = []
    for t in terms:
        c = t.coefficient
        sign = "-" if c < 0 else "+"
        mag = abs(c)
        body = t.column if abs(mag - 1.0) < 1e-9 else f"{_format_coefficient(mag)} * {t.column}"
        parts.append((sign, body))
    if not parts:
        text = f"{target} = {constant:.6g}"
        return text
    first_sign, first = parts[0]
    text = ("-" if first_sign == "-" else "") + first
    for sign, body in parts[1:]:
        text += f" {sign} {body}"
    if abs(constant) > 1e-9:
        text += f" {'-' if constant < 0 else '+'} {abs(constant):.6g}"
    return f"{target} = {text}"


def exact_dependencies(moments: Moments, spec: Spectrum, max_named: int = 50) -> tuple[list[LinearDependency], str | None]:
    """Name the exact linear dependencies among the features, from the null space of R.

    Each null vector v of R says sum_j v_j (x_j - mean_j) / sd_j = 0. The null-space basis
    is brought to reduced echelon form on pivot features chosen by column-pivoted QR (the
    feature with the largest standardized weight becomes the left-hand side), so that
    each dependency names one feature as a combination of features that are not pivots,
    and its coefficients are given in the features' own units.

    Returns the dependencies and a reason when they are not named (p >= n).
    """
    p = moments.p
    if not spec.singular:
        return [], None
    if p >= moments.n:
        return [], f"not named: with {p} features and {moments.n} rows every set of {moments.n} features is dependent"
    null = spec.vectors[:, spec.values <= spec.tolerance]  # p x m
    m = null.shape[1]
    if m > max_named:
        return [], f"not named: R has {m} null directions, more than {max_named}"
    basis = null.T  # m x p
    _, _, piv = scipy.linalg.qr(basis, pivoting=True)
    pivots = list(piv[:m])
    # Reduced echelon form with respect to the pivots: A[:, pivots] = I.
    reduced = np.linalg.solve(basis[:, pivots], basis)
    pivots = _readable_targets(reduced, pivots)
    sd = moments.std()
    mean = moments.mean
    found: list[LinearDependency] = []
    for row, pivot in zip(reduced, pivots):
        row = row / row[pivot]
        # sum_j row_j * z_j = 0 with z_j = (x_j - mean_j)/sd_j and row_pivot = 1:
        # x_pivot = mean_pivot - sd_pivot * sum_{j != pivot} row_j (x_j - mean_j)/sd_j
        weights = -sd[pivot] * row / sd
        weights[pivot] = 0.0
        small = np.abs(row) < 1e-8
        weights[small] = 0.0
        terms = [Term(moments.columns[j], float(weights[j])) for j in range(p) if weights[j] != 0.0]
        constant = float(mean[pivot] - np.dot(weights, mean))
        target = moments.columns[pivot]
        found.append(LinearDependency(target, terms, constant, _dependency_text(target, terms, constant)))
    return found, None


def _readable_targets(reduced: np.ndarray, pivots: list[int]) -> list[int]:
    """Choose, for each dependency, the feature that reads best as its left-hand side.

    A dependency such as ``total - a - b = 0`` can be written for any of its features; it
    reads best as ``total = a + b``, for the one feature whose sign differs from all the
    others (so all coefficients are positive), the later one in file order breaking ties
    (derived columns usually follow their parts). A new choice is kept only when the
    chosen features still identify every dependency (their submatrix stays invertible).
    """
    chosen = list(pivots)
    for i, row in enumerate(reduced):
        involved = [j for j in range(len(row)) if abs(row[j]) > 1e-8]
        positive = [j for j in involved if row[j] > 0]
        negative = [j for j in involved if row[j] < 0]
        lone = [grp[0] for grp in (positive, negative) if len(grp) == 1 and len(involved) > 1]
        candidates = sorted(lone) if lone else []
        if not candidates:
            continue
        target = candidates[-1]
        if target == chosen[i] or target in chosen:
            continue
        trial = chosen[:i] + [target] + chosen[i + 1 :]
        if abs(np.linalg.det(reduced[:, trial])) > 1e-8:
            chosen = trial
    return chosen


@dataclass
class NearDependency:
    """A condition index above the threshold and the features it involves."""

    index_number: int
    condition_index: float
    features: list[str]


@dataclass
class ConditionIndices:
    """Belsley-Kuh-Welsch condition indices and variance-decomposition proportions.

    ``proportions[name][k]`` is the share of the variance of coefficient ``name`` that is
    associated with the k-th singular value; columns sum to 1 over k.
    """

    scaling: str
    indices: list[float | None]
    proportions: dict[str, list[float]]
    threshold: float
    near_dependencies: list[NearDependency]
    reason: str | None = None
    terms: list[str] = field(default_factory=list)


INTERCEPT = "(intercept)"


def condition_indices(moments: Moments, threshold: float = 30.0, proportion: float = 0.5) -> ConditionIndices:
    """Condition indices and variance-decomposition proportions (Belsley, Kuh and Welsch).

    The design matrix is the features with a column of ones, each column scaled to unit
    length without centring, as Belsley, Kuh and Welsch recommend. With singular values
    d_1 >= ... >= d_q of that matrix and right singular vectors V, the condition indices
    are d_1 / d_k and the proportion of the variance of coefficient j due to dimension k is
    (v_jk^2 / d_k^2) / sum_l (v_jl^2 / d_l^2). From the Moments the cross-product matrix
    X^T X = comoment + n mean mean^T is formed and eigendecomposed (d_k^2 are its
    eigenvalues). A dimension with a zero singular value has an infinite index (None) and
    its proportions are computed on the non-null dimensions only.

    For each index above ``threshold``, two or more coefficients (the intercept included)
    whose proportions on that dimension exceed ``proportion`` form a near-dependency.

    References
    ----------
    D. A. Belsley, E. Kuh and R. E. Welsch (1980), Regression Diagnostics: Identifying
    Influential Data and Sources of Collinearity, Wiley, chapter 3.
    """
    n, p = moments.n, moments.p
    mean = moments.mean
    gram = np.empty((p + 1, p + 1))
    gram[0, 0] = n
    gram[0, 1:] = gram[1:, 0] = n * mean
    gram[1:, 1:] = moments.comoment + n * np.outer(mean, mean)
    length = np.sqrt(np.diag(gram))
    scaled = gram / np.outer(length, length)
    values, vectors = np.linalg.eigh(scaled)
    order = np.argsort(values)[::-1]
    values, vectors = values[order], vectors[:, order]
    tol = rank_tolerance(values[0], p + 1)
    keep = values > tol
    d = np.sqrt(np.where(keep, values, np.nan))
    indices = [float(d[0] / dk) if np.isfinite(dk) else None for dk in d]
    phi = np.where(keep[None, :], vectors**2 / np.where(keep, values, 1.0)[None, :], 0.0)
    pi = phi / phi.sum(axis=1, keepdims=True)
    names = [INTERCEPT, *moments.columns]
    proportions = {name: [float(x) for x in pi[j]] for j, name in enumerate(names)}
    near = []
    for k, eta in enumerate(indices):
        if eta is not None and eta > threshold:
            involved = [names[j] for j in range(p + 1) if pi[j, k] > proportion]
            # A near-dependency needs two or more coefficients with high proportions on
            # the same dimension (Belsley, Kuh and Welsch 1980, section 3.3).
            if len(involved) >= 2:
                near.append(NearDependency(k + 1, eta, involved))
    reason = None
    if not keep.all():
        reason = (
            f"{int((~keep).sum())} dimension(s) have a zero singular value (an exact dependency): "
            "their indices are infinite (null) and the proportions use the other dimensions"
        )
    return ConditionIndices(
        scaling="columns with an intercept, scaled to unit length, not centred (Belsley, Kuh and Welsch 1980)",
        indices=indices,
        proportions=proportions,
        threshold=float(threshold),
        near_dependencies=near,
        reason=reason,
        terms=names,
    )


def condition_number(spec: Spectrum) -> tuple[float | None, str | None]:
    """sqrt(largest / smallest eigenvalue) of R; None with a reason when R is singular."""
    if spec.singular:
        return None, f"undefined: R is singular (rank {spec.rank} of {len(spec.values)})"
    return float(np.sqrt(spec.values[0] / spec.values[-1])), None
