"""Sufficient statistics of a numeric table, computed in one pass and mergeable.

Every matrix-level figure of the analysis (correlation, VIF, Bartlett, KMO, eigenvalues,
retention rules, variance discarded) is a function of a :class:`Moments` object alone, so
that the same analysis runs on a table in memory, on chunks streamed from disk, or on
partitions computed elsewhere and merged.

The merge uses the pairwise formulas of Chan, Golub and LeVeque for the mean and the
co-moment matrix, extended to the third and fourth central moments as in Pebay.

References
----------
T. F. Chan, G. H. Golub and R. J. LeVeque (1979), "Updating formulae and a pairwise
algorithm for computing sample variances", Stanford CS report STAN-CS-79-773.
P. Pebay (2008), "Formulas for robust, one-pass parallel computation of covariances and
arbitrary-order statistical moments", Sandia report SAND2008-6212.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

#: Rows a block: about 3 MB at 100 features, so that the blocks of two threads and their
#: temporaries stay in the processor's cache together.
BLOCK_ROWS = 4096


@dataclass
class Moments:
    """One-pass, mergeable moments of ``p`` numeric columns.

    Attributes
    ----------
    columns : list of str
        Column names, in file order.
    n : int
        Number of complete rows accumulated (rows with a missing value in any column are
        counted in ``rows_seen`` and ``missing`` but do not enter the moments).
    mean : ndarray (p,)
        ``shift + offset`` (read-only): the mean is held as a reference point taken from
        the first rows and the offset from it, so that merging the moments of blocks whose
        means are far from zero compares small offsets, not large means that have each
        been rounded (which would cost digits of every co-moment).
    shift, offset : ndarray (p,)
    comoment : ndarray (p, p)
        Sum over rows of ``(x - mean)(x - mean)^T``; the covariance is
        ``comoment / (n - 1)``.
    m3, m4 : ndarray (p,)
        Sums of third and fourth powers of deviations from the mean, per column.
    minimum, maximum : ndarray (p,)
    zeros : ndarray (p,) of int
        Number of exact zeros per column (among complete rows).
    missing : ndarray (p,) of int
        Number of missing values per column among all rows seen.
    rows_seen : int
        All rows offered to :meth:`update`, complete or not.
    m2 : ndarray (p,)
        Sums of squared deviations per column (the diagonal of ``comoment``).
    full : bool
        With False only per-column moments are kept (``comoment`` is None): the wide-table
        route, where a p x p matrix is neither needed nor affordable.
    """

    columns: list[str]
    n: int = 0
    shift: np.ndarray = field(default=None)  # type: ignore[assignment]
    offset: np.ndarray = field(default=None)  # type: ignore[assignment]
    comoment: np.ndarray = field(default=None)  # type: ignore[assignment]
    m3: np.ndarray = field(default=None)  # type: ignore[assignment]
    m4: np.ndarray = field(default=None)  # type: ignore[assignment]
    minimum: np.ndarray = field(default=None)  # type: ignore[assignment]
    maximum: np.ndarray = field(default=None)  # type: ignore[assignment]
    zeros: np.ndarray = field(default=None)  # type: ignore[assignment]
    missing: np.ndarray = field(default=None)  # type: ignore[assignment]
    rows_seen: int = 0
    m2: np.ndarray = field(default=None)  # type: ignore[assignment]
    full: bool = True

    def __post_init__(self) -> None:
        self.columns = list(self.columns)
        p = len(self.columns)
        if self.offset is None:
            self.shift = np.zeros(p)
            self.offset = np.zeros(p)
            self.comoment = np.zeros((p, p)) if self.full else None
            self.m2 = np.zeros(p)
            self.m3 = np.zeros(p)
            self.m4 = np.zeros(p)
            self.minimum = np.full(p, np.inf)
            self.maximum = np.full(p, -np.inf)
            self.zeros = np.zeros(p, dtype=np.int64)
            self.missing = np.zeros(p, dtype=np.int64)

    @property
    def p(self) -> int:
        return len(self.columns)

    @property
    def mean(self) -> np.ndarray:
        return self.shift + self.offset

    # ------------------------------------------------------------------ building
    @classmethod
    def from_array(
        cls, x: np.ndarray, columns: list[str], full: bool = True, block_rows: int = BLOCK_ROWS,
        extremes: tuple[np.ndarray, np.ndarray, np.ndarray] | None = None, with_extremes: bool = True,
    ) -> "Moments":
        """Moments of a whole array, in blocks of rows that stay in the processor's cache
        (each block's moments merged in as a chunk; the result does not depend on the
        block size beyond rounding). ``extremes`` (minimum, maximum, zeros per column of
        exactly these rows, when the reader already gathered them) spares those passes;
        ``with_extremes=False`` leaves them for the caller to set (:meth:`set_extremes`)."""
        moments = cls(columns, full=full)
        for start in range(0, max(x.shape[0], 1), block_rows):
            moments.update(x[start : start + block_rows], with_extremes and extremes is None)
        if extremes is not None:
            moments.set_extremes(*extremes)
        return moments

    def set_extremes(self, minimum: np.ndarray, maximum: np.ndarray, zeros: np.ndarray) -> None:
        """Set the per-column minimum, maximum and count of exact zeros (known already)."""
        self.minimum, self.maximum = np.asarray(minimum, float).copy(), np.asarray(maximum, float).copy()
        self.zeros = np.asarray(zeros, dtype=np.int64).copy()

    def update(self, chunk: np.ndarray, extremes: bool = True) -> "Moments":
        """Add the rows of ``chunk`` (shape ``(m, p)``, NaN for missing) and return self.

        The chunk's own moments are computed with two passes over the chunk (its mean,
        then the centred cross-product ``D^T D`` through BLAS), then merged in.
        """
        chunk = np.asarray(chunk, dtype=np.float64)
        if chunk.ndim != 2 or chunk.shape[1] != self.p:
            raise ValueError(f"chunk must have shape (m, {self.p}), got {chunk.shape}")
        self.rows_seen += chunk.shape[0]
        if chunk.shape[0] == 0:
            return self
        # A NaN anywhere makes its column's sum NaN: the full look at the holes is only
        # needed then (an infinity can make a sum NaN too; the look then finds no hole).
        sums = np.ones(chunk.shape[0]) @ chunk
        if np.isnan(sums).any():
            nan = np.isnan(chunk)
            self.missing = self.missing + nan.sum(axis=0)
            chunk = chunk[~nan.any(axis=1)]
            if chunk.shape[0] == 0:
                return self
            sums = np.ones(chunk.shape[0]) @ chunk
        other = Moments._of_complete_rows(chunk, self.columns, self.full, sums, self.shift if self.n else None, extremes)
        self._merge_in(other)
        return self

    @staticmethod
    def _of_complete_rows(
        x: np.ndarray, columns: list[str], full: bool = True, sums: np.ndarray | None = None, shift: np.ndarray | None = None,
        extremes: bool = True,
    ) -> "Moments":
        """Two-pass moments of complete rows: deviations d from the first mean, then the
        exact central sums from d and its mean c (which is rounding-sized), folded in
        analytically instead of by a second subtraction:
        sum (d - c)(d - c)^T = D^T D - m c c^T, sum (d - c)^3 = S3 - 3c S2 + 2m c^3,
        sum (d - c)^4 = S4 - 4c S3 + 6c^2 S2 - 3m c^4.
        The mean is returned as ``shift`` (the given one, else the first mean) and the
        offset (first mean - shift) + c. Without ``extremes`` the minimum, maximum and zero
        count are left empty (the caller knows them)."""
        m = x.shape[0]
        ones = np.ones(m)
        mean = (ones @ x if sums is None else sums) / m
        if shift is None:
            shift = mean
        d = x - mean
        c = (ones @ d) / m  # the correction that keeps the mean exact to rounding far from 0
        d2 = d * d
        s2 = ones @ d2
        s3 = np.einsum("ij,ij->j", d2, d)
        s4 = np.einsum("ij,ij->j", d2, d2)
        comoment = None
        if full:
            comoment = d.T @ d
            comoment -= m * np.outer(c, c)
        return Moments(
            columns=columns,
            n=m,
            shift=shift.copy(),
            offset=(mean - shift) + c,
            comoment=comoment,
            m2=s2 - m * c * c,
            full=full,
            m3=s3 - 3.0 * c * s2 + 2.0 * m * c**3,
            m4=s4 - 4.0 * c * s3 + 6.0 * c * c * s2 - 3.0 * m * c**4,
            minimum=x.min(axis=0) if extremes else np.full(len(columns), np.inf),
            maximum=x.max(axis=0) if extremes else np.full(len(columns), -np.inf),
            zeros=np.count_nonzero(x == 0, axis=0).astype(np.int64) if extremes else np.zeros(len(columns), dtype=np.int64),
            missing=np.zeros(len(columns), dtype=np.int64),
            rows_seen=0,
        )

    def merge(self, other: "Moments") -> "Moments":
        """Return the moments of the union of the rows of ``self`` and ``other``.

        Neither operand is changed. The columns must be the same, in the same order.
        """
        if list(other.columns) != self.columns:
            raise ValueError("cannot merge moments of different columns")
        if other.full != self.full:
            raise ValueError("cannot merge full and per-column moments")
        result = self.copy()
        result._merge_in(other)
        result.missing = self.missing + other.missing
        result.rows_seen = self.rows_seen + other.rows_seen
        return result

    def _merge_in(self, b: "Moments") -> None:
        """Chan-Golub-LeVeque pairwise update of self (a) with b, in place.

        Missing counts and ``rows_seen`` are the caller's business.
        """
        na, nb = self.n, b.n
        if nb == 0:
            return
        if na == 0:
            self.n, self.shift, self.offset = nb, b.shift.copy(), b.offset.copy()
            self.comoment = b.comoment.copy() if self.full else None
            self.m2 = b.m2.copy()
            self.m3, self.m4 = b.m3.copy(), b.m4.copy()
            self.minimum = np.minimum(self.minimum, b.minimum)
            self.maximum = np.maximum(self.maximum, b.maximum)
            self.zeros = self.zeros + b.zeros
            return
        n = na + nb
        # Two nearby shifts subtract exactly (Sterbenz); the offsets are small.
        delta = (b.shift - self.shift) + (b.offset - self.offset)
        m2a, m2b = self.m2, b.m2
        self.m4 = (
            self.m4
            + b.m4
            + delta**4 * na * nb * (na * na - na * nb + nb * nb) / n**3
            + 6.0 * delta**2 * (na * na * m2b + nb * nb * m2a) / n**2
            + 4.0 * delta * (na * b.m3 - nb * self.m3) / n
        )
        self.m3 = (
            self.m3
            + b.m3
            + delta**3 * na * nb * (na - nb) / n**2
            + 3.0 * delta * (na * m2b - nb * m2a) / n
        )
        if self.full:
            self.comoment = self.comoment + b.comoment + np.outer(delta, delta) * (na * nb / n)
        self.m2 = m2a + m2b + delta**2 * (na * nb / n)
        self.offset = self.offset + delta * (nb / n)
        self.n = n
        self.minimum = np.minimum(self.minimum, b.minimum)
        self.maximum = np.maximum(self.maximum, b.maximum)
        self.zeros = self.zeros + b.zeros

    def copy(self) -> "Moments":
        return Moments(
            columns=list(self.columns),
            n=self.n,
            shift=self.shift.copy(),
            offset=self.offset.copy(),
            comoment=self.comoment.copy() if self.full else None,
            m2=self.m2.copy(),
            full=self.full,
            m3=self.m3.copy(),
            m4=self.m4.copy(),
            minimum=self.minimum.copy(),
            maximum=self.maximum.copy(),
            zeros=self.zeros.copy(),
            missing=self.missing.copy(),
            rows_seen=self.rows_seen,
        )

    def subset(self, columns: list[str]) -> "Moments":
        """The moments of some of the columns (exact: every statistic is per column or pair)."""
        idx = [self.columns.index(c) for c in columns]
        return Moments(
            columns=list(columns),
            n=self.n,
            shift=self.shift[idx].copy(),
            offset=self.offset[idx].copy(),
            comoment=self.comoment[np.ix_(idx, idx)].copy() if self.full else None,
            m2=self.m2[idx].copy(),
            full=self.full,
            m3=self.m3[idx].copy(),
            m4=self.m4[idx].copy(),
            minimum=self.minimum[idx].copy(),
            maximum=self.maximum[idx].copy(),
            zeros=self.zeros[idx].copy(),
            missing=self.missing[idx].copy(),
            rows_seen=self.rows_seen,
        )

    # ------------------------------------------------------------------ figures
    def covariance(self) -> np.ndarray:
        """Sample covariance matrix, divisor ``n - 1``."""
        if self.n < 2:
            raise ValueError("the covariance needs at least two complete rows")
        if not self.full:
            raise ValueError("per-column moments have no covariance matrix")
        return self.comoment / (self.n - 1)

    def std(self) -> np.ndarray:
        """Sample standard deviation per column, divisor ``n - 1``."""
        if self.n < 2:
            raise ValueError("the standard deviation needs at least two complete rows")
        return np.sqrt(np.clip(self.m2 / (self.n - 1), 0.0, None))

    def correlation(self) -> np.ndarray:
        """Pearson correlation matrix. Columns with zero variance give NaN rows."""
        if not self.full:
            raise ValueError("per-column moments have no correlation matrix")
        diag = self.m2
        with np.errstate(divide="ignore", invalid="ignore"):
            inv = 1.0 / np.sqrt(diag)
            r = self.comoment * np.outer(inv, inv)
        np.fill_diagonal(r, np.where(diag > 0, 1.0, np.nan))
        return r

    def skewness(self) -> np.ndarray:
        """Sample skewness g1 = m3 / m2^(3/2) with population moments (biased form)."""
        with np.errstate(divide="ignore", invalid="ignore"):
            m2 = self.m2 / self.n
            return (self.m3 / self.n) / m2**1.5

    def excess_kurtosis(self) -> np.ndarray:
        """Sample excess kurtosis g2 = m4 / m2^2 - 3 with population moments."""
        with np.errstate(divide="ignore", invalid="ignore"):
            m2 = self.m2 / self.n
            return (self.m4 / self.n) / m2**2 - 3.0
