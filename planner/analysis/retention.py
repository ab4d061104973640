"""Retention rules: how many components to keep, each published rule on its own.

Every rule is a function that returns a :class:`RuleResult` with its ``k`` (or None with a
reason) and the evidence it decided on. They read the eigenvalues of the matrix that was
decomposed; Velicer's MAP reads the correlation matrix, and cross-validation reads rows.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
import scipy.special

from .collinearity import rank_tolerance
from .random_matrix import marchenko_pastur_median, marchenko_pastur_null

#: Minka's evidence is evaluated at every rank up to this many features, else up to MINKA_MAX_RANK.
MINKA_FULL_FEATURES = 500
MINKA_MAX_RANK = 100
#: Above this dimension parallel analysis uses the Marchenko-Pastur null instead of draws.
SIMULATION_MAX_DIM = 400

RULE_IDS = (
    "kaiser",
    "cumulative_variance",
    "scree_elbow",
    "parallel_analysis",
    "broken_stick",
    "velicer_map",
    "minka",
    "gavish_donoho",
    "cross_validation",
)


@dataclass
class RuleResult:
    """One rule's answer: ``k`` (None with ``reason`` when undefined) and its evidence."""

    rule_id: str
    k: int | None
    source: str
    evidence: dict = field(default_factory=dict)
    reason: str | None = None


def _leading_run(flags) -> int:
    """Number of leading True values (rules that stop at the first failure)."""
    count = 0
    for flag in flags:
        if not flag:
            break
        count += 1
    return count


# ---------------------------------------------------------------------- Kaiser-Guttman
def kaiser(eigenvalues: np.ndarray, standardized: bool) -> RuleResult:
    """Keep the components whose eigenvalue exceeds the average eigenvalue.

    On a correlation matrix the average is 1 (the eigenvalue-above-one rule); on a
    covariance matrix it is trace / p. Known to overestimate (Zwick and Velicer 1986).

    References
    ----------
    L. Guttman (1954), "Some necessary conditions for common-factor analysis",
    Psychometrika 19(2), 149-161.
    H. F. Kaiser (1960), "The application of electronic computers to factor analysis",
    Educational and Psychological Measurement 20(1), 141-151.
    """
    p = len(eigenvalues)
    threshold = 1.0 if standardized else float(np.sum(eigenvalues) / p)
    k = int(np.sum(eigenvalues > threshold))
    return RuleResult("kaiser", k, "Guttman (1954); Kaiser (1960)", {"threshold": threshold})


# ---------------------------------------------------------------------- cumulative share
def cumulative_variance(explained_ratio: np.ndarray, share: float = 0.80) -> RuleResult:
    """The smallest k whose components explain at least ``share`` of the total variance.

    References
    ----------
    I. T. Jolliffe (2002), Principal Component Analysis, 2nd ed., Springer, section 6.1.1
    (cut-offs between 70% and 90% are discussed).
    """
    cum = np.cumsum(explained_ratio)
    reached = np.flatnonzero(cum >= share - 1e-12)
    k = int(reached[0] + 1) if reached.size else len(cum)
    return RuleResult("cumulative_variance", k, "Jolliffe (2002), section 6.1.1", {"share": share, "cumulative": cum})


# ---------------------------------------------------------------------- scree
def optimal_coordinates(eigenvalues: np.ndarray, threshold: np.ndarray | None = None) -> tuple[int, np.ndarray]:
    """Raiche et al.'s optimal coordinates: eigenvalue i against the line through i+1 and p.

    The prediction of eigenvalue i is the line through (i + 1, l_{i+1}) and (p, l_p)
    evaluated at i; k is the last component whose eigenvalue exceeds its prediction and,
    when ``threshold`` is given (the mean parallel-analysis eigenvalues), that threshold.
    """
    lam = np.asarray(eigenvalues, float)
    p = len(lam)
    predicted = np.full(p, np.nan)
    for i in range(p - 2):  # 0-based: components 1 .. p-2
        slope = (lam[p - 1] - lam[i + 1]) / (p - 1 - (i + 1))
        predicted[i] = lam[i + 1] - slope
    keep = [
        bool(i < p - 2 and lam[i] > predicted[i] and (threshold is None or lam[i] > threshold[i]))
        for i in range(p)
    ]
    # The last component that beats both its extrapolation and the null: equal leading
    # eigenvalues (several factors of one size) fail the extrapolation but not this.
    hits = np.flatnonzero(keep)
    return (int(hits[-1]) + 1 if hits.size else 0), predicted


