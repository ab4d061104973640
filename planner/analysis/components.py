"""The component evidence: scaling, decomposition, intervals, every retention rule, and the
recommended number of components with its reasons."""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..moments import Moments
from ..parallel import one_blas_thread
from . import retention
from .decomposition import Decomposition, Intervals, anderson_intervals, bootstrap_intervals, complete_basis, decompose
from .retention import RuleResult
from .scaling import Scaling, make_scaling, scale_for

#: Row resampling (bootstrap, cross-validation) runs on at most this many rows, drawn with
#: the seed; the record says so when it happens.
RESAMPLE_MAX_ROWS = 20_000
#: The row bootstrap is used when its cost n p^2 stays below this; else Anderson's intervals.
BOOTSTRAP_MAX_WORK = 1e8
BOOTSTRAP_RESAMPLES = 200
#: The revised parallel analysis (p^3 a draw, one null a component) runs up to this many features.
REVISED_PA_MAX_FEATURES = 300
#: Parallel analysis uses all its draws up to this dimension, fewer (at least PA_MIN_DRAWS) above.
PA_FULL_DRAWS_MAX_DIM = 200
PA_MIN_DRAWS = 100


@dataclass
class ComponentEvidence:
    scaling: Scaling
    decomposition: Decomposition
    intervals: Intervals | None
    rules: dict[str, RuleResult]
    recommended: int
    reasons: list[str]
    sample_note: str | None = None
    weights: dict[str, float] = field(default_factory=dict)


# ---------------------------------------------------------------------- resampling helpers
def matrix_of_rows(method: str):
    """A function giving the matrix decomposed for a table of rows (scaling refitted)."""

    def make(rows: np.ndarray):
        sd = rows.std(axis=0, ddof=1)
        if np.any(sd <= 0):
            return None
        scale = scale_for(method, sd, rows)
        return np.cov(rows, rowvar=False) / np.outer(scale, scale)

    return make


def scaler_of_rows(method: str):
    """``fit(train) -> (z_train, transform)`` with the scaling refitted on ``train``."""

    def fit(train: np.ndarray):
        center = train.mean(axis=0)
        z = train - center
        sd = np.sqrt(np.einsum("ij,ij->j", z, z) / (len(train) - 1))  # the sample SD, from the centred rows
        scale = scale_for(method, np.where(sd > 0, sd, 1.0), train)
        z /= scale
        return z, lambda new: (new - center) / scale

    return fit


def sample_picks(n: int, rng: np.random.Generator) -> tuple[np.ndarray | None, str | None]:
    """The sorted indices of a seeded sample of RESAMPLE_MAX_ROWS of ``n`` rows, and the
    note that says so; (None, None) when there are no more rows than that."""
    if n <= RESAMPLE_MAX_ROWS:
        return None, None
    pick = np.sort(rng.choice(n, RESAMPLE_MAX_ROWS, replace=False))
    return pick, f"on a seeded sample of {RESAMPLE_MAX_ROWS:,} of the {n:,} rows"


def row_sample(rows: np.ndarray | None, rng: np.random.Generator) -> tuple[np.ndarray | None, str | None]:
    """The rows of :func:`sample_picks` (all of them when there are few enough)."""
    if rows is None:
        return None, None
    pick, note = sample_picks(rows.shape[0], rng)
    return (rows, None) if pick is None else (rows[pick], note)


