"""axisledger: check a table before a PCA reduction, decide it with evidence, record it.

The Python API::

    import planner
    result = planner.audit("measurements.csv", title="Line 3 review", analyst="R. Ortiz")
    result.record        # the decision record, a plain dict
    print(result.summary())
    result.to_pdf("record.pdf")
"""
from __future__ import annotations

__version__ = "0.1.0"

__all__ = ["audit", "__version__"]


def audit(data, **options):
    """Audit ``data`` (a file path or a pandas DataFrame) and return an ``AuditResult``.

    Keyword options are those of :class:`planner.pipeline.AuditOptions` (title, analyst,
    columns, exclude, id_column, target, scaling, components, because, missing, seed,
    sheet). Bad input raises :class:`planner.errors.InputError`.
    """
    from .pipeline import AuditOptions, run_audit

    return run_audit(data, AuditOptions(**options))