def acceleration_factor(eigenvalues: np.ndarray) -> tuple[int, np.ndarray]:
    """Raiche et al.'s acceleration factor: k = (argmax of l_{i+1} - 2 l_i + l_{i-1}) - 1."""
    lam = np.asarray(eigenvalues, float)
    af = np.full(len(lam), np.nan)
    if len(lam) >= 3:
        af[1:-1] = lam[2:] - 2 * lam[1:-1] + lam[:-2]
        elbow = int(np.nanargmax(af))  # 0-based position of the elbow
        return max(elbow, 1), af
    return 1, af


def scree_elbow(eigenvalues: np.ndarray, null_mean: np.ndarray | None) -> RuleResult:
    """An objective scree test: the optimal coordinates (acceleration factor as evidence).

    References
    ----------
    G. Raiche, T. A. Walls, D. Magis, M. Riopel and J.-G. Blais (2013), "Non-graphical
    solutions for Cattell's scree test", Methodology 9(1), 23-29.
    R. B. Cattell (1966), "The scree test for the number of factors", Multivariate
    Behavioral Research 1(2), 245-276.
    """
    k_oc, predicted = optimal_coordinates(eigenvalues, null_mean)
    k_af, af = acceleration_factor(eigenvalues)
    return RuleResult(
        "scree_elbow",
        k_oc,
        "Raiche et al. (2013), optimal coordinates; Cattell (1966)",
        {"method": "optimal coordinates", "predicted": predicted, "acceleration_factor": af, "k_acceleration_factor": k_af},
    )


# ---------------------------------------------------------------------- parallel analysis
def wishart_null_eigenvalues(
    p: int, dof: int, draws: int, rng: np.random.Generator, correlation: bool, variances: np.ndarray | None = None,
    batch: int = 16,
) -> np.ndarray:
    """Eigenvalues (descending) of null matrices W / dof, W ~ Wishart(dof, I_p).

    W is drawn by the Bartlett decomposition W = L L^T, L lower triangular with
    L_ii = sqrt(chi2(dof - i + 1)) and standard normal entries below the diagonal, so a
    draw costs O(p^3) whatever the number of rows. With ``correlation`` the draw is turned
    into a correlation matrix; with ``variances`` into the covariance of independent
    features of those variances.

    References
    ----------
    M. S. Bartlett (1933), "On the theory of statistical regression", Proceedings of the
    Royal Society of Edinburgh 53, 260-283 (the decomposition).
    """
    out = np.empty((draws, p))
    for start, lower in bartlett_factors(p, dof, draws, rng, batch):
        w = lower @ np.transpose(lower, (0, 2, 1)) / dof
        if correlation:
            d = 1.0 / np.sqrt(np.diagonal(w, axis1=1, axis2=2))
            w = w * d[:, :, None] * d[:, None, :]
        elif variances is not None:
            s = np.sqrt(variances)
            w = w * s[None, :, None] * s[None, None, :]
        out[start : start + len(lower)] = np.linalg.eigvalsh(w)[:, ::-1]
    return out


def bartlett_factors(p: int, dof: int, draws: int, rng: np.random.Generator, batch: int = 16):
    """Batches of Bartlett factors L (W = L L^T ~ Wishart(dof, I_p)): L_ii = sqrt(chi2(dof -
    i + 1)), standard normal below the diagonal. Yields (index of the first draw, L batch)."""
    tril = np.tril_indices(p, -1)
    diag = np.arange(p)
    dfs = dof - np.arange(p)  # chi2 degrees of freedom dof, dof - 1, ..., dof - p + 1
    for start in range(0, draws, batch):
        b = min(batch, draws - start)
        lower = np.zeros((b, p, p))
        lower[:, diag, diag] = np.sqrt(rng.chisquare(dfs, size=(b, p)))
        lower[:, tril[0], tril[1]] = rng.standard_normal((b, len(tril[0])))
        yield start, lower


