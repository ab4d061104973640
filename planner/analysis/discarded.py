"""What the reduction throws away: overall and per feature (from the decomposition alone)."""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .collinearity import rank_tolerance
from .decomposition import Decomposition, Intervals


@dataclass
class OverallDiscarded:
    """Share of the total variance of the scaled features that the kept components leave out."""

    kept: int
    variance_fraction: float
    interval_low: float | None
    interval_high: float | None
    interval_method: str | None


def overall_discarded(d: Decomposition, k: int, intervals: Intervals | None) -> OverallDiscarded:
    """(sum of the eigenvalues after the first k) / trace, with the interval of the cumulative
    share (summing what is discarded, not 1 - the kept share, keeps a nothing exactly 0)."""
    fraction = float(min(1.0, max(0.0, np.sum(d.eigenvalues[k:]) / d.trace)))
    low = high = method = None
    if intervals is not None:
        low = float(max(0.0, 1.0 - intervals.cumulative_high[k - 1]))
        high = float(min(1.0, 1.0 - intervals.cumulative_low[k - 1]))
        method = intervals.method
    return OverallDiscarded(k, fraction, low, high, method)


@dataclass
class FeatureRetention:
    """Per feature: the share of its (scaled) variance that k components reproduce, and the
    root-mean-square reconstruction error in the feature's own units."""

    retained: dict[str, float]
    rmse: dict[str, float]
    poorly_represented: list[str]
    floor: float


def feature_retention(
    d: Decomposition, k: int, feature_variance: np.ndarray, scale: np.ndarray, columns: list[str], floor: float = 0.5
) -> FeatureRetention:
    """Retained share_j = sum_{c<=k} l_c v_jc^2 / var(z_j): the communality when standardized.

    The reconstruction error of feature j has variance var(z_j) - sum_{c<=k} l_c v_jc^2 in
    scaled units; its RMSE over the rows (divisor n) in the feature's units is
    scale_j sqrt((n - 1) / n * that variance).
    """
    v = d.loadings[:, :k]
    kept_var = (v**2) @ d.eigenvalues[:k]
    resid = np.clip(feature_variance - kept_var, 0.0, None)
    with np.errstate(divide="ignore", invalid="ignore"):
        share = np.clip(kept_var / feature_variance, 0.0, 1.0)
    rmse = scale * np.sqrt((d.n - 1) / d.n * resid)
    retained = {c: float(s) for c, s in zip(columns, share)}
    poor = [c for c, s in retained.items() if s < floor]
    return FeatureRetention(retained, {c: float(e) for c, e in zip(columns, rmse)}, poor, floor)


# ---------------------------------------------------------------------- the record section
WORST_ROWS = 10


