"""Loading stability: is each kept component a stable direction or noise?"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np


def tucker_congruence(a: np.ndarray, b: np.ndarray) -> float:
    """Tucker's congruence coefficient sum(a b) / sqrt(sum(a^2) sum(b^2)).

    References
    ----------
    L. R. Tucker (1951), "A method for synthesis of factor analysis studies", Personnel
    Research Section Report 984, Department of the Army.
    """
    return float(np.dot(a, b) / np.sqrt(np.dot(a, a) * np.dot(b, b)))


def congruence_band(phi: float) -> str:
    """Lorenzo-Seva and ten Berge's (2006) reading: >= 0.95 equal, 0.85-0.94 fair, else not."""
    if phi >= 0.95:
        return "equal (stable)"
    if phi >= 0.85:
        return "fair similarity"
    return "not similar (unstable)"


@dataclass
class ComponentStability:
    component: str
    median: float
    low: float          # 5th percentile over resamples
    band: str


def loading_stability(rows: np.ndarray, matrix_of_rows, loadings: np.ndarray, k: int, seed: int,
                      resamples: int = 200) -> list[ComponentStability]:
    """Bootstrap the rows, recompute the components, and compare each kept one with the
    full-data one by Tucker's congruence (matched to the best bootstrap component, sign
    ignored). The band of the 5th percentile is reported.

    References
    ----------
    U. Lorenzo-Seva and J. M. F. ten Berge (2006), "Tucker's congruence coefficient as a
    meaningful index of factor similarity", Methodology 2(2), 57-64.
    """
    rng = np.random.default_rng([seed, 21])
    n = rows.shape[0]
    target = loadings[:, :k]
    found = [[] for _ in range(k)]
    for _ in range(resamples):
        m = matrix_of_rows(rows[rng.integers(0, n, n)])
        if m is None:
            continue
        values, vectors = np.linalg.eigh(m)
        order = np.argsort(values)[::-1][: min(len(values), k + 2)]
        boot = vectors[:, order]
        phi = np.abs(target.T @ boot)  # unit vectors: the congruence is the dot product
        for c in range(k):
            found[c].append(float(np.max(phi[c])))
    out = []
    for c in range(k):
        values = np.array(found[c])
        low = float(np.percentile(values, 5))
        out.append(ComponentStability(f"PC{c + 1}", float(np.median(values)), low, congruence_band(low)))
    return out
