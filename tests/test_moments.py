"""Moments: one-pass, chunked and merged statistics against numpy and scipy.

References: numpy.cov (divisor n - 1) and scipy.stats.skew / scipy.stats.kurtosis with
bias=True are the outside computations; the merge formulas are Chan, Golub and LeVeque
(1979) and Pebay (2008).
"""
from __future__ import annotations

import numpy as np
import pytest
import scipy.stats
from hypothesis import given, settings
from hypothesis import strategies as st

from planner.moments import Moments


def _close(a, b, rel=1e-12):
    a, b = np.asarray(a, float), np.asarray(b, float)
    scale = max(1.0, float(np.max(np.abs(b))) if b.size else 1.0)
    assert np.all(np.abs(a - b) <= rel * scale), (a, b)


@st.composite
def matrices_and_splits(draw):
    n = draw(st.integers(min_value=3, max_value=60))
    p = draw(st.integers(min_value=1, max_value=6))
    seed = draw(st.integers(min_value=0, max_value=2**31 - 1))
    rng = np.random.default_rng(seed)
    spread = draw(st.sampled_from([1e-2, 1.0, 10.0, 1e3]))
    # Offsets up to 100 spreads: 1e-12 is then above the rounding of the data itself
    # (a far larger offset is tested on its own below).
    loc = spread * draw(st.sampled_from([0.0, 1.0, -10.0, 100.0]))
    x = loc + spread * rng.standard_normal((n, p))
    cuts = sorted(draw(st.lists(st.integers(min_value=1, max_value=n - 1), max_size=6, unique=True)))
    order = draw(st.permutations(list(range(len(cuts) + 1))))
    return x, cuts, order


@settings(max_examples=150, deadline=None)
@given(matrices_and_splits())
def test_any_split_merged_in_any_order_equals_the_whole(case):
    x, cuts, order = case
    cols = [f"c{j}" for j in range(x.shape[1])]
    whole = Moments.from_array(x, cols)
    pieces = [Moments.from_array(part, cols) for part in np.split(x, cuts)]
    merged = Moments(cols)
    for i in order:
        merged = merged.merge(pieces[i])
    assert merged.n == whole.n == x.shape[0]
    _close(merged.mean, whole.mean)
    _close(merged.comoment, whole.comoment)
    _close(merged.m3, whole.m3, rel=1e-10)
    _close(merged.m4, whole.m4, rel=1e-10)
    assert np.array_equal(merged.minimum, whole.minimum)
    assert np.array_equal(merged.maximum, whole.maximum)


@settings(max_examples=100, deadline=None)
@given(matrices_and_splits())
def test_chunked_updates_equal_numpy_cov(case):
    x, cuts, _ = case
    cols = [f"c{j}" for j in range(x.shape[1])]
    streamed = Moments(cols)
    for part in np.split(x, cuts):
        streamed.update(part)
    # Reference: numpy.cov, divisor n - 1.
    reference = np.atleast_2d(np.cov(x, rowvar=False))
    scale = np.max(np.abs(reference))
    assert np.max(np.abs(streamed.covariance() - reference)) <= 1e-12 * max(scale, 1.0) * 10
    assert np.allclose(streamed.mean, x.mean(axis=0), rtol=1e-12, atol=1e-12 * np.abs(x).max())


def test_skewness_and_kurtosis_equal_scipy():
    rng = np.random.default_rng(3)
    x = np.column_stack([rng.exponential(2.0, 500), rng.standard_normal(500), rng.gamma(0.5, size=500)])
    m = Moments(["a", "b", "c"])
    for part in np.array_split(x, 7):
        m.update(part)
    # Reference: scipy.stats.skew and kurtosis (Fisher, biased moment ratios).
    np.testing.assert_allclose(m.skewness(), scipy.stats.skew(x, axis=0, bias=True), rtol=1e-10)
    np.testing.assert_allclose(m.excess_kurtosis(), scipy.stats.kurtosis(x, axis=0, bias=True), rtol=1e-10)


def test_correlation_equals_numpy_corrcoef():
    rng = np.random.default_rng(11)
    x = rng.standard_normal((200, 5)) @ rng.standard_normal((5, 5))
    m = Moments.from_array(x, list("abcde"))
    np.testing.assert_allclose(m.correlation(), np.corrcoef(x, rowvar=False), rtol=1e-12, atol=1e-14)


def test_update_counts_missing_and_uses_complete_rows_only():
    x = np.array([[1.0, 2.0], [np.nan, 3.0], [4.0, np.nan], [5.0, 7.0], [2.0, 1.0]])
    m = Moments(["a", "b"]).update(x)
    assert m.rows_seen == 5 and m.n == 3
    assert m.missing.tolist() == [1, 1]
    complete = x[[0, 3, 4]]
    np.testing.assert_allclose(m.covariance(), np.cov(complete, rowvar=False), rtol=1e-12)


def test_merge_leaves_operands_unchanged_and_counts_zeros():
    a = Moments.from_array(np.array([[0.0, 1.0], [2.0, 0.0]]), ["x", "y"])
    b = Moments.from_array(np.array([[0.0, 5.0]]), ["x", "y"])
    before = a.comoment.copy()
    merged = a.merge(b)
    assert np.array_equal(a.comoment, before)
    assert merged.zeros.tolist() == [2, 1]