def discarded_section(
    ev,
    k: int,
    moments,
    rows: np.ndarray | None,
    labels: list[str],
    row_numbers: np.ndarray,
    floor: float,
    seed: int,
    target: np.ndarray | None = None,
    target_name: str | None = None,
    signal_share: float = 0.05,
    feature_plans: dict[str, list[int]] | None = None,
    model_figures=None,
) -> dict:
    """The ``discarded`` section of the record for ``k`` kept components. With a target,
    the plans of ``feature_plans`` (plan id -> kept column indices) are fitted in the same
    folds as the components (``target.plan_fits``). ``model_figures`` (SPE and T-squared of
    every row, :class:`planner.analysis.rowpass.ModelRowFigures`) saves the pass over the
    rows when the caller has made it already."""
    from .components import BOOTSTRAP_MAX_WORK, matrix_of_rows, sample_picks, scaler_of_rows
    from .monitoring import beyond_limit, contributions, row_figures, spe_limit, t2_limit
    from .rowpass import largest_first, model_row_figures
    from .stability import loading_stability
    from .target import target_check

    d, sc = ev.decomposition, ev.scaling
    columns = list(moments.columns)
    overall = overall_discarded(d, k, ev.intervals)
    feature_var = moments.std() ** 2 / sc.scale**2  # variance of each scaled feature
    per = feature_retention(d, k, feature_var, sc.scale, columns, floor)
    residual_eigen = d.eigenvalues[k:]
    negligible = rank_tolerance(d.eigenvalues[0], len(columns))
    limits = {level: spe_limit(residual_eigen, level, negligible) for level in (0.95, 0.99)}
    section = {
        "kept_components": k,
        "variance_fraction": overall.variance_fraction,
        "variance_fraction_interval": {"low": overall.interval_low, "high": overall.interval_high, "method": overall.interval_method},
        "kept_share_interval": {
            "low": None if overall.interval_high is None else 1.0 - overall.interval_high,
            "high": None if overall.interval_low is None else 1.0 - overall.interval_low,
        },
        "per_feature_retained": per.retained,
        "per_feature_rmse": per.rmse,
        "rmse_units": "the feature's own units; RMSE over the rows (divisor n)",
        "poorly_represented": per.poorly_represented,
        "representation_floor": per.floor,
        "spe_limit": limits[0.95].value,
        "spe_limit_99": limits[0.99].value,
        "spe_limit_method": limits[0.95].method,
        "spe_h0": limits[0.95].h0,
        "t2_limit": t2_limit(k, moments.n, 0.95),
        "t2_limit_99": t2_limit(k, moments.n, 0.99),
        "t2_limit_method": "k (n - 1) / (n - k) F(k, n - k) (Jackson 1991)",
    }
    if rows is None:
        section["rows_reason"] = "the rows were not kept: per-row figures are not available"
        return section
    figures = model_figures or model_row_figures(rows, sc.center, sc.scale, d.loadings, d.eigenvalues, k)
    spe_lim, t2_lim = section["spe_limit"], section["t2_limit"]
    n_rows = len(figures.spe)
    over_spe = beyond_limit(figures.spe, spe_lim)
    over_t2 = beyond_limit(figures.t2, t2_lim)
    section["rows_over_spe_limit"] = int(over_spe.sum())
    section["rows_over_t2_limit"] = int(over_t2.sum())
    section["rows_over_spe_limit_99"] = int(beyond_limit(figures.spe, section["spe_limit_99"]).sum())
    section["rows_over_t2_limit_99"] = int(beyond_limit(figures.t2, section["t2_limit_99"]).sum())
    section["share_rows_over_spe_limit"] = float(over_spe.mean())
    worst_spe = largest_first(figures.spe, WORST_ROWS)
    residuals = row_figures(sc.transform(rows[worst_spe]), d.loadings, d.eigenvalues, k).residual
    section["worst_spe"] = [
        {"row": int(row_numbers[i]), "label": labels[i], "spe": float(figures.spe[i]), "t2": float(figures.t2[i]),
         "contributions": contributions(residual, columns)}
        for i, residual in zip(worst_spe, residuals)
    ]
    worst_t2 = largest_first(figures.t2, WORST_ROWS)
    section["worst_t2"] = [
        {"row": int(row_numbers[i]), "label": labels[i], "t2": float(figures.t2[i]), "spe": float(figures.spe[i])} for i in worst_t2
    ]
    # All rows' two figures, for the chart (kept compact; beyond 5,000 rows a seeded sample).
    rng = np.random.default_rng([seed, 31])
    pick = np.arange(n_rows) if n_rows <= 5000 else np.sort(rng.choice(n_rows, 5000, replace=False))
    section["row_figures_for_chart"] = {"spe": figures.spe[pick], "t2": figures.t2[pick]}

    if moments.n * moments.p**2 <= BOOTSTRAP_MAX_WORK and moments.p < moments.n:
        stab = loading_stability(rows, matrix_of_rows(sc.method), d.loadings, k, seed)
        section["stability"] = {
            "method": "row bootstrap, 200 resamples, Tucker's congruence with the full-data loadings",
            "bands_source": "Lorenzo-Seva and ten Berge (2006)",
            "components": [{"component": s.component, "median": s.median, "low_5pct": s.low, "band": s.band} for s in stab],
        }
    else:
        section["stability"] = {"reason": "not computed: the table is too large for the row bootstrap, or p >= n"}

    if target is not None:
        fit = scaler_of_rows(sc.method)

        def fit_scores(train):
            z_train, transform = fit(train)
            _, _, vt = np.linalg.svd(z_train - z_train.mean(axis=0), full_matrices=False)
            v = vt.T
            return lambda new: transform(new) @ v

        check_rows, check_target = rows, target
        pick, sample_note = sample_picks(len(rows), np.random.default_rng([seed, 33]))  # the refits of every fold
        if pick is not None:
            check_rows, check_target = rows[pick], target[pick]
        check = target_check(check_rows, check_target, k, fit_scores, sc.transform(check_rows) @ d.loadings, target_name, seed,
                             signal_share=signal_share, feature_plans=feature_plans)
        t = {
            "target": check.target,
            "kind": check.kind,
            "metric": check.metric,
            "folds": check.folds,
            "folds_shuffled_with_seed": check.seed,
            "rows": check.rows,
            "reason": check.reason,
            "note": check.note,
        }
        if sample_note:
            t["sample"] = sample_note
        if check.reason is None:
            if check.metric == "r2":
                t["r2_all_features"] = check.all_features
                t["r2_kept_components"] = check.kept_components
                t["r2_in_sample_all_features"] = check.in_sample_all_features
            else:
                t["auc_all_features"] = check.all_features
                t["auc_kept_components"] = check.kept_components
            t["loss"] = check.all_features - check.kept_components
            t["kept_correlations"] = check.kept_correlations
            t["discarded_correlations"] = check.discarded_correlations
            t["signal_carriers"] = check.carriers
            t["signal_carrier_count"] = len(check.carriers)
            t["max_discarded_share"] = max((c["share"] for c in check.discarded_correlations if c["share"] is not None), default=0.0)
            t["relevance_subset"] = check.relevance_subset
            t["plan_fits"] = check.plan_fits
        section["target"] = t
    return section
