"""The audit flow of DESIGN.md: intake -> Moments -> analysis -> Record.

:func:`run_audit` is the one place where the steps are put together; the command line and
the Python API both call it. It computes; it writes nothing (see :mod:`planner.output`).
"""
from __future__ import annotations

import importlib
import platform
import threading
from dataclasses import dataclass, field
from importlib import metadata
from typing import TYPE_CHECKING

import numpy as np

from . import __version__, intake as intake_mod
from .errors import InputError
from .moments import Moments
from .record import SCHEMA_VERSION, jsonable, new_record_id, seal, utc_now
from .rulebook import Rulebook, load_rulebook

if TYPE_CHECKING:  # the analysis modules are imported where they are used (see warm_imports)
    from .analysis.diagnostics import Thresholds

#: The modules of the functional core: they import scipy, which takes a noticeable part of
#: a second, so an audit imports them on a second thread while the table is being read.
ANALYSIS_MODULES = (
    "planner.analysis.components", "planner.analysis.diagnostics", "planner.analysis.discarded",
    "planner.analysis.rowpass", "planner.analysis.scaling", "planner.analysis.profile", "planner.analysis.alternatives",
)


def warm_imports() -> threading.Thread:
    """Start importing the analysis modules on a second thread. Whoever imports one of them
    meanwhile waits for that import to finish (Python's per-module import locks), so this
    only moves the work off the critical path; intake imports none of them."""
    def run() -> None:
        for name in ANALYSIS_MODULES:
            importlib.import_module(name)

    thread = threading.Thread(target=run, name="axisledger-imports", daemon=True)
    thread.start()
    return thread

SCALINGS = ("auto", "standardize", "center", "robust", "pareto")
PLANS = ("components", "feature_subset", "vif_pruning")
ENGINES = ("auto", "memory", "stream", "dask")


@dataclass
class AuditOptions:
    """Everything a user can choose for an audit (the options of ``axisledger audit``)."""

    title: str = "PCA decision record"
    analyst: str | None = None
    columns: list[str] | str | None = None
    exclude: list[str] | str | None = None
    id_column: str | None = None
    target: str | None = None
    scaling: str = "auto"
    components: int | str = "auto"
    because: str | None = None
    plan: str | None = None
    missing: str = "listwise"
    rules: str | None = None
    seed: int = 0
    sheet: str | None = None
    parallel_null: str = "wishart"
    engine: str = "auto"
    scheduler: str | None = None
    quiet: bool = False
    command_line: list[str] = field(default_factory=list)

    def validate(self) -> None:
        if self.scaling not in SCALINGS:
            raise InputError(f"unknown scaling {self.scaling!r}", f"use one of: {', '.join(SCALINGS)}")
        if self.components != "auto":
            if isinstance(self.components, bool) or not isinstance(self.components, (int, np.integer)):
                raise InputError(f"--components must be 'auto' or a whole number, got {self.components!r}", "for example --components 3")
            if self.components < 1:
                raise InputError(f"--components must be at least 1, got {self.components}", "give a positive number of components")
            if not (self.because and self.because.strip()):
                raise InputError("--components N overrides the recommendation and needs --because TEXT", "say why, e.g. --because 'fixed by the model spec'")
        elif self.because is not None and self.components == "auto" and self.plan is None:
            raise InputError("--because only goes with --components N or --plan", "drop --because, or give --components N or --plan")
        if self.plan is not None and self.plan not in PLANS:
            raise InputError(f"unknown plan {self.plan!r}", f"use one of: {', '.join(PLANS)}")
        if self.because is not None and not self.because.strip():
            raise InputError("--because is empty", "say why, e.g. --because 'fixed by the model spec'")
        if isinstance(self.seed, bool) or not isinstance(self.seed, (int, np.integer)) or self.seed < 0:
            raise InputError(f"--seed must be a whole number >= 0, got {self.seed!r}", "for example --seed 7")
        if self.engine not in ENGINES:
            raise InputError(f"unknown engine {self.engine!r}", f"use one of: {', '.join(ENGINES)}")
        if self.parallel_null not in ("wishart", "permutation"):
            raise InputError(f"unknown parallel-analysis null {self.parallel_null!r}", "use wishart or permutation")
        if self.title is not None and not str(self.title).strip():
            raise InputError("--title is empty", "give a title, e.g. --title 'Kiln line review'")