def test_merge_refuses_different_columns():
    a = Moments.from_array(np.ones((2, 2)) * [[1, 2], [3, 4]], ["x", "y"])
    b = Moments.from_array(np.ones((2, 2)) * [[1, 2], [3, 4]], ["y", "x"])
    with pytest.raises(ValueError):
        a.merge(b)


def test_large_offset_does_not_lose_precision():
    # Data far from zero: the naive sum-of-squares formula loses every digit here.
    rng = np.random.default_rng(5)
    x = 1e9 + rng.standard_normal((1000, 2))
    m = Moments(["a", "b"])
    for part in np.array_split(x, 9):
        m.update(part)
    np.testing.assert_allclose(m.covariance(), np.cov(x, rowvar=False), rtol=1e-7)


@pytest.mark.parametrize("block_rows", [1000, 8192, 50_000])
def test_blocked_moments_of_a_long_table_far_from_zero_equal_numpy_and_scipy(block_rows):
    # References: numpy.cov (divisor n - 1, two-pass) and scipy.stats.moment (central
    # moments, divisor n). The table sits a million spreads from zero and spans several
    # blocks, so the block merges and the centring are both exercised.
    rng = np.random.default_rng(1979)
    n, p = 20_000, 4
    x = 1e6 + rng.standard_normal((n, p)) @ np.array([[1.0, 0.3, 0.0, 0.1], [0, 1, 0.5, 0], [0, 0, 1, 0.2], [0, 0, 0, 2.0]])
    x = np.asfortranarray(x)
    cols = [f"c{j}" for j in range(p)]
    m = Moments.from_array(x, cols, block_rows=block_rows)
    assert m.n == n
    np.testing.assert_allclose(m.mean, x.mean(axis=0), rtol=1e-15)
    np.testing.assert_allclose(m.covariance(), np.cov(x, rowvar=False), rtol=1e-11)
    np.testing.assert_allclose(m.m3 / n, scipy.stats.moment(x, 3, axis=0), rtol=1e-7, atol=1e-12)
    np.testing.assert_allclose(m.m4 / n, scipy.stats.moment(x, 4, axis=0), rtol=1e-11)
    assert np.array_equal(m.minimum, x.min(axis=0)) and np.array_equal(m.maximum, x.max(axis=0))


def test_rows_with_a_missing_value_are_counted_not_used():
    # Reference: numpy.cov of the complete rows (numpy.isnan picks them).
    rng = np.random.default_rng(5)
    x = rng.standard_normal((30_000, 3))
    x[[10, 9000, 25_000], [0, 2, 1]] = np.nan
    m = Moments.from_array(x, ["a", "b", "c"], block_rows=4096)
    complete = x[~np.isnan(x).any(axis=1)]
    assert m.n == len(complete) == 29_997 and m.rows_seen == 30_000
    assert list(m.missing) == [1, 1, 1]
    np.testing.assert_allclose(m.covariance(), np.cov(complete, rowvar=False), rtol=1e-12)


def test_spans_on_two_threads_give_numpy_and_scipy_figures(monkeypatch):
    # planner.parallel cuts the rows into spans run on two threads: the merged Moments equal
    # numpy.cov, and the row pass's squared Mahalanobis distances equal scipy's
    # (scipy.spatial.distance.mahalanobis with the inverse covariance).
    from scipy.spatial.distance import mahalanobis

    from planner import parallel
    from planner.analysis.collinearity import spectrum
    from planner.analysis.rowpass import mahalanobis_distances, one_pass_row_figures
    from planner.pipeline import compute_moments

    monkeypatch.setattr(parallel, "SPAN_ROWS", 700)
    monkeypatch.setattr(parallel, "cores", lambda: 2)
    rng = np.random.default_rng(65)
    x = np.asfortranarray(rng.standard_normal((5000, 4)) @ rng.uniform(-1, 1, (4, 4)) + 3.0)
    cols = ["a", "b", "c", "d"]
    assert len(parallel.spans(len(x))) == 7
    m = compute_moments(x, cols, {})
    np.testing.assert_allclose(m.covariance(), np.cov(x, rowvar=False), rtol=1e-12)
    inverse = np.linalg.inv(np.cov(x, rowvar=False))
    expected = np.array([mahalanobis(row, x.mean(axis=0), inverse) ** 2 for row in x[:300]])
    spec = spectrum(m.correlation())
    np.testing.assert_allclose(mahalanobis_distances(x, m, spec, block_rows=64)[:300], expected, rtol=1e-10)
    values, vectors = np.linalg.eigh(m.covariance())
    both = one_pass_row_figures(x, m.mean, np.ones(4), vectors[:, ::-1], values[::-1], 2, spec.rank, block_rows=64)
    np.testing.assert_allclose(both.mahalanobis_d2[:300], expected, rtol=1e-10)
    # A rank the model's directions do not match: the distances are left to the screen.
    assert one_pass_row_figures(x, m.mean, np.ones(4), vectors[:, ::-1], values[::-1], 2, 3).mahalanobis_d2 is None