def parallel_analysis(
    eigenvalues: np.ndarray,
    n: int,
    p: int,
    rng: np.random.Generator,
    standardized: bool,
    variances: np.ndarray | None = None,
    draws: int = 1000,
    percentile: float = 95.0,
    permuted_rows: np.ndarray | None = None,
    make_matrix=None,
    sequential: bool = True,
) -> RuleResult:
    """Horn's parallel analysis: keep components above the null eigenvalues' percentile.

    The null is independent normal features with the observed n (and, for a covariance
    matrix, the observed variances), drawn from Wishart(n - 1, I) by the Bartlett
    decomposition; the decision uses the 95th percentile of each null eigenvalue
    (Glorfeld 1995), the mean is kept as evidence. With ``permuted_rows`` the null is
    instead each column of the real data permuted independently (``make_matrix`` turns a
    permuted table into the matrix decomposed). When p >= n the Wishart dual of dimension
    n - 1 is used (its non-zero eigenvalues are those of the p x p null).

    The Wishart draws are sequential (Besag and Clifford 1991): after the first
    PA_FIRST_DRAWS and every PA_STEP_DRAWS more, the draws stop once the decision is
    settled, that is once, for every component up to the first one not kept, the 99.9%
    Clopper-Pearson interval of the share of null eigenvalues above it lies wholly on one
    side of 5%; else they go on to ``draws``. Clear-cut tables thus need a fifth of the
    draws, close calls all of them. The record gives the number of draws used. With
    ``sequential=False`` all ``draws`` are made.

    References
    ----------
    J. L. Horn (1965), "A rationale and test for the number of factors in factor
    analysis", Psychometrika 30(2), 179-185.
    L. W. Glorfeld (1995), "An improvement on Horn's parallel analysis methodology for
    selecting the correct number of factors to retain", Educational and Psychological
    Measurement 55(3), 377-393.
    J. Besag and P. Clifford (1991), "Sequential Monte Carlo p-values", Biometrika 78(2),
    301-304.
    C. J. Clopper and E. S. Pearson (1934), "The use of confidence or fiducial limits
    illustrated in the case of the binomial", Biometrika 26(4), 404-413.
    """
    lam = np.asarray(eigenvalues, float)
    q = len(lam)
    if permuted_rows is None and min(p, n - 1) > SIMULATION_MAX_DIM:
        scale = 1.0 if standardized or variances is None else float(np.mean(variances))
        upper, mean = marchenko_pastur_null(q, p, n, scale, percentile)
        return RuleResult(
            "parallel_analysis",
            _leading_run(lam > upper),
            "Horn (1965); large-table null of Marchenko and Pastur (1967) with Tracy-Widom fluctuation (Johnstone 2001)",
            {"method": "Marchenko-Pastur quantiles (no simulation above "
                       f"{SIMULATION_MAX_DIM} dimensions)", "draws": 0, "percentile": percentile,
             "null_percentile": upper, "null_mean": mean, "k_mean": _leading_run(lam > mean)},
        )
    if permuted_rows is not None:
        null = np.empty((draws, q))
        x = permuted_rows.copy()
        for b in range(draws):
            for j in range(x.shape[1]):
                x[:, j] = rng.permutation(permuted_rows[:, j])
            null[b] = np.clip(np.linalg.eigvalsh(make_matrix(x))[::-1][:q], 0, None)
        method = "column permutation of the data"
    elif p < n:
        def draw(count):
            return wishart_null_eigenvalues(p, n - 1, count, rng, correlation=standardized,
                                            variances=None if standardized else variances)

        null = sequential_null(draw, lam, draws, percentile) if sequential else draw(draws)
        method = "Wishart(n - 1, I) by the Bartlett decomposition, sequential draws"
    else:
        def draw(count):
            dual = wishart_null_eigenvalues(n - 1, p, count, rng, correlation=False)
            null = dual * (p / (n - 1))  # eigenvalues of X^T X / (n - 1) for X of shape (n - 1, p)
            if not standardized and variances is not None:
                null = null * float(np.mean(variances))
            return null[:, :q]

        null = sequential_null(draw, lam, draws, percentile) if sequential else draw(draws)
        method = "Wishart dual of dimension n - 1 (p >= n), sequential draws"
    draws = null.shape[0]
    upper = np.percentile(null, percentile, axis=0)
    mean = null.mean(axis=0)
    k = _leading_run(lam > upper)
    return RuleResult(
        "parallel_analysis",
        k,
        "Horn (1965); 95th percentile, Glorfeld (1995)",
        {"method": method, "draws": draws, "percentile": percentile, "null_percentile": upper, "null_mean": mean,
         "k_mean": _leading_run(lam > mean)},
    )