def software_versions() -> dict:
    """Versions of Python and of the libraries whose arithmetic the record depends on."""
    versions = {"python": platform.python_version(), "axisledger": __version__}
    for package in ("numpy", "scipy", "pandas", "statsmodels", "jinja2", "weasyprint", "matplotlib", "pyarrow"):
        try:
            versions[package] = metadata.version(package)
        except metadata.PackageNotFoundError:
            versions[package] = None
    return versions


def thresholds_from(rulebook: Rulebook) -> Thresholds:
    """The thresholds the analysis itself uses, taken from the rulebook in force."""
    from .analysis.diagnostics import Thresholds

    defaults = Thresholds()
    return Thresholds(
        condition_index=float(rulebook.threshold("condition_index_high", defaults.condition_index)),
        variance_proportion=defaults.variance_proportion,
        kmo_floor=float(rulebook.threshold("kmo_variable_low", defaults.kmo_floor)),
        skew_for_log=float(rulebook.threshold("skew_log_candidate", defaults.skew_for_log)),
        outlier_quantile=defaults.outlier_quantile,
    )


def intake_findings(result: intake_mod.IntakeResult) -> list[dict]:
    """The intake's observations as findings (they have no threshold)."""
    return [
        {
            "rule_id": f"intake.{n['id']}",
            "severity": n["severity"],
            "message": n["message"],
            "value": None,
            "threshold": None,
            "source": "axisledger intake screening",
            "figure": "input",
            "subject": n.get("subject"),
        }
        for n in result.notes
    ]


_SEVERITY_ORDER = {"blocker": 0, "caution": 1, "note": 2}


def audit_events(created: str, options: AuditOptions, override: dict | None, plan_choice: dict | None = None) -> list[dict]:
    """The events up to the record's creation, inside the hashed body (DESIGN.md)."""
    events = [{"event": "created", "at": created, "by": options.analyst, "detail": "record created by audit"}]
    if plan_choice and plan_choice.get("overridden"):
        events.append(
            {
                "event": "override",
                "at": created,
                "by": options.analyst,
                "detail": f"plan {plan_choice['chosen']} instead of the recommended {plan_choice['recommended']}",
                "because": plan_choice["because"],
            }
        )
    if override:
        events.append(
            {
                "event": "override",
                "at": created,
                "by": options.analyst,
                "detail": f"components {override['components']} instead of the recommended {override['recommended']}",
                "because": override["because"],
            }
        )
    return events


@dataclass
class AuditResult:
    """What an audit produced: the record (a plain dict) and what was read."""

    record: dict
    intake: intake_mod.IntakeResult
    moments: Moments

    @property
    def plan(self):
        """The chosen reduction plan of the record (``transform``, ``get_feature_names_out``)."""
        from .plan import plan_from_record

        return plan_from_record(self.record)

    def summary(self) -> str:
        from .render.summary import render_summary

        return render_summary(self.record)

    def to_pdf(self, path) -> None:
        from .output import write_pdf

        write_pdf(self.record, path)

    def _repr_html_(self) -> str:
        from .render.html import render_html

        return render_html(self.record, fragment=True)


def compute_moments(data: np.ndarray, columns: list[str], missing_per_column: dict[str, int], full: bool = True,
                    extremes: tuple | None = None) -> Moments:
    """Moments of the rows used; the missing counts are those of the input, before the policy.
    A long table is cut into spans walked in parallel (planner.parallel), their Moments
    merged in span order."""
    from .parallel import run_spans

    parts = run_spans(len(data), lambda a, b: Moments.from_array(data[a:b], columns, full=full, with_extremes=extremes is None))
    moments = parts[0]
    for part in parts[1:]:
        moments = moments.merge(part)
    if extremes is not None:
        moments.set_extremes(*extremes)
    moments.missing = np.array([missing_per_column.get(c, 0) for c in columns], dtype=np.int64)
    return moments


