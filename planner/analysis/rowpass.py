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
from .collinearity import Spectrum


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
    out = np.empty(rows.shape[0])
    for start in range(0, rows.shape[0], block_rows):
        scores = (rows[start : start + block_rows] - moments.mean) @ w
        out[start : start + len(scores)] = np.einsum("ij,ij->i", scores, scores)
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
    for start in range(0, n, block_rows):
        z = rows[start : start + block_rows] - center
        z /= scale
        t = z @ p_k
        stop = start + len(z)
        with np.errstate(invalid="ignore"):
            t2[start:stop] = (t * t) @ inverse_eigen
        z -= (p_k @ t.T).T  # laid out like z (column-major), so the subtraction streams
        spe[start:stop] = np.einsum("ij,ij->i", z, z)
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
