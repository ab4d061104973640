"""The pre-reduction diagnostics, put together: is the table fit for a PCA?

Every figure is a function of the Moments, except the outlier screen, which reads the
rows once more. The thresholds come from the rulebook (see :mod:`planner.rulebook`).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..moments import Moments
from ..record import jsonable
from .adequacy import KmoResult, kmo
from .collinearity import (
    ConditionIndices,
    LinearDependency,
    Spectrum,
    VifResult,
    condition_indices,
    condition_number,
    exact_dependencies,
    spectrum,
    variance_inflation,
)
from .outliers import OutlierScreen, mahalanobis_screen
from .scale import SampleSize, ScaleResult, sample_size, scale_disparity
from .sphericity import BartlettResult, bartlett_sphericity

#: The correlation matrix is kept in the record up to this many features.
MAX_CORRELATION_IN_RECORD = 150


@dataclass
class Thresholds:
    """The thresholds the diagnostics themselves use (the rulebook judges the rest)."""

    condition_index: float = 30.0
    variance_proportion: float = 0.5
    kmo_floor: float = 0.5
    skew_for_log: float = 1.0
    outlier_quantile: float = 0.975


@dataclass
class MatrixDiagnostics:
    """The figures that depend on R alone."""

    columns: list[str]
    vif: VifResult
    condition_number: float | None
    condition_number_reason: str | None
    bartlett: BartlettResult
    kmo: KmoResult


@dataclass
class Diagnostics:
    correlation: np.ndarray
    spectrum: Spectrum
    matrix: MatrixDiagnostics
    dependencies: list[LinearDependency]
    dependencies_reason: str | None
    condition: ConditionIndices
    scale: ScaleResult
    sample: SampleSize
    outliers: OutlierScreen | None
    without_dependents: MatrixDiagnostics | None
    missing_share_rows_dropped: float


def matrix_diagnostics(moments: Moments, r: np.ndarray, spec: Spectrum, thresholds: Thresholds) -> MatrixDiagnostics:
    cn, cn_reason = condition_number(spec)
    return MatrixDiagnostics(
        columns=list(moments.columns),
        vif=variance_inflation(r, moments.columns, moments.n, spec),
        condition_number=cn,
        condition_number_reason=cn_reason,
        bartlett=bartlett_sphericity(moments.n, moments.p, spec),
        kmo=kmo(r, moments.columns, spec, moments.n, floor=thresholds.kmo_floor),
    )


def run_diagnostics(
    moments: Moments,
    rows: np.ndarray | None,
    labels: list[str],
    row_numbers: np.ndarray,
    thresholds: Thresholds,
    rows_dropped: int = 0,
    rows_read: int | None = None,
) -> Diagnostics:
    """All diagnostics of issue "pre-reduction diagnostics" for the features in ``moments``."""
    r = moments.correlation()
    spec = spectrum(r)
    matrix = matrix_diagnostics(moments, r, spec, thresholds)
    deps, deps_reason = exact_dependencies(moments, spec)
    without = None
    if deps:
        dependents = {d.target for d in deps}
        rest = [c for c in moments.columns if c not in dependents]
        if len(rest) >= 2:
            sub = moments.subset(rest)
            r_sub = sub.correlation()
            without = matrix_diagnostics(sub, r_sub, spectrum(r_sub), thresholds)
    outliers = None
    if rows is not None:
        outliers = mahalanobis_screen(rows, moments, spec, labels, row_numbers, quantile=thresholds.outlier_quantile)
    read = rows_read if rows_read is not None else moments.n
    return Diagnostics(
        correlation=r,
        spectrum=spec,
        matrix=matrix,
        dependencies=deps,
        dependencies_reason=deps_reason,
        condition=condition_indices(moments, thresholds.condition_index, thresholds.variance_proportion),
        scale=scale_disparity(moments, thresholds.skew_for_log),
        sample=sample_size(moments),
        outliers=outliers,
        without_dependents=without,
        missing_share_rows_dropped=float(rows_dropped / read) if read else 0.0,
    )


def _matrix_section(m: MatrixDiagnostics) -> dict:
    return {
        "vif": m.vif.values,
        "vif_reason": m.vif.reason,
        "vif_max": m.vif.maximum,
        "condition_number": m.condition_number,
        "condition_number_reason": m.condition_number_reason,
        "bartlett": {
            "statistic": m.bartlett.statistic,
            "df": m.bartlett.df,
            "p_value": m.bartlett.p_value,
            "log_det_r": m.bartlett.log_det_r,
            "reason": m.bartlett.reason,
            "caveat": m.bartlett.caveat,
        },
        "kmo": {
            "overall": m.kmo.overall,
            "overall_band": m.kmo.overall_band,
            "per_variable": m.kmo.per_variable,
            "per_variable_band": m.kmo.per_variable_band,
            "candidates_to_drop": m.kmo.candidates_to_drop,
            "floor": m.kmo.floor,
            "reason": m.kmo.reason,
            "bands_source": "Kaiser (1974)",
        },
    }


def diagnostics_section(d: Diagnostics) -> dict:
    """The ``diagnostics`` section of the record (keys of DESIGN.md, and more)."""
    section = _matrix_section(d.matrix)
    section["exact_dependencies"] = [
        {
            "target": dep.target,
            "terms": [{"column": t.column, "coefficient": t.coefficient} for t in dep.terms],
            "constant": dep.constant,
            "text": dep.text,
        }
        for dep in d.dependencies
    ]
    section["exact_dependencies_count"] = len(d.dependencies)
    section["exact_dependencies_reason"] = d.dependencies_reason
    section["correlation_rank"] = d.spectrum.rank
    c = d.condition
    section["condition_indices"] = {
        "scaling": c.scaling,
        "terms": c.terms,
        "indices": c.indices,
        "proportions": c.proportions,
        "threshold": c.threshold,
        "near_dependencies": [
            {"dimension": nd.index_number, "condition_index": nd.condition_index, "features": nd.features}
            for nd in c.near_dependencies
        ],
        "max_index": max((x for x in c.indices if x is not None), default=None),
        "near_dependency_count": len(c.near_dependencies),
        "reason": c.reason,
        "source": "Belsley, Kuh and Welsch (1980)",
    }
    s = d.scale
    section["scale"] = {
        "sd_ratio": s.sd_ratio,
        "largest_sd": s.largest_sd,
        "smallest_sd": s.smallest_sd,
        "cv": s.cv,
        "skewness": s.skewness,
        "excess_kurtosis": s.excess_kurtosis,
        "positive_skewness": s.positive_skewness,
        "log_candidates": s.log_candidates,
        "skew_threshold": s.skew_threshold,
    }
    section["sample_size"] = {"n": d.sample.n, "p": d.sample.p, "n_per_feature": d.sample.n_per_feature}
    section["missing"] = {"share_rows_dropped": d.missing_share_rows_dropped}
    if d.outliers is not None:
        o = d.outliers
        section["outliers"] = {
            "method": o.method,
            "quantile": o.quantile,
            "df": o.df,
            "limit": o.limit,
            "count": o.count,
            "share": o.share,
            "worst": [{"row": w.row, "label": w.label, "distance_squared": w.distance_squared} for w in o.worst],
            "reason": o.reason,
        }
    if d.without_dependents is not None:
        dropped = [dep.target for dep in d.dependencies]
        section["without_dependents"] = {"dropped": dropped, **_matrix_section(d.without_dependents)}
    p = len(d.matrix.columns)
    if p <= MAX_CORRELATION_IN_RECORD:
        section["correlation"] = {"columns": d.matrix.columns, "matrix": d.correlation}
    return jsonable(section)


#: Above this many features (or when p >= n) no p x p matrix is formed: the wide route.
WIDE_FEATURES = 2000


def wide_diagnostics_section(moments: Moments, thresholds: Thresholds, rows_dropped: int, rows_read: int) -> dict:
    """The diagnostics of a wide table (p >= n, or more than WIDE_FEATURES features): the
    matrix figures are undefined (p >= n) or not computed, with the reason; the per-column
    figures are as usual."""
    n, p = moments.n, moments.p
    if p >= n:
        why = f"undefined: {p} features and {n} rows (p >= n), so R is singular"
    else:
        why = f"not computed: {p} features is above {WIDE_FEATURES}, where no p x p matrix is formed"
    columns = list(moments.columns)
    none_map = {c: None for c in columns}
    matrix = {
        "vif": none_map,
        "vif_reason": why,
        "vif_max": None,
        "condition_number": None,
        "condition_number_reason": why,
        "bartlett": {"statistic": None, "df": p * (p - 1) // 2, "p_value": None, "log_det_r": None, "reason": why,
                     "caveat": BartlettResult(None, 0, None, None, None).caveat},
        "kmo": {"overall": None, "overall_band": None, "per_variable": none_map, "per_variable_band": none_map,
                "candidates_to_drop": [], "floor": thresholds.kmo_floor, "reason": why, "bands_source": "Kaiser (1974)"},
    }
    s = scale_disparity(moments, thresholds.skew_for_log)
    section = {
        **matrix,
        "exact_dependencies": [],
        "exact_dependencies_count": None,
        "exact_dependencies_reason": why,
        "correlation_rank": None,
        "condition_indices": {"scaling": None, "terms": [], "indices": [], "proportions": {}, "threshold": thresholds.condition_index,
                              "near_dependencies": [], "max_index": None, "near_dependency_count": None, "reason": why,
                              "source": "Belsley, Kuh and Welsch (1980)"},
        "scale": {
            "sd_ratio": s.sd_ratio, "largest_sd": s.largest_sd, "smallest_sd": s.smallest_sd, "cv": s.cv,
            "skewness": s.skewness, "excess_kurtosis": s.excess_kurtosis, "positive_skewness": s.positive_skewness,
            "log_candidates": s.log_candidates, "skew_threshold": s.skew_threshold,
        },
        "sample_size": {"n": n, "p": p, "n_per_feature": n / p},
        "missing": {"share_rows_dropped": float(rows_dropped / rows_read) if rows_read else 0.0},
        "outliers": {"method": "classical Mahalanobis distance", "quantile": thresholds.outlier_quantile, "df": None,
                     "limit": None, "count": None, "share": None, "worst": [], "reason": why},
        "wide_route": True,
    }
    return jsonable(section)
