"""The component evidence: scaling, decomposition, intervals, every retention rule, and the
recommended number of components with its reasons."""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..moments import Moments
from . import retention
from .decomposition import Decomposition, Intervals, anderson_intervals, bootstrap_intervals, decompose
from .retention import RuleResult
from .scaling import Scaling, make_scaling, robust_spread

#: Row resampling (bootstrap, cross-validation) runs on at most this many rows, drawn with
#: the seed; the record says so when it happens.
RESAMPLE_MAX_ROWS = 20_000
#: The row bootstrap is used when its cost n p^2 stays below this; else Anderson's intervals.
BOOTSTRAP_MAX_WORK = 1e8
BOOTSTRAP_RESAMPLES = 200


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
        cov = np.cov(rows, rowvar=False)
        if method == "standardize":
            scale = sd
        elif method == "center":
            return cov
        elif method == "pareto":
            scale = np.sqrt(sd)
        else:
            scale = robust_spread(rows)
        return cov / np.outer(scale, scale)

    return make


def scaler_of_rows(method: str):
    """``fit(train) -> (z_train, transform)`` with the scaling refitted on ``train``."""

    def fit(train: np.ndarray):
        center = train.mean(axis=0)
        sd = train.std(axis=0, ddof=1)
        sd = np.where(sd > 0, sd, 1.0)
        if method == "standardize":
            scale = sd
        elif method == "center":
            scale = np.ones_like(sd)
        elif method == "pareto":
            scale = np.sqrt(sd)
        else:
            scale = robust_spread(train)
        return (train - center) / scale, lambda new: (new - center) / scale

    return fit


def row_sample(rows: np.ndarray | None, rng: np.random.Generator) -> tuple[np.ndarray | None, str | None]:
    if rows is None or rows.shape[0] <= RESAMPLE_MAX_ROWS:
        return rows, None
    pick = np.sort(rng.choice(rows.shape[0], RESAMPLE_MAX_ROWS, replace=False))
    return rows[pick], f"on a seeded sample of {RESAMPLE_MAX_ROWS:,} of the {rows.shape[0]:,} rows"


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
    variances = np.diag(scaling.matrix(moments)) if p < n else None
    if permutation and rows is not None:
        pa = retention.parallel_analysis(lam, n, p, rng_pa, standardized, variances, draws=draws,
                                         permuted_rows=rows, make_matrix=matrix_of_rows(scaling.method))
    else:
        pa = retention.parallel_analysis(lam, n, p, rng_pa, standardized, variances, draws=draws)
    sample, note = row_sample(rows, rng_sample)
    if p < n:
        corr = moments.correlation()
        corr = np.nan_to_num(corr)
        velicer = retention.velicer_map(corr)
    else:
        velicer = RuleResult("velicer_map", None, "Velicer (1976)", {}, reason="undefined: p >= n (R is singular)")
    rules = {
        "kaiser": retention.kaiser(lam if p < n else np.concatenate([lam, np.zeros(p - len(lam))]), standardized),
        "cumulative_variance": retention.cumulative_variance(ratio, share),
        "scree_elbow": retention.scree_elbow(lam, pa.evidence["null_mean"]),
        "parallel_analysis": pa,
        "broken_stick": retention.broken_stick(ratio, p),
        "velicer_map": velicer,
        "minka": retention.minka(lam, n, p),
        "gavish_donoho": retention.gavish_donoho(lam, n, p),
        "cross_validation": retention.cross_validation(sample, scaler_of_rows(scaling.method), rng_cv, sample_note=note),
    }
    return rules, note


# ---------------------------------------------------------------------- recommendation
#: How much each rule's k counts in the recommendation, from its published track record:
#: parallel analysis and MAP were the most accurate in Zwick and Velicer (1986); parallel
#: analysis and the broken stick did best among the rules compared by Peres-Neto, Jackson
#: and Somers (2005); Kaiser's rule overestimates and the cumulative share is arbitrary, so
#: they are evidence only.
RULE_WEIGHTS = {
    "parallel_analysis": 3.0,
    "velicer_map": 2.0,
    "scree_elbow": 2.0,
    "cross_validation": 2.0,
    "gavish_donoho": 1.0,
    "minka": 1.0,
    "broken_stick": 1.0,
    "kaiser": 0.0,
    "cumulative_variance": 0.0,
}

RULE_NAMES = {
    "kaiser": "Kaiser-Guttman",
    "cumulative_variance": "cumulative share",
    "scree_elbow": "scree (optimal coordinates)",
    "parallel_analysis": "parallel analysis",
    "broken_stick": "broken stick",
    "velicer_map": "Velicer's MAP",
    "minka": "Minka's evidence",
    "gavish_donoho": "Gavish-Donoho threshold",
    "cross_validation": "cross-validation",
}