#: Sequential parallel analysis: first look, step between looks, confidence of a settled call.
PA_FIRST_DRAWS = 200
PA_STEP_DRAWS = 100
PA_CONFIDENCE = 0.999


def clopper_pearson(successes: np.ndarray, trials: int, confidence: float) -> tuple[np.ndarray, np.ndarray]:
    """Exact two-sided binomial confidence interval for a proportion (Clopper and Pearson
    1934), from the beta quantiles."""
    e = np.asarray(successes, float)
    tail = (1.0 - confidence) / 2.0
    with np.errstate(invalid="ignore"):
        low = np.where(e > 0, scipy.special.betaincinv(e, trials - e + 1, tail), 0.0)
        high = np.where(e < trials, scipy.special.betaincinv(e + 1, trials - e, 1.0 - tail), 1.0)
    return low, high


def decision_settled(lam: np.ndarray, null: np.ndarray, percentile: float, confidence: float = PA_CONFIDENCE) -> bool:
    """Whether more null draws could still change the leading-run decision: every component
    up to the first one not kept must lie clearly above (or, for that one, clearly below)
    the null percentile, judged by the interval of the share of draws at or above it."""
    alpha = 1.0 - percentile / 100.0
    above = (null >= lam[: null.shape[1]]).sum(axis=0)
    low, high = clopper_pearson(above, null.shape[0], confidence)
    for i in range(null.shape[1]):
        if high[i] < alpha:  # clearly above the null percentile: kept, look at the next one
            continue
        return bool(low[i] > alpha)  # the first one not clearly kept must be clearly not kept
    return True


def sequential_null(draw, lam: np.ndarray, max_draws: int, percentile: float) -> np.ndarray:
    """Null eigenvalues from ``draw(count)`` in steps until :func:`decision_settled`, or
    ``max_draws`` (Besag and Clifford 1991)."""
    parts = [draw(min(PA_FIRST_DRAWS, max_draws))]
    total = len(parts[0])
    while total < max_draws and not decision_settled(lam, np.concatenate(parts), percentile):
        parts.append(draw(min(PA_STEP_DRAWS, max_draws - total)))
        total += len(parts[-1])
    return np.concatenate(parts)


# ---------------------------------------------------------------------- broken stick
def broken_stick_expectations(p: int) -> np.ndarray:
    """b_k = (1/p) sum_{i=k}^{p} 1/i, the expected share of the k-th longest piece."""
    inv = 1.0 / np.arange(1, p + 1)
    return np.cumsum(inv[::-1])[::-1] / p