def build_record(
    intake: intake_mod.IntakeResult,
    moments: Moments,
    options: AuditOptions,
    rulebook: Rulebook,
    sections: dict,
) -> dict:
    """Assemble the record from the intake and the analysis results, judge it, seal it."""
    from .analysis.profile import column_profiles

    created = utc_now()
    record = {
        "schema_version": SCHEMA_VERSION,
        "record_id": new_record_id(),
        "status": "draft",
        "title": str(options.title),
        "analyst": options.analyst,
        "created_at": created,
        "tool": {"name": "axisledger", "version": __version__},
        "input": intake.input_section(),
        "screening": {"columns": [jsonable(p) for p in column_profiles(moments)]},
        **sections,
        "rulebook": {
            "path": rulebook.path if options.rules else "default.toml (built in)",
            "sha256": rulebook.sha256,
            "rules": len(rulebook.rules),
            "thresholds": {rule.id: rule.threshold for rule in rulebook.rules},
        },
        "options": {
            "scaling": options.scaling,
            "components": options.components,
            "plan": options.plan,
            "missing": options.missing,
            "seed": int(options.seed),
            "parallel_null": options.parallel_null,
            "engine": options.engine,
            "columns": intake_mod.split_names(options.columns),
            "exclude": intake_mod.split_names(options.exclude),
            "id_column": options.id_column,
            "target": options.target,
        },
        "reproducibility": {
            "command_line": list(options.command_line),
            "seed": int(options.seed),
            "software": software_versions(),
            "platform": f"{platform.system()} {platform.machine()}",
        },
        "audit_trail": audit_events(created, options, sections["components"].get("override"), sections.get("plan_choice")),
        "findings": [],
        "signoffs": [],
    }
    record = jsonable(record)
    findings = intake_findings(intake) + rulebook.evaluate(record)
    findings.sort(key=lambda f: _SEVERITY_ORDER.get(f["severity"], 3))  # stable: rule order kept
    record["findings"] = jsonable(findings)
    return seal(record)


def run_audit(source, options: AuditOptions | None = None) -> AuditResult:
    """Run the whole audit of ``source`` (a path or a pandas DataFrame)."""
    options = options or AuditOptions()
    options.validate()
    engine = engine_for(source, options)
    if engine == "stream":
        from .streaming import run_stream_audit

        return run_stream_audit(source, options, quiet=options.quiet)
    if engine == "dask":
        from .distributed import run_dask_audit

        return run_dask_audit(source, options)
    warm_imports()
    result = intake_mod.load(
        source,
        columns=options.columns,
        exclude=options.exclude,
        id_column=options.id_column,
        target=options.target,
        missing=options.missing,
        sheet=options.sheet,
    )
    if options.components != "auto" and options.components > min(len(result.columns_used), result.rows_used - 1):
        raise InputError(
            f"--components {options.components} is more than the {len(result.columns_used)} features used"
            if options.components > len(result.columns_used)
            else f"--components {options.components} is more than the {result.rows_used - 1} components {result.rows_used} rows allow",
            f"give a number from 1 to {min(len(result.columns_used), result.rows_used - 1)}",
        )
    from .analysis.components import analyse_components, components_section, decomposition_section
    from .analysis.diagnostics import WIDE_FEATURES, diagnostics_section, run_diagnostics, wide_diagnostics_section
    from .analysis.discarded import discarded_section
    from .analysis.rowpass import model_row_figures

    rulebook = load_rulebook(options.rules)
    n, p = result.data.shape
    wide = p >= n or p > WIDE_FEATURES
    moments = compute_moments(result.data, result.columns_used, result.missing_per_column, full=not wide,
                              extremes=result.column_extremes)
    thresholds = thresholds_from(rulebook)
    if wide:
        diagnostics = None
        diag_section = wide_diagnostics_section(moments, thresholds, result.rows_dropped_missing, result.rows_read)
    else:
        # The matrix-level diagnostics now; the outlier screen comes with the pass over the rows.
        diagnostics = run_diagnostics(
            moments, None, [], np.empty(0), thresholds, rows_dropped=result.rows_dropped_missing, rows_read=result.rows_read,
        )
        diag_section = diagnostics_section(diagnostics)

    def components_for(scaling):
        evidence = analyse_components(
            moments,
            result.data,
            scaling,
            seed=options.seed,
            share=float(rulebook.threshold("kept_share_low", 0.80)),
            permutation=options.parallel_null == "permutation",
        )
        return (evidence, *choose_components(evidence, options))

    scaling = scaling_for(options.scaling, moments, result.data, diag_section, rulebook)
    evidence, chosen, override = components_for(scaling)
    figures = None
    if diagnostics is not None:
        figures, diag_section = screen_rows(result, moments, diagnostics, thresholds, evidence, chosen)
        seen = scaling_for(options.scaling, moments, result.data, diag_section, rulebook)
        if seen.method != scaling.method:  # --scaling auto, and the screen found many outlying rows
            scaling = seen
            evidence, chosen, override = components_for(scaling)
            d = evidence.decomposition
            figures = model_row_figures(result.data, scaling.center, scaling.scale, d.loadings, d.eigenvalues, chosen)
    alternatives = alternatives_for(evidence, chosen, moments, rulebook, result.data)
    discarded = discarded_section(
        evidence,
        chosen,
        moments,
        result.data,
        result.row_labels,
        result.row_numbers,
        floor=float(rulebook.threshold("feature_poorly_represented", 0.5)),
        seed=options.seed,
        target=result.target,
        target_name=result.target_name,
        signal_share=float(rulebook.threshold("target_signal_discarded", 0.05)),
        feature_plans=feature_plans_of(alternatives),
        model_figures=figures,
    )
    sections = {
        "diagnostics": diag_section,
        "decomposition": decomposition_section(evidence, result.columns_used),
        "components": components_section(evidence, chosen, override),
        "discarded": discarded,
        **plan_sections(alternatives, options, rulebook, result.columns_used, discarded.get("target")),
    }
    record = build_record(result, moments, options, rulebook, sections)
    return AuditResult(record=record, intake=result, moments=moments)