def weighted_median(values: list[int], weights: list[float]) -> int:
    """The smallest value at which the cumulative weight reaches half of the total."""
    order = np.argsort(values, kind="stable")
    v = np.asarray(values)[order]
    w = np.asarray(weights)[order]
    cum = np.cumsum(w)
    return int(v[np.searchsorted(cum, cum[-1] / 2.0)])


def recommend(rules: dict[str, RuleResult], decomposition: Decomposition) -> tuple[int, list[str]]:
    """The recommended k: the weighted median of the rules' answers (see RULE_WEIGHTS)."""
    voting = {rid: r.k for rid, r in rules.items() if r.k is not None and RULE_WEIGHTS.get(rid, 0) > 0}
    q = len(decomposition.eigenvalues)
    reasons: list[str] = []
    if not voting:
        return 1, ["no rule could be evaluated; one component is kept by default"]
    k = weighted_median(list(voting.values()), [RULE_WEIGHTS[r] for r in voting])
    agree = [RULE_NAMES[r] for r, v in voting.items() if v == k]
    above = [f"{RULE_NAMES[r]} ({v})" for r, v in voting.items() if v > k]
    below = [f"{RULE_NAMES[r]} ({v})" for r, v in voting.items() if v < k]
    pa = rules.get("parallel_analysis")
    if pa is not None and pa.k is not None:
        reasons.append(
            f"parallel analysis, the rule with the best record in simulation studies (Zwick and Velicer 1986; "
            f"Peres-Neto, Jackson and Somers 2005), keeps {pa.k}: the components whose eigenvalues exceed the 95th "
            "percentile of eigenvalues from uncorrelated data of the same size"
        )
    reasons.append(f"{k} is the weighted median of the rules with a track record; {len(agree)} of them agree exactly: {', '.join(agree)}")
    if above or below:
        parts = []
        if above:
            parts.append("more: " + ", ".join(above))
        if below:
            parts.append("fewer: " + ", ".join(below))
        reasons.append(
            "the rules that disagree (" + "; ".join(parts) + ") are outweighed; no single rule moves a weighted median"
        )
    kaiser = rules.get("kaiser")
    if kaiser is not None and kaiser.k is not None and kaiser.k > k:
        reasons.append(f"the eigenvalue-above-average rule ({kaiser.k}) is known to overestimate (Zwick and Velicer 1986)")
    if k == 0:
        reasons.append("the rules find no structure beyond noise; one component is kept so that a plan exists, and the record says it")
        k = 1
    k = min(k, q)
    return k, reasons


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
    rules, note = evaluate_rules(decomposition, moments, scaling, rows, seed, share, draws, permutation)
    k, reasons = recommend(rules, decomposition)
    intervals = None
    if rows is not None and moments.n * moments.p**2 <= BOOTSTRAP_MAX_WORK and moments.p < moments.n:
        intervals = bootstrap_intervals(rows, scaling.method, matrix_of_rows(scaling.method), seed=seed + 4,
                                        resamples=BOOTSTRAP_RESAMPLES)
    elif moments.p < moments.n:
        intervals = anderson_intervals(decomposition)
    return ComponentEvidence(scaling, decomposition, intervals, rules, k, reasons, note, dict(RULE_WEIGHTS))


def component_evidence(x: np.ndarray, scaling: str = "standardize", seed: int = 0, draws: int = 1000) -> ComponentEvidence:
    """Convenience for studies: the component evidence of a plain matrix of rows."""
    x = np.asarray(x, float)
    columns = [f"x{j + 1}" for j in range(x.shape[1])]
    moments = Moments.from_array(x, columns)
    sc = make_scaling(scaling, moments, x, [f"{scaling} requested"], scaling)
    return analyse_components(moments, x, sc, seed=seed, draws=draws)


# ---------------------------------------------------------------------- record sections
#: Loadings of every component are kept up to this many features; beyond, the first 100.
MAX_FULL_LOADINGS = 1000


def _rule_entry(r: RuleResult) -> dict:
    entry = {"k": r.k, "source": r.source, "weight": RULE_WEIGHTS.get(r.rule_id, 0.0), "name": RULE_NAMES.get(r.rule_id, r.rule_id)}
    if r.reason:
        entry["reason"] = r.reason
    entry.update({key: value for key, value in r.evidence.items()})
    return entry


def decomposition_section(ev: ComponentEvidence, columns: list[str]) -> dict:
    d, sc = ev.decomposition, ev.scaling
    q = d.loadings.shape[1]
    keep = q if len(columns) <= MAX_FULL_LOADINGS else min(q, 100)
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
        "eigenvalues": d.eigenvalues,
        "explained_ratio": d.explained_ratio,
        "cumulative_ratio": d.cumulative,
        "trace": d.trace,
        "loadings": {c: d.loadings[j, :keep] for j, c in enumerate(columns)},
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
        "policy": "weighted median of the rules' answers, weights from their published track record",
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