# ---------------------------------------------------------------------- all rules
def evaluate_rules(
    decomposition: Decomposition,
    moments: Moments,
    scaling: Scaling,
    rows: np.ndarray | None,
    seed: int,
    share: float = 0.80,
    draws: int = 1000,
    permutation: bool = False,
) -> tuple[dict[str, RuleResult], str | None]:
    """Every retention rule of :data:`planner.analysis.retention.RULE_IDS`."""
    n, p = moments.n, moments.p
    lam = decomposition.eigenvalues
    ratio = decomposition.explained_ratio
    standardized = scaling.method == "standardize"
    rng_pa = np.random.default_rng([seed, 1])
    rng_cv = np.random.default_rng([seed, 2])
    rng_sample = np.random.default_rng([seed, 3])
    variances = moments.std() ** 2 / scaling.scale**2  # of the scaled features
    dim = p if p < n else n - 1
    if dim > PA_FULL_DRAWS_MAX_DIM:  # a draw costs dim^3: fewer draws for very wide tables
        draws = max(PA_MIN_DRAWS, int(draws * (PA_FULL_DRAWS_MAX_DIM / dim) ** 3))
    if permutation and rows is not None:
        pa = retention.parallel_analysis(lam, n, p, rng_pa, standardized, variances, draws=draws,
                                         permuted_rows=rows, make_matrix=matrix_of_rows(scaling.method))
    else:
        pa = retention.parallel_analysis(lam, n, p, rng_pa, standardized, variances, draws=draws)
    sample, note = row_sample(rows, rng_sample)
    if p < n and moments.full:
        corr = moments.correlation()
        corr = np.nan_to_num(corr)
        velicer = retention.velicer_map(corr)
    else:
        velicer = RuleResult("velicer_map", None, "Velicer (1976)", {},
                             reason="undefined: p >= n (R is singular)" if p >= n else "not computed: no p x p matrix is formed for a table this wide")
    rules = {
        "kaiser": retention.kaiser(lam if p < n else np.concatenate([lam, np.zeros(p - len(lam))]), standardized),
        "cumulative_variance": retention.cumulative_variance(ratio, share),
        "scree_elbow": retention.scree_elbow(lam, pa.evidence["null_mean"]),
        "parallel_analysis": pa,
        "broken_stick": retention.broken_stick(ratio, p, decomposition.trace),
        "velicer_map": velicer,
        "minka": retention.minka(lam, n, p),
        "gavish_donoho": retention.gavish_donoho(lam, n, p),
        "cross_validation": retention.cross_validation(sample, scaler_of_rows(scaling.method), rng_cv, sample_note=note),
    }
    if standardized and p < n and p <= REVISED_PA_MAX_FEATURES and moments.full:
        rules["revised_parallel_analysis"] = retention.revised_parallel_analysis(
            lam, np.nan_to_num(moments.correlation()), n, np.random.default_rng([seed, 5]), draws=200, percentile=99.0,
            max_k=min(p - 1, pa.k + 10),
        )
    else:
        why = (
            "defined for the correlation matrix (standardize)" if not standardized
            else ("undefined: p >= n" if p >= n else f"not run above {REVISED_PA_MAX_FEATURES} features (cost)")
        )
        rules["revised_parallel_analysis"] = RuleResult("revised_parallel_analysis", None, "Green et al. (2012)", {}, reason=why)
    return rules, note


# ---------------------------------------------------------------------- recommendation
#: The rules that decide, and what the published comparisons say about the others. Horn's
#: parallel analysis was the most accurate rule in Zwick and Velicer (1986) and among the
#: best in Peres-Neto, Jackson and Somers (2005); its known weakness, missing components
#: when the factors are correlated or when one large component dominates, is what the
#: revised null of Green et al. (2012) corrects. The other rules are evidence, each with
#: its known bias.
DECIDING_RULES = ("parallel_analysis", "revised_parallel_analysis")
KNOWN_BIAS = {  # (the direction the rule errs in, in published comparisons; what it is)
    "kaiser": ("more", "overestimates, more so with many features (Zwick and Velicer 1986)"),
    "cumulative_variance": (None, "an arbitrary share, not a test (Jolliffe 2002)"),
    "broken_stick": ("fewer", "underestimates with weak loadings (Peres-Neto, Jackson and Somers 2005)"),
    "velicer_map": ("fewer", "underestimates with weak loadings or few features per component (Zwick and Velicer 1986)"),
    "minka": ("more", "assumes equal noise variance in every feature and overestimates when it is unequal"),
    "gavish_donoho": ("fewer", "a denoising threshold for singular values, conservative for weak components"),
    "cross_validation": ("fewer", "measures prediction of the whole table, conservative for weak components"),
    "scree_elbow": (None, "an objective reading of the scree plot"),
}
RULE_WEIGHTS = {rid: (1.0 if rid in DECIDING_RULES else 0.0) for rid in (*retention.RULE_IDS, "revised_parallel_analysis")}