def engine_for(source, options: AuditOptions) -> str:
    """``memory`` for DataFrames, workbooks and ordinary files; ``stream`` for CSV and
    Parquet files too large to read whole comfortably, with ``--engine auto``
    (:func:`planner.streaming.should_stream`); what was asked for otherwise."""
    from pathlib import Path

    if options.engine in ("memory", "dask"):
        return options.engine
    if isinstance(source, (str, Path)) and Path(source).is_file():
        from .streaming import should_stream

        if options.engine == "stream":
            return "stream"
        if options.missing != "mean" and should_stream(Path(source)):
            return "stream"
    elif options.engine == "stream" and not isinstance(source, (str, Path)):
        raise InputError("--engine stream reads a file, not a DataFrame", "pass the path of a CSV or Parquet file")
    return "memory"


def choose_components(evidence, options: AuditOptions) -> tuple[int, dict | None]:
    """The recommended k, or the user's N with the override kept for the audit trail."""
    available = len(evidence.decomposition.eigenvalues)
    if options.components == "auto":
        return evidence.recommended, None
    if options.components > available:
        raise InputError(
            f"--components {options.components} is more than the {available} components that exist",
            f"give a number from 1 to {available}",
        )
    chosen = int(options.components)
    if chosen > evidence.decomposition.loadings.shape[1]:
        raise InputError(
            f"--components {chosen} is more than the {evidence.decomposition.loadings.shape[1]} components whose loadings are kept",
            "choose fewer components",
        )
    return chosen, {"components": chosen, "recommended": evidence.recommended, "because": options.because.strip(), "by": options.analyst}


def scaling_for(requested: str, moments: Moments, rows, diagnostics: dict, rulebook: Rulebook):
    """The scaling asked for, or the one the ``auto`` policy chooses from the diagnostics."""
    from .analysis.scaling import ScalingEvidence, choose_scaling, make_scaling, unit_of

    if requested != "auto":
        return make_scaling(requested, moments, rows, [f"{requested} was requested (--scaling {requested})"], requested)
    outliers = diagnostics.get("outliers") or {}
    evidence = ScalingEvidence(
        sd_ratio=diagnostics["scale"]["sd_ratio"],
        sd_ratio_threshold=float(rulebook.threshold("scale_disparity", 10.0)),
        units={c: unit_of(c) for c in moments.columns},
        outlier_share=outliers.get("share"),
        outlier_share_threshold=float(rulebook.threshold("outliers_many", 0.05)),
    )
    method, reasons = choose_scaling(evidence)
    return make_scaling(method, moments, rows, reasons, "auto")