def broken_stick(explained_ratio: np.ndarray, p: int, total: float = 1.0) -> RuleResult:
    """Keep components while their share exceeds the broken-stick expectation (the evidence
    also gives the expectation on the eigenvalue scale, ``total`` times the share).

    References
    ----------
    S. Frontier (1976), "Etude de la decroissance des valeurs propres dans une analyse en
    composantes principales", J. Exp. Mar. Biol. Ecol. 25, 67-75.
    D. A. Jackson (1993), "Stopping rules in principal components analysis: a comparison
    of heuristical and statistical approaches", Ecology 74(8), 2204-2214.
    """
    b = broken_stick_expectations(p)[: len(explained_ratio)]
    k = _leading_run(np.asarray(explained_ratio) > b)
    return RuleResult("broken_stick", k, "Frontier (1976); Jackson (1993)", {"expected_share": b, "expected_eigenvalue": b * total})


# ---------------------------------------------------------------------- Velicer's MAP
def velicer_map(correlation: np.ndarray) -> RuleResult:
    """Velicer's minimum average partial: k = the m with the smallest average partial.

    For m = 0 .. p - 2, partial out the first m components of R (loadings A_m = V_m L_m^0.5)
    and average the squared off-diagonal partial correlations; m = 0 is R itself. The
    fourth-power revision (Velicer, Eaton and Fava 2000) is kept as evidence.

    References
    ----------
    W. F. Velicer (1976), "Determining the number of components from the matrix of partial
    correlations", Psychometrika 41(3), 321-327.
    W. F. Velicer, C. A. Eaton and J. L. Fava (2000), "Construct explication through factor
    or component analysis", in Problems and Solutions in Human Assessment, Springer.
    """
    r = np.asarray(correlation, float)
    p = r.shape[0]
    values, vectors = np.linalg.eigh(r)
    order = np.argsort(values)[::-1]
    values, vectors = np.clip(values[order], 0, None), vectors[:, order]
    off = ~np.eye(p, dtype=bool)
    f2 = np.full(p - 1, np.nan)
    f4 = np.full(p - 1, np.nan)
    for m in range(p - 1):
        a = vectors[:, :m] * np.sqrt(values[:m])
        c = r - a @ a.T
        d = np.diag(c)
        if np.any(d <= 1e-12):
            break
        partial = c / np.sqrt(np.outer(d, d))
        f2[m] = np.mean(partial[off] ** 2)
        f4[m] = np.mean(partial[off] ** 4)
    k = int(np.nanargmin(f2))
    return RuleResult(
        "velicer_map",
        k,
        "Velicer (1976); fourth power: Velicer, Eaton and Fava (2000)",
        {"average_squared_partial": f2, "average_fourth_power_partial": f4, "k_fourth_power": int(np.nanargmin(f4))},
    )


# ---------------------------------------------------------------------- Minka
def minka_log_evidence(spectrum: np.ndarray, rank: int, n: int) -> float:
    """Laplace approximation to log p(data | k) for probabilistic PCA (Minka 2000, eq. 77)."""
    p = len(spectrum)
    eps = 1e-15
    if spectrum[rank - 1] < eps:
        return -np.inf
    pu = -rank * math.log(2.0)
    for i in range(1, rank + 1):
        pu += scipy.special.gammaln((p - i + 1) / 2.0) - math.log(math.pi) * (p - i + 1) / 2.0
    pl = -np.sum(np.log(spectrum[:rank])) * n / 2.0
    v = max(eps, float(np.sum(spectrum[rank:]) / (p - rank)))
    pv = -math.log(v) * n * (p - rank) / 2.0
    m = p * rank - rank * (rank + 1.0) / 2.0
    pp = math.log(2.0 * math.pi) * (m + rank) / 2.0
    tail = spectrum.copy()
    tail[rank:] = v
    pa = 0.0
    for i in range(rank):
        diff = spectrum[i] - spectrum[i + 1 :]
        pa += float(np.sum(np.log(diff * (1.0 / tail[i + 1 :] - 1.0 / tail[i])) + math.log(n)))
    return pu + pl + pv + pp - pa / 2.0 - rank * math.log(n) / 2.0


