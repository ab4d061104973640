"""The passes over the rows: the figures that belong to each row rather than to the table.

Every matrix-level figure comes from the Moments. Three figures are per row and need the
rows once more: the squared Mahalanobis distance (the outlier screen, before the scaling is
chosen) and, once the components are chosen, SPE and Hotelling's T-squared. Each pass
walks the rows in blocks that fit in the processor's cache and folds the scaling into the
projection matrices, so a block is centred once and multiplied once; nothing of the size
of the table is allocated besides the figures themselves (one number a row).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..moments import BLOCK_ROWS, Moments
from .collinearity import Spectrum, rank_tolerance


def each_block(n: int, step, block_rows: int = BLOCK_ROWS) -> None:
    """``step(start, stop)`` for every block of rows; the spans of :mod:`planner.parallel`
    run on the processor's cores (each step writes its own rows of the outputs)."""
    from ..parallel import run_spans

    def span(first: int, last: int) -> None:
        for start in range(first, last, block_rows):
            step(start, min(start + block_rows, last))

    run_spans(n, span)


def mahalanobis_projection(moments: Moments, spec: Spectrum) -> np.ndarray:
    """W with d^2 = ||(x - mean) W||^2 for the squared Mahalanobis distance.

    d^2 = z^T R^+ z, z the row standardized by the Moments and R^+ the inverse of the
    correlation matrix on its non-null eigenvectors V (eigenvalues l):
    W = diag(1 / sd) V diag(1 / sqrt(l)).
    """
    keep = spec.values > spec.tolerance
    return (spec.vectors[:, keep] / np.sqrt(spec.values[keep])) / moments.std()[:, None]


def mahalanobis_distances(rows: np.ndarray, moments: Moments, spec: Spectrum, block_rows: int = BLOCK_ROWS) -> np.ndarray:
    """Squared Mahalanobis distance of every row from the mean (see :func:`mahalanobis_projection`)."""
    w = mahalanobis_projection(moments, spec)
    mean = moments.mean
    out = np.empty(rows.shape[0])

    def step(start: int, stop: int) -> None:
        scores = (rows[start:stop] - mean) @ w
        out[start:stop] = np.einsum("ij,ij->i", scores, scores)

    each_block(rows.shape[0], step, block_rows)
    return out


@dataclass
class ModelRowFigures:
    """SPE and T-squared of every row under the chosen component model."""

    spe: np.ndarray
    t2: np.ndarray


def model_row_figures(
    rows: np.ndarray, center: np.ndarray, scale: np.ndarray, loadings: np.ndarray, eigenvalues: np.ndarray, k: int,
    block_rows: int = BLOCK_ROWS,
) -> ModelRowFigures:
    """SPE = ||z - t P_k^T||^2 and T^2 = sum_c t_c^2 / l_c of every row, z = (x - center) / scale,
    t = z P_k; the residual is formed explicitly (not ||z||^2 - ||t||^2), so a small SPE keeps
    its digits."""
    p_k = loadings[:, :k]
    with np.errstate(divide="ignore"):
        inverse_eigen = 1.0 / eigenvalues[:k]
    n = rows.shape[0]
    spe, t2 = np.empty(n), np.empty(n)

    def step(start: int, stop: int) -> None:
        z = rows[start:stop] - center
        z /= scale
        t = z @ p_k
        with np.errstate(invalid="ignore"):
            t2[start:stop] = (t * t) @ inverse_eigen
        z -= (p_k @ t.T).T  # laid out like z (column-major), so the subtraction streams
        spe[start:stop] = np.einsum("ij,ij->i", z, z)

    each_block(n, step, block_rows)
    return ModelRowFigures(spe, t2)


def largest_first(values: np.ndarray, count: int) -> np.ndarray:
    """Indices of the ``count`` largest values, largest first, ties in row order: what a
    stable descending sort gives, without sorting every row. NaN ranks last."""
    values = np.where(np.isnan(values), -np.inf, values)
    if len(values) <= count:
        return np.argsort(-values, kind="stable")
    cut = np.partition(values, len(values) - count)[len(values) - count]
    candidates = np.flatnonzero(values >= cut)
    return candidates[np.argsort(-values[candidates], kind="stable")][:count]


@dataclass
class AllRowFigures:
    """The three per-row figures from one pass: squared Mahalanobis distance (None when the
    model's directions do not match the correlation matrix's rank), SPE and T-squared."""

    mahalanobis_d2: np.ndarray | None
    model: ModelRowFigures


def one_pass_row_figures(
    rows: np.ndarray, center: np.ndarray, scale: np.ndarray, loadings: np.ndarray, eigenvalues: np.ndarray, k: int,
    rank: int, block_rows: int = BLOCK_ROWS,
) -> AllRowFigures:
    """Squared Mahalanobis distance, SPE and T-squared of every row from a single product
    with the complete set of p loadings P of the scaled covariance (eigenvalues l):
    t = z P, z = (x - center) / scale, and
      T^2 = sum_{c <= k} t_c^2 / l_c,   SPE = sum_{c > k} t_c^2 (= ||z - t_k P_k^T||^2, P orthonormal),
      d^2 = sum over the non-null c of t_c^2 / l_c.
    The last is the Mahalanobis distance whatever the scaling: a diagonal rescaling of the
    features leaves it unchanged, and for rows in the range of a singular covariance any
    generalized inverse gives the same value, so it equals z^T R^+ z of the outlier screen.
    ``rank`` is the rank of the correlation matrix; when the model's non-null directions
    number otherwise (a borderline tolerance), d^2 is None and the caller uses
    :func:`mahalanobis_distances`.
    """
    p = loadings.shape[0]
    lam = np.asarray(eigenvalues, float)
    non_null = lam > rank_tolerance(lam[0], p)
    with np.errstate(divide="ignore"):
        inverse = np.where(non_null, 1.0 / np.where(non_null, lam, 1.0), 0.0)
    # One product of the squared scores with three weight columns gives the three sums.
    weights = np.zeros((p, 3))
    weights[:k, 0] = inverse[:k]
    weights[k:, 1] = 1.0
    weights[:, 2] = inverse
    projection = loadings / scale[:, None]  # the scaling folded into P
    n = rows.shape[0]
    sums = np.empty((n, 3))

    def step(start: int, stop: int) -> None:
        scores = (rows[start:stop] - center) @ projection
        np.square(scores, out=scores)
        sums[start:stop] = scores @ weights

    each_block(n, step, block_rows)
    d2 = sums[:, 2] if int(non_null.sum()) == rank else None
    return AllRowFigures(d2, ModelRowFigures(spe=sums[:, 1], t2=sums[:, 0]))


def model_and_screen_figures(
    rows: np.ndarray, moments: Moments, spec: Spectrum, center: np.ndarray, scale: np.ndarray, loadings: np.ndarray,
    eigenvalues: np.ndarray, k: int,
) -> tuple[ModelRowFigures, np.ndarray]:
    """SPE and T-squared of the model, and the squared Mahalanobis distances of the outlier
    screen, of every row: in one pass (:func:`one_pass_row_figures`) when the model holds
    all p loadings and its non-null directions match the rank of R, else the model's
    figures and the distances each in a pass of their own."""
    if loadings.shape[1] == moments.p:
        both = one_pass_row_figures(rows, center, scale, loadings, eigenvalues, k, spec.rank)
        figures, d2 = both.model, both.mahalanobis_d2
    else:
        figures, d2 = model_row_figures(rows, center, scale, loadings, eigenvalues, k), None
    if d2 is None:
        d2 = mahalanobis_distances(rows, moments, spec)
    return figures, d2
