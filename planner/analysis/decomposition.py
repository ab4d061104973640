"""The decomposition: eigenvalues and loadings of the scaled features' covariance.

Two routes give the same figures:

* n > p: the symmetric eigendecomposition of the p x p matrix formed from the Moments;
* p >= n: the thin SVD of the scaled, centred rows (no p x p matrix is needed); only the
  min(n - 1, p) components with non-zero variance exist.

Eigenvalues have the n - 1 divisor. Sign convention: each loading vector is signed so that
its element of largest absolute value is positive (the first such element on a tie), which
makes the loadings deterministic whatever the LAPACK build.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..moments import Moments
from .distributions import norm_ppf
from .scaling import Scaling


@dataclass
class Decomposition:
    """Eigenvalues (descending), explained ratios, unit-norm loadings (p x q)."""

    route: str
    eigenvalues: np.ndarray
    explained_ratio: np.ndarray
    loadings: np.ndarray
    trace: float
    n: int
    reason: str | None = None

    @property
    def cumulative(self) -> np.ndarray:
        return np.cumsum(self.explained_ratio)


def sign_convention(vectors: np.ndarray) -> np.ndarray:
    """Flip each column so that its element of largest absolute value is positive."""
    idx = np.argmax(np.abs(vectors), axis=0)
    signs = np.sign(vectors[idx, np.arange(vectors.shape[1])])
    signs[signs == 0] = 1.0
    return vectors * signs


def complete_basis(vectors: np.ndarray) -> np.ndarray:
    """``vectors`` (p x q, orthonormal columns) followed by an orthonormal basis of the space
    orthogonal to them (scipy.linalg.null_space, from an SVD), signed by the convention:
    the eigenvectors of the zero eigenvalues of a p x p matrix of rank q. Any such basis is
    one; this one is deterministic."""
    import scipy.linalg

    p, q = vectors.shape
    if q >= p:
        return vectors
    rest = scipy.linalg.null_space(vectors.T)
    return np.concatenate([vectors, sign_convention(rest[:, : p - q])], axis=1)


def decompose_matrix(matrix: np.ndarray, n: int) -> Decomposition:
    """Eigendecomposition of the symmetric p x p matrix decomposed (numpy.linalg.eigh)."""
    values, vectors = np.linalg.eigh(matrix)
    order = np.argsort(values)[::-1]
    values, vectors = values[order], vectors[:, order]
    values = np.clip(values, 0.0, None)  # a covariance matrix has no negative eigenvalues
    trace = float(np.trace(matrix))
    return Decomposition(
        route="eigendecomposition of the p x p matrix from the Moments",
        eigenvalues=values,
        explained_ratio=values / trace,
        loadings=sign_convention(vectors),
        trace=trace,
        n=n,
    )


#: With more rows than features, a wide table keeps the loadings of this many components.
WIDE_LOADINGS = 100


def decompose_wide_rows(z: np.ndarray) -> Decomposition:
    """A table with more rows than features but too many features for the Moments' p x p
    matrix: every eigenvalue from the cross-product of the scaled rows, and the loadings of
    the leading WIDE_LOADINGS components from a partial symmetric eigensolver."""
    import scipy.linalg

    n, p = z.shape
    centred = z - z.mean(axis=0)
    gram = centred.T @ centred / (n - 1)
    values = np.clip(np.linalg.eigvalsh(gram)[::-1], 0.0, None)
    q = min(p, WIDE_LOADINGS)
    _, vectors = scipy.linalg.eigh(gram, subset_by_index=[p - q, p - 1])
    trace = float(np.trace(gram))
    return Decomposition(
        route=f"cross-product of the scaled rows (wide table: loadings of the first {q} components)",
        eigenvalues=values,
        explained_ratio=values / trace,
        loadings=sign_convention(vectors[:, ::-1]),
        trace=trace,
        n=n,
    )


def decompose_rows(z: np.ndarray) -> Decomposition:
    """Thin SVD of the scaled rows (p >= n): eigenvalues s^2 / (n - 1), loadings V."""
    n, p = z.shape
    if n > p:
        return decompose_wide_rows(z)
    centred = z - z.mean(axis=0)
    q = min(n - 1, p)
    if p > 2 * n:
        # The n x n Gram route: Z Z^T = U S^2 U^T and V = Z^T U / S, no p x p matrix.
        g_values, g_vectors = np.linalg.eigh(centred @ centred.T)
        order = np.argsort(g_values)[::-1][:q]
        s = np.sqrt(np.clip(g_values[order], 0.0, None))
        vt = ((centred.T @ g_vectors[:, order]) / np.where(s > 0, s, 1.0)).T
        route = "n x n Gram matrix of the scaled rows (p >> n)"
    else:
        _, s, vt = np.linalg.svd(centred, full_matrices=False)
        route = "thin SVD of the scaled rows (p >= n)"
    values = s[:q] ** 2 / (n - 1)
    trace = float(np.sum(centred**2) / (n - 1))
    return Decomposition(
        route=route,
        eigenvalues=values,
        explained_ratio=values / trace,
        loadings=sign_convention(vt[:q].T),
        trace=trace,
        n=n,
        reason=f"p >= n: only the {q} components with non-zero variance exist; the other {p - q} eigenvalues are exactly 0 "
               "(listed as 0, their loadings an orthonormal basis of the null space)",
    )


def decompose(moments: Moments, scaling: Scaling, rows: np.ndarray | None) -> Decomposition:
    """Choose the route by shape and decompose."""
    if moments.p >= moments.n or not moments.full:
        if rows is None:
            raise ValueError("the SVD route needs the rows")
        return decompose_rows(scaling.transform(rows))
    return decompose_matrix(scaling.matrix(moments), moments.n)


# ---------------------------------------------------------------------- intervals
@dataclass
class Intervals:
    """Confidence intervals for each eigenvalue and for the cumulative explained share."""

    method: str
    level: float
    eigenvalue_low: np.ndarray
    eigenvalue_high: np.ndarray
    cumulative_low: np.ndarray
    cumulative_high: np.ndarray
    resamples: int | None
    note: str


def anderson_intervals(d: Decomposition, level: float = 0.95) -> Intervals:
    """Asymptotic intervals under multivariate normality (Anderson 1963).

    A distinct eigenvalue l_k of a sample covariance matrix is asymptotically normal with
    variance 2 lambda_k^2 / (n - 1), which gives l_k / (1 +- z sqrt(2 / (n - 1))). For the
    cumulative share s_k = sum_{i<=k} l_i / T the delta method gives
    var(s_k) = 2 / (n - 1) [(1 - s_k)^2 sum_{i<=k} l_i^2 + s_k^2 sum_{i>k} l_i^2] / T^2.
    For a correlation matrix this is an approximation.

    References
    ----------
    T. W. Anderson (1963), "Asymptotic theory for principal component analysis", Annals of
    Mathematical Statistics 34(1), 122-148.
    """
    z = norm_ppf(0.5 + level / 2)
    c = np.sqrt(2.0 / (d.n - 1))
    values = d.eigenvalues
    low = values / (1 + z * c)
    high = np.where(1 - z * c > 0, values / max(1 - z * c, 1e-300), np.inf)
    total = float(np.sum(values))
    cum = np.cumsum(values) / total
    sq = values**2
    head = np.cumsum(sq)
    tail = np.clip(np.sum(sq) - head, 0.0, None)  # rounding can leave a tiny negative
    se = np.sqrt(np.clip(2.0 / (d.n - 1) * ((1 - cum) ** 2 * head + cum**2 * tail), 0.0, None)) / total
    return Intervals(
        method="asymptotic (Anderson 1963)",
        level=level,
        eigenvalue_low=low,
        eigenvalue_high=high,
        cumulative_low=np.clip(cum - z * se, 0, 1),
        cumulative_high=np.clip(cum + z * se, 0, 1),
        resamples=None,
        note="normal-theory asymptotics; for a correlation matrix an approximation",
    )


def bootstrap_intervals(
    rows: np.ndarray, scaling_method: str, make_matrix, level: float = 0.95, resamples: int = 200, seed: int = 0,
    sample_note: str | None = None,
) -> Intervals:
    """Percentile intervals from a row bootstrap (Efron 1979).

    ``make_matrix(sample)`` returns the matrix decomposed for a resample of rows, with the
    centring and scaling re-estimated on the resample.
    """
    rng = np.random.default_rng(seed)
    n = rows.shape[0]
    values, cums = [], []
    for _ in range(resamples):
        sample = rows[rng.integers(0, n, n)]
        m = make_matrix(sample)
        if m is None:
            continue
        ev = np.clip(np.linalg.eigvalsh(m)[::-1], 0, None)
        values.append(ev)
        cums.append(np.cumsum(ev) / ev.sum())
    values, cums = np.array(values), np.array(cums)
    alpha = (1 - level) / 2 * 100
    note = f"{len(values)} row resamples, percentile intervals"
    if sample_note:
        note += f"; {sample_note}"
    return Intervals(
        method="row bootstrap",
        level=level,
        eigenvalue_low=np.percentile(values, alpha, axis=0),
        eigenvalue_high=np.percentile(values, 100 - alpha, axis=0),
        cumulative_low=np.percentile(cums, alpha, axis=0),
        cumulative_high=np.percentile(cums, 100 - alpha, axis=0),
        resamples=len(values),
        note=note,
    )