def minka(eigenvalues: np.ndarray, n: int, p: int) -> RuleResult:
    """Minka's Laplace approximation to the evidence of probabilistic PCA; k = its argmax.

    Ranks 1 .. p - 1 are compared (the model needs a noise subspace). Undefined when
    p >= n.

    References
    ----------
    T. P. Minka (2000), "Automatic choice of dimensionality for PCA", Advances in Neural
    Information Processing Systems 13.
    """
    if p >= n or p < 2:
        return RuleResult("minka", None, "Minka (2000)", {}, reason="undefined: the approximation needs n > p and p >= 2")
    spectrum = np.asarray(eigenvalues, float)
    # Exact dependencies give eigenvalues that are zero up to rounding; the model is then
    # fitted in the space the data span (the numerical rank), as the zeros carry no noise.
    tol = rank_tolerance(spectrum[0], p)
    rank_data = int(np.sum(spectrum > tol))
    spectrum = spectrum[:rank_data]
    ll = np.full(p, -np.inf)
    top_rank = rank_data if p <= MINKA_FULL_FEATURES else min(rank_data, MINKA_MAX_RANK + 1)
    with np.errstate(divide="ignore", invalid="ignore"):
        for rank in range(1, top_rank):
            ll[rank] = minka_log_evidence(spectrum, rank, n)
    k = int(np.argmax(ll))
    evidence = {"log_evidence": ll}
    if top_rank < rank_data:
        evidence["note"] = f"ranks 1 to {MINKA_MAX_RANK} evaluated ({p} features: the evidence costs O(p^2) a rank)"
    if rank_data < p:
        evidence["note"] = f"fitted on the {rank_data} directions with non-zero variance"
    return RuleResult("minka", k, "Minka (2000)", evidence)


# ---------------------------------------------------------------------- Gavish-Donoho
def gavish_donoho_omega(beta: float) -> float:
    """omega(beta) = lambda*(beta) / sqrt(mu_beta): the optimal hard threshold coefficient
    for unknown noise, with lambda*(beta) = sqrt(2(beta + 1) + 8 beta / (beta + 1 +
    sqrt(beta^2 + 14 beta + 1))) and mu_beta the Marchenko-Pastur median."""
    lam = math.sqrt(2 * (beta + 1) + 8 * beta / (beta + 1 + math.sqrt(beta**2 + 14 * beta + 1)))
    return lam / math.sqrt(marchenko_pastur_median(beta))


def gavish_donoho(eigenvalues: np.ndarray, n: int, p: int) -> RuleResult:
    """Optimal hard threshold for singular values with unknown noise level.

    The singular values of the centred, scaled data matrix are y_k = sqrt((n - 1) l_k);
    with beta = min(n, p) / max(n, p), components with y_k > omega(beta) median(y) are kept.

    References
    ----------
    M. Gavish and D. L. Donoho (2014), "The optimal hard threshold for singular values is
    4/sqrt(3)", IEEE Transactions on Information Theory 60(8), 5040-5053.
    """
    beta = min(n, p) / max(n, p)
    y = np.sqrt(np.clip(eigenvalues, 0, None) * (n - 1))
    omega = gavish_donoho_omega(beta)
    tau = omega * float(np.median(y))
    k = int(np.sum(y > tau))
    return RuleResult(
        "gavish_donoho",
        k,
        "Gavish and Donoho (2014)",
        {"beta": beta, "omega": omega, "omega_approx": 0.56 * beta**3 - 0.95 * beta**2 + 1.82 * beta + 1.43, "threshold": tau},
    )