RULE_NAMES = {
    "kaiser": "Kaiser-Guttman",
    "cumulative_variance": "cumulative share",
    "scree_elbow": "scree (optimal coordinates)",
    "parallel_analysis": "parallel analysis",
    "revised_parallel_analysis": "revised parallel analysis",
    "broken_stick": "broken stick",
    "velicer_map": "Velicer's MAP",
    "minka": "Minka's evidence",
    "gavish_donoho": "Gavish-Donoho threshold",
    "cross_validation": "cross-validation",
}

POLICY = (
    "parallel analysis (Horn 1965, 95th percentile) decides; where the revised parallel analysis "
    "(Green et al. 2012, 99th percentile), whose null keeps the components already found, "
    "keeps more, its answer is taken; the other rules are evidence"
)


def recommend(rules: dict[str, RuleResult], decomposition: Decomposition) -> tuple[int, list[str]]:
    """The recommended k and the reasons in plain words (see POLICY)."""
    q = len(decomposition.eigenvalues)
    pa = rules.get("parallel_analysis")
    rpa = rules.get("revised_parallel_analysis")
    reasons: list[str] = []
    if pa is None or pa.k is None:
        return 1, ["parallel analysis could not be computed; one component is kept by default"]
    k = pa.k
    reasons.append(
        f"parallel analysis keeps {pa.k}: the components whose eigenvalues exceed the 95th percentile of "
        "eigenvalues of uncorrelated data of the same size; it is the rule with the best record in "
        "simulation studies (Zwick and Velicer 1986; Peres-Neto, Jackson and Somers 2005)"
    )
    if rpa is not None and rpa.k is not None:
        if rpa.k > pa.k:
            k = rpa.k
            reasons.append(
                f"the revised parallel analysis, whose null keeps the components already found, keeps {rpa.k}: "
                "the plain null understates what correlated or dominant components leave for the next one "
                "(Green et al. 2012), so its larger answer is taken"
            )
        else:
            reasons.append(f"the revised parallel analysis (Green et al. 2012) agrees that no more than {pa.k} stand out from noise")
    evidence = {rid: r.k for rid, r in rules.items() if rid not in DECIDING_RULES and r.k is not None}
    agree = [RULE_NAMES[r] for r, v in evidence.items() if v == k]
    if agree:
        reasons.append(f"{len(agree)} of the {len(evidence)} other rules give the same number: {', '.join(agree)}")
    for direction, members in (("more", [(r, v) for r, v in evidence.items() if v > k]),
                               ("fewer", [(r, v) for r, v in evidence.items() if v < k])):
        if not members:
            continue
        parts = []
        for r, v in members:
            bias_direction, text = KNOWN_BIAS.get(r, (None, "see its evidence"))
            parts.append(f"{RULE_NAMES[r]} {v}" + (f": {text}" if bias_direction in (direction, None) else ""))
        reasons.append(
            f"the rules that keep {direction} do not outweigh the parallel analyses, which have the better record: "
            + "; ".join(parts)
        )
    if k == 0:
        reasons.append(
            "no component stands out from noise: the features are close to uncorrelated; one component is "
            "kept so that a plan exists, and a reduction is not supported by the data"
        )
        k = 1
    return min(k, q), reasons


# ---------------------------------------------------------------------- entry points
def analyse_components(
    moments: Moments,
    rows: np.ndarray | None,
    scaling: Scaling,
    seed: int = 0,
    share: float = 0.80,
    draws: int = 1000,
    permutation: bool = False,
) -> ComponentEvidence:
    """Decompose, compute the intervals and every rule, and recommend k."""
    decomposition = decompose(moments, scaling, rows)
    with one_blas_thread():  # many small products: a second BLAS thread slows them down
        rules, note = evaluate_rules(decomposition, moments, scaling, rows, seed, share, draws, permutation)
    k, reasons = recommend(rules, decomposition)
    intervals = None
    if rows is not None and moments.n * moments.p**2 <= BOOTSTRAP_MAX_WORK and moments.p < moments.n and moments.full:
        intervals = bootstrap_intervals(rows, scaling.method, matrix_of_rows(scaling.method), seed=seed + 4,
                                        resamples=BOOTSTRAP_RESAMPLES)
    elif moments.p < moments.n:
        intervals = anderson_intervals(decomposition)  # from the eigenvalues alone
    return ComponentEvidence(scaling, decomposition, intervals, rules, k, reasons, note, dict(RULE_WEIGHTS))