def alternatives_for(evidence, chosen: int, moments: Moments, rulebook: Rulebook, rows: np.ndarray | None = None):
    """The plans that keep original features, beside the component plan (from the matrices:
    the Moments' ones, or for p >= n, up to SUBSET_MAX_FEATURES features, the rows')."""
    from .analysis.alternatives import SUBSET_MAX_FEATURES, plan_alternatives

    d = evidence.decomposition
    vif_threshold = float(rulebook.threshold("vif_high", 10.0))
    if moments.full and moments.p < moments.n:
        c, r = evidence.scaling.matrix(moments), moments.correlation()
    elif rows is not None and moments.p <= SUBSET_MAX_FEATURES:
        c = np.cov(evidence.scaling.transform(rows), rowvar=False)
        r = np.corrcoef(rows, rowvar=False)
    else:
        why = f"not computed: no p x p matrix is formed for {moments.p} features"
        return plan_alternatives(None, None, d.loadings, d.explained_ratio, chosen, vif_threshold, reason=why)
    return plan_alternatives(c, r, d.loadings, d.explained_ratio, chosen, vif_threshold)


def feature_plans_of(alternatives) -> dict[str, list[int]]:
    """The columns each feature plan keeps, for the target check's folds."""
    plans = {"feature_subset": alternatives.subset_plan, "vif_pruning": alternatives.pruning_plan}
    return {plan_id: plan.kept for plan_id, plan in plans.items() if plan is not None}


def plan_sections(alternatives, options: AuditOptions, rulebook: Rulebook, columns: list[str], target: dict | None) -> dict:
    """``alternatives`` and ``plan_choice``: the plan asked for, else the component plan; a
    plan asked for against the recommendation needs ``--because``."""
    from .analysis.alternatives import alternatives_section, choose_plan

    size_ratio = float(rulebook.threshold("subset_plan_within_reach", 1.5))
    vif_threshold = float(rulebook.threshold("vif_high", 10.0))
    choice = choose_plan(alternatives, options.plan, options.because.strip() if options.because else None, size_ratio, vif_threshold)
    if options.plan is not None and options.plan != "components":
        plan = alternatives.subset_plan if options.plan == "feature_subset" else alternatives.pruning_plan
        if plan is None:
            raise InputError(f"--plan {options.plan} cannot be formed for this table ({alternatives.reason})", "use --plan components")
    if options.plan is not None and choice.chosen != choice.recommended and not choice.because:
        raise InputError(
            f"--plan {choice.chosen} goes against the recommended plan ({choice.recommended}) and needs --because TEXT",
            "say why, e.g. --because 'the model must use measured features'",
        )
    return alternatives_section(alternatives, choice, columns, target, size_ratio, vif_threshold)


def screen_rows(result: intake_mod.IntakeResult, moments: Moments, diagnostics, thresholds: Thresholds, evidence, chosen: int):
    """One pass over the rows for the squared Mahalanobis distances (the outlier screen,
    attached to ``diagnostics``), SPE and T-squared; returns the model's row figures and the
    diagnostics section with the screen."""
    from .analysis.diagnostics import diagnostics_section
    from .analysis.outliers import screen_of_distances
    from .analysis.rowpass import model_and_screen_figures

    d, sc = evidence.decomposition, evidence.scaling
    spec = diagnostics.spectrum
    figures, d2 = model_and_screen_figures(result.data, moments, spec, sc.center, sc.scale, d.loadings, d.eigenvalues, chosen)
    diagnostics.outliers = screen_of_distances(
        d2, moments.n, moments.p, spec, result.row_labels, result.row_numbers, quantile=thresholds.outlier_quantile,
    )
    return figures, diagnostics_section(diagnostics)