# ---------------------------------------------------------------------- cross-validation
def ekf_press(train_loadings: np.ndarray, z_test: np.ndarray, kmax: int) -> np.ndarray:
    """Element-wise PRESS of the held-out rows for k = 0 .. kmax components.

    For a held-out row x and loadings P_k fitted without it, element j is predicted from the
    row's other elements: t = (P_(-j)^T P_(-j))^-1 P_(-j)^T x_(-j), x_hat_j = P_j t. This is
    the leave-one-out prediction of the regression of x on P_k, so the error is
    e_j / (1 - h_jj) with e = x - P_k P_k^T x and h_jj = sum_c P_jc^2.
    """
    from scipy.linalg.blas import dger

    press = np.zeros(kmax + 1)
    residual = np.array(z_test, dtype=np.float64, order="F")  # a copy, updated in place below
    lever = np.zeros(train_loadings.shape[0])
    press[0] = float(np.sum(np.einsum("ij,ij->j", residual, residual)))
    for k in range(1, kmax + 1):
        pk = np.ascontiguousarray(train_loadings[:, k - 1])
        residual = dger(-1.0, residual @ pk, pk, a=residual, overwrite_a=True)  # residual -= (residual pk) pk^T
        lever += pk**2
        denom = 1.0 - lever
        if np.any(denom < 1e-10):
            press[k:] = np.inf
            break
        press[k] = float(np.einsum("ij,ij->j", residual, residual) @ (1.0 / denom**2))
    return press


def leading_loadings(centred: np.ndarray, k: int) -> np.ndarray:
    """The first k right singular vectors of centred rows: from the p x p cross-product
    when there are more rows than features (a partial symmetric eigensolver when k is small
    against p), from the n x n Gram matrix when there are far more features than rows,
    else by SVD."""
    n, p = centred.shape
    if n > p and p > 2 * k:
        import scipy.linalg

        values, vectors = scipy.linalg.eigh(centred.T @ centred, subset_by_index=[p - k, p - 1])
        return vectors[:, ::-1]
    if n > p:
        values, vectors = np.linalg.eigh(centred.T @ centred)
        return vectors[:, ::-1][:, :k]
    if p > 2 * n:  # the n x n Gram matrix: V = Z^T U / s
        values, vectors = np.linalg.eigh(centred @ centred.T)
        order = np.argsort(values)[::-1][:k]
        s = np.sqrt(np.clip(values[order], 1e-300, None))
        return (centred.T @ vectors[:, order]) / s
    _, _, vt = np.linalg.svd(centred, full_matrices=False)
    return vt[:k].T