def component_evidence(x: np.ndarray, scaling: str = "standardize", seed: int = 0, draws: int = 1000) -> ComponentEvidence:
    """Convenience for studies: the component evidence of a plain matrix of rows."""
    x = np.asarray(x, float)
    columns = [f"x{j + 1}" for j in range(x.shape[1])]
    moments = Moments.from_array(x, columns)
    sc = make_scaling(scaling, moments, x, [f"{scaling} requested"], scaling)
    return analyse_components(moments, x, sc, seed=seed, draws=draws)


# ---------------------------------------------------------------------- record sections
#: Loadings of every component are kept up to this many features; beyond, the first 50.
MAX_FULL_LOADINGS = 1000
WIDE_KEPT_LOADINGS = 50


def _rule_entry(r: RuleResult) -> dict:
    entry = {"k": r.k, "source": r.source, "weight": RULE_WEIGHTS.get(r.rule_id, 0.0), "name": RULE_NAMES.get(r.rule_id, r.rule_id)}
    if r.reason:
        entry["reason"] = r.reason
    entry.update({key: value for key, value in r.evidence.items()})
    return entry


def decomposition_section(ev: ComponentEvidence, columns: list[str]) -> dict:
    d, sc = ev.decomposition, ev.scaling
    eigenvalues, ratio, loadings = d.eigenvalues, d.explained_ratio, d.loadings
    p = len(columns)
    if len(eigenvalues) < p:
        # p >= n: the p x p matrix has p - q more eigenvalues, exactly 0; the record lists them,
        # with an orthonormal basis of the null space as their loadings where loadings are kept whole.
        zeros = np.zeros(p - len(eigenvalues))
        eigenvalues, ratio = np.concatenate([eigenvalues, zeros]), np.concatenate([ratio, zeros])
        if p <= MAX_FULL_LOADINGS:
            loadings = complete_basis(loadings)
    q = loadings.shape[1]
    keep = q if p <= MAX_FULL_LOADINGS else min(q, WIDE_KEPT_LOADINGS)
    section = {
        "scaling": {"method": sc.method, "requested": sc.requested, "reasons": list(sc.reasons)},
        "matrix": {
            "standardize": "correlation matrix",
            "center": "covariance matrix",
            "pareto": "covariance of Pareto-scaled features",
            "robust": "covariance of robustly scaled features",
        }[sc.method],
        "route": d.route,
        "route_reason": d.reason,
        "sign_convention": "each loading vector has its element of largest absolute value positive",
        "eigenvalues": eigenvalues,
        "explained_ratio": ratio,
        "cumulative_ratio": np.cumsum(ratio),
        "trace": d.trace,
        "loadings": {c: loadings[j, :keep] for j, c in enumerate(columns)},
        "loadings_components": keep,
        "center": {c: float(v) for c, v in zip(columns, sc.center)},
        "scale": {c: float(v) for c, v in zip(columns, sc.scale)},
    }
    if keep < q:
        section["loadings_reason"] = f"{len(columns)} features: the loadings of the first {keep} of {q} components are kept"
    if ev.intervals is not None:
        iv = ev.intervals
        section["intervals"] = {
            "method": iv.method,
            "level": iv.level,
            "eigenvalue_low": iv.eigenvalue_low,
            "eigenvalue_high": iv.eigenvalue_high,
            "cumulative_low": iv.cumulative_low,
            "cumulative_high": iv.cumulative_high,
            "resamples": iv.resamples,
            "note": iv.note,
        }
    return section


def components_section(ev: ComponentEvidence, chosen: int, override: dict | None) -> dict:
    d = ev.decomposition
    kept_share = float(np.sum(d.explained_ratio[:chosen]))
    section = {
        "rules": {rid: _rule_entry(r) for rid, r in ev.rules.items()},
        "recommended": ev.recommended,
        "chosen": chosen,
        "reasons": list(ev.reasons),
        "policy": POLICY,
        "weights": dict(ev.weights),
        "kept_share": kept_share,
        "override": override,
        "overridden": override is not None,
    }
    if ev.sample_note:
        section["resampling_sample"] = ev.sample_note
    if override:
        section["reasons"] = [
            f"overridden: {chosen} component(s) instead of the recommended {ev.recommended}, because: {override['because']}",
            *section["reasons"],
        ]
    return section