def cross_validation(
    rows: np.ndarray | None,
    scale_fn,
    rng: np.random.Generator,
    folds: int = 7,
    kmax: int | None = None,
    sample_note: str | None = None,
) -> RuleResult:
    """Row-wise k-fold, element-wise cross-validation of the component model (ekf).

    Rows are shuffled with the seed and split into ``folds``; on each training part the
    centring, scaling and loadings are refitted (``scale_fn(train)`` returns the scaled
    training rows and a function that scales new rows), and each held-out element is
    predicted from the other elements of its row. k = argmin PRESS(k), k = 0 allowed.

    References
    ----------
    R. Bro, K. Kjeldahl, A. K. Smilde and H. A. L. Kiers (2008), "Cross-validation of
    component models: a critical look at current methods", Analytical and Bioanalytical
    Chemistry 390(5), 1241-1251.
    """
    if rows is None:
        return RuleResult("cross_validation", None, "Bro et al. (2008)", {}, reason="the rows are not available")
    n, p = rows.shape
    folds = max(2, min(folds, n))
    if kmax is None:
        kmax = min(p - 1, n - n // folds - 2, 40)
    if kmax < 1:
        return RuleResult("cross_validation", None, "Bro et al. (2008)", {}, reason="too few rows or features")
    order = rng.permutation(n)
    parts = np.array_split(order, folds)
    press = np.zeros(kmax + 1)
    for part in parts:
        mask = np.ones(n, dtype=bool)
        mask[part] = False
        z_train, scale_new = scale_fn(rows[mask])  # centred on the training rows' own mean
        press += ekf_press(leading_loadings(z_train, kmax), scale_new(rows[part]), kmax)
    k = int(np.argmin(press))
    evidence = {"method": "row-wise k-fold, element-wise prediction (ekf)", "folds": folds, "press": press}
    if sample_note:
        evidence["sample"] = sample_note
    return RuleResult("cross_validation", k, "Bro, Kjeldahl, Smilde and Kiers (2008)", evidence)


# ---------------------------------------------------------------------- revised parallel analysis
def principal_axis_loadings(r: np.ndarray, m: int, iterations: int = 50) -> np.ndarray:
    """Principal-axis factor loadings of ``m`` factors (iterated communalities, from SMCs)."""
    p = r.shape[0]
    if m == 0:
        return np.zeros((p, 0))
    try:
        with np.errstate(divide="ignore", invalid="ignore"):  # a singular R: the SMCs fall back below
            h2 = 1.0 - 1.0 / np.diag(np.linalg.inv(r))
    except np.linalg.LinAlgError:
        h2 = np.max(np.abs(r - np.eye(p)), axis=1)
    h2 = np.clip(np.nan_to_num(h2, nan=0.5), 0.05, 0.995)
    for _ in range(iterations):
        reduced = r.copy()
        np.fill_diagonal(reduced, h2)
        values, vectors = np.linalg.eigh(reduced)
        order = np.argsort(values)[::-1][:m]
        a = vectors[:, order] * np.sqrt(np.clip(values[order], 0, None))
        new = np.clip(np.sum(a**2, axis=1), 0.0, 0.995)
        if np.max(np.abs(new - h2)) < 1e-4:
            h2 = new
            break
        h2 = new
    return a


def revised_parallel_analysis(
    eigenvalues: np.ndarray, correlation: np.ndarray, n: int, rng: np.random.Generator,
    draws: int = 200, percentile: float = 95.0, max_k: int | None = None,
) -> RuleResult:
    """Parallel analysis with a null that keeps the components already retained.

    The k-th eigenvalue is compared with the k-th eigenvalue of correlation matrices of
    samples of size n from a population with the k - 1 common factors already found
    (principal-axis loadings) and unique variances that make every feature's variance 1;
    sampling is by the Bartlett decomposition of Wishart(n - 1, Sigma_0). Components are
    kept while the observed eigenvalue exceeds the null's 95th percentile.

    References
    ----------
    S. B. Green, R. Levy, M. S. Thompson, M. Lu and W.-J. Lo (2012), "A proposed solution
    to the problem with using completely random data to assess the number of factors with
    parallel analysis", Educational and Psychological Measurement 72(3), 357-374.
    """
    lam = np.asarray(eigenvalues, float)
    p = correlation.shape[0]
    max_k = min(max_k or p - 1, p - 1)
    thresholds = []
    k = 0
    for m in range(max_k):
        a = principal_axis_loadings(correlation, m)
        communality = np.sum(a**2, axis=1)
        too_big = communality > 0.995  # a Heywood case: shrink the row to a valid model
        a[too_big] *= np.sqrt(0.995 / communality[too_big])[:, None]
        sigma = a @ a.T
        sigma[np.diag_indices(p)] = 1.0
        chol = np.linalg.cholesky(sigma)
        null = _wishart_eigen_k(chol, n - 1, draws, rng, m)
        upper = float(np.percentile(null, percentile))
        thresholds.append(upper)
        if lam[m] > upper:
            k = m + 1
        else:
            break
    return RuleResult(
        "revised_parallel_analysis", k, "Green, Levy, Thompson, Lu and Lo (2012)",
        {"null_percentile": thresholds, "draws": draws, "percentile": percentile,
         "method": "null with the k - 1 components already found (principal-axis loadings), Wishart draws"},
    )


def _wishart_eigen_k(chol: np.ndarray, dof: int, draws: int, rng: np.random.Generator, index: int, batch: int = 64) -> np.ndarray:
    """The ``index``-th largest eigenvalue of correlation matrices of Wishart(dof, C C^T) draws."""
    out = np.empty(draws)
    for start, lower in bartlett_factors(chol.shape[0], dof, draws, rng, batch):
        g = chol[None, :, :] @ lower
        w = g @ np.transpose(g, (0, 2, 1))
        d = 1.0 / np.sqrt(np.diagonal(w, axis1=1, axis2=2))
        w = w * d[:, :, None] * d[:, None, :]
        out[start : start + len(lower)] = np.linalg.eigvalsh(w)[:, ::-1][:, index]
    return out
