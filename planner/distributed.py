"""The Dask engine: a folder or glob of Parquet or CSV parts, beyond one machine.

Each partition's Moments are computed where the partition lives and merged by the same
:meth:`planner.moments.Moments.merge` as the streamed chunks, so every matrix-level figure
is the in-memory one. The per-row figures are computed per partition with the model of the
whole table and reduced (counts and the worst rows). Use it when the parts already live on
a cluster (``--scheduler ADDRESS``) or do not fit one machine's disk; for one large file on
one machine, ``--engine stream`` is simpler and as exact.
"""
from __future__ import annotations

import glob
from pathlib import Path

import numpy as np

from . import intake as intake_mod
from .errors import InputError
from .moments import Moments

SAMPLE_ROWS = 20_000
TOP_ROWS = 10


def _parts(source) -> tuple[list[str], str]:
    text = str(source)
    path = Path(text)
    if path.is_dir():
        files = sorted(str(p) for p in path.iterdir() if p.suffix.lower() in (".parquet", ".csv", ".tsv") and p.is_file())
    else:
        files = sorted(glob.glob(text))
    if not files:
        raise InputError(f"no Parquet or CSV parts found at {source}", "give a folder or a glob such as 'parts/*.parquet'")
    kinds = {"parquet" if f.lower().endswith(".parquet") else "csv" for f in files}
    if len(kinds) > 1:
        raise InputError(f"{source} mixes Parquet and CSV parts", "give parts of one kind")
    return files, kinds.pop()


def _client(scheduler: str | None):
    try:
        import dask  # noqa: F401
        import dask.dataframe  # noqa: F401
    except ImportError:
        raise InputError("the dask engine needs the dask extra", "install it with: pip install 'axisledger[dask]'")
    if scheduler:
        try:
            from dask.distributed import Client
        except ImportError:
            raise InputError("--scheduler needs dask.distributed", "install it with: pip install 'dask[distributed]'")
        return Client(scheduler)
    return None


def _partition_pass(frame, features, target, id_column, seed, index):
    """Moments of one partition and its seeded sample candidates (keys, rows, target, labels)."""
    x = frame[features].to_numpy(dtype=np.float64)
    m = Moments(features).update(x)
    complete = ~np.isnan(x).any(axis=1)
    rng = np.random.default_rng([seed, 51, index])
    keys = rng.random(int(complete.sum()))
    keep = np.argsort(keys)[:SAMPLE_ROWS]
    rows = x[complete][keep]
    y = frame[target].to_numpy(dtype=np.float64)[complete][keep] if target else None
    labels = frame[id_column].astype(str).to_numpy()[complete][keep] if id_column else None
    positions = np.flatnonzero(complete)[keep]
    return m, keys[keep], rows, y, labels, int(len(frame)), positions


def _row_pass(frame, features, id_column, index, model, offset=0):
    """Per-partition counts and worst rows of SPE, T-squared and the Mahalanobis screen."""
    from .analysis.monitoring import beyond_limit
    from .analysis.rowpass import largest_first, model_and_screen_figures

    x = frame[features].to_numpy(dtype=np.float64)
    complete = ~np.isnan(x).any(axis=1)
    x = x[complete]
    rows = offset + np.flatnonzero(complete) + 1
    labels = frame[id_column].astype(str).to_numpy()[complete] if id_column else np.array([f"row {r}" for r in rows])
    sc = model["scaling"]
    fig, d2 = model_and_screen_figures(x, model["moments"], model["spectrum"], sc.center, sc.scale, model["loadings"],
                                       model["eigenvalues"], model["k"])
    out = {"n": len(x)}
    for name, values, limits in (("spe", fig.spe, model["spe_limits"]), ("t2", fig.t2, model["t2_limits"]), ("d2", d2, model["d2_limits"])):
        out[name] = [int(beyond_limit(values, lim).sum()) for lim in limits]
        top = largest_first(values, TOP_ROWS)
        out[name + "_top"] = [(float(values[i]), str(labels[i]), x[i], int(rows[i])) for i in top]
    return out


def run_dask_audit(source, options):
    """The whole audit of a set of parts with Dask (see the module docstring)."""
    import dask
    import dask.dataframe as dd
    from .analysis.distributions import chi2_ppf

    from .analysis.components import analyse_components, components_section, decomposition_section
    from .analysis.diagnostics import diagnostics_section, run_diagnostics
    from .analysis.discarded import discarded_section
    from .analysis.monitoring import contributions, row_figures
    from .analysis.outliers import FlaggedRow, OutlierScreen
    from .pipeline import (AuditResult, alternatives_for, build_record, choose_components, feature_plans_of, plan_sections,
                           scaling_for, thresholds_from)
    from .record import seal
    from .rulebook import load_rulebook

    if options.missing == "mean":
        raise InputError("--missing mean is not available with --engine dask", "use --missing listwise")
    files, kind = _parts(source)
    client = _client(options.scheduler)
    try:
        ddf = dd.read_parquet(files) if kind == "parquet" else dd.read_csv(files, dtype=str, keep_default_na=False)
        head_frame = ddf.partitions[0].compute()
        head = intake_mod.load(head_frame, columns=options.columns, exclude=options.exclude, id_column=options.id_column,
                               target=options.target, missing="listwise")
        features, target, id_column = head.columns_used, head.target_name, head.id_column
        if kind == "csv":
            convert = {c: "float64" for c in features + ([target] if target else [])}
            ddf = dd.read_csv(files, dtype={**{c: str for c in ([id_column] if id_column else [])}},
                              na_values=sorted(intake_mod.MISSING_SPELLINGS - {""}), keep_default_na=True).astype(convert)
        rulebook = load_rulebook(options.rules)
        parts = ddf.to_delayed()
        results = dask.compute(*[dask.delayed(_partition_pass)(p, features, target, id_column, options.seed, i)
                                 for i, p in enumerate(parts)])
        moments = Moments(features)
        for m, *_ in results:
            moments = moments.merge(m)
        rows_read = sum(r[5] for r in results)
        offsets = np.concatenate([[0], np.cumsum([r[5] for r in results])[:-1]])
        keys = np.concatenate([r[1] for r in results])
        numbers = np.concatenate([off + r[6] + 1 for off, r in zip(offsets, results)])
        order = np.argsort(keys)[:SAMPLE_ROWS]
        order = order[np.argsort(numbers[order])]  # back to file order: resampling as in memory
        sample = np.vstack([r[2] for r in results])[order]
        sample_y = np.concatenate([r[3] for r in results])[order] if target else None
        sample_labels = (list(np.concatenate([r[4] for r in results])[order]) if id_column
                         else [f"row {int(k)}" for k in numbers[order]])
        n, p = moments.n, moments.p
        if p >= n:
            raise InputError(f"{p} features for {n} rows is a wide table", "use --engine memory")
        thresholds = thresholds_from(rulebook)
        rows_dropped = rows_read - n
        diagnostics = run_diagnostics(moments, None, [], np.empty(0), thresholds, rows_dropped=rows_dropped, rows_read=rows_read)
        spec = diagnostics.spectrum
        df = int((spec.values > spec.tolerance).sum())
        d2_limit = float(chi2_ppf(thresholds.outlier_quantile, df))
        # The scaling and the model come from the Moments and the sample; the rows then pass once.
        diagnostics.outliers = None
        scaling = scaling_for(options.scaling, moments, sample, diagnostics_section(diagnostics), rulebook)
        evidence = analyse_components(moments, sample, scaling, seed=options.seed,
                                      share=float(rulebook.threshold("kept_share_low", 0.80)),
                                      permutation=options.parallel_null == "permutation")
        chosen, override = choose_components(evidence, options)
        alternatives = alternatives_for(evidence, chosen, moments, rulebook)
        disc = discarded_section(evidence, chosen, moments, sample, sample_labels, numbers[order],
                                 floor=float(rulebook.threshold("feature_poorly_represented", 0.5)), seed=options.seed,
                                 target=sample_y, target_name=target,
                                 signal_share=float(rulebook.threshold("target_signal_discarded", 0.05)),
                                 feature_plans=feature_plans_of(alternatives))
        d = evidence.decomposition
        model = {"scaling": scaling, "loadings": d.loadings, "eigenvalues": d.eigenvalues, "k": chosen, "moments": moments,
                 "spectrum": spec, "spe_limits": [disc["spe_limit"], disc["spe_limit_99"]],
                 "t2_limits": [disc["t2_limit"], disc["t2_limit_99"]], "d2_limits": [d2_limit]}
        passes = dask.compute(*[dask.delayed(_row_pass)(part, features, id_column, i, model, int(offsets[i]))
                                for i, part in enumerate(parts)])
    finally:
        if client is not None:
            client.close()

    def merged(name):
        counts = np.sum([r[name] for r in passes], axis=0)
        top = sorted((t for r in passes for t in r[name + "_top"]), key=lambda t: (-t[0], t[3]))[:TOP_ROWS]
        return counts, top

    d2_counts, d2_top = merged("d2")
    diagnostics.outliers = OutlierScreen("classical Mahalanobis distance", thresholds.outlier_quantile, df, d2_limit,
                                         int(d2_counts[0]), float(d2_counts[0] / n),
                                         [FlaggedRow(r, lab, v) for v, lab, _, r in d2_top if v > d2_limit], None)
    diag_section = diagnostics_section(diagnostics)
    spe_counts, spe_top = merged("spe")
    t2_counts, t2_top = merged("t2")
    disc.update({
        "rows_over_spe_limit": int(spe_counts[0]), "rows_over_spe_limit_99": int(spe_counts[1]),
        "rows_over_t2_limit": int(t2_counts[0]), "rows_over_t2_limit_99": int(t2_counts[1]),
        "share_rows_over_spe_limit": float(spe_counts[0] / n),
        "per_row_source": f"all {n:,} rows used, per partition on Dask",
        "resampling_sample": f"target check and loading stability on a seeded sample of {len(sample):,} of the {n:,} rows",
    })
    worst = []
    for v, lab, row, number in spe_top:
        fig = row_figures(scaling.transform(row[None, :]), d.loadings, d.eigenvalues, chosen)
        worst.append({"row": number, "label": lab, "spe": v, "t2": float(fig.t2[0]),
                      "contributions": contributions(fig.residual[0], list(features))})
    disc["worst_spe"] = worst
    disc["worst_t2"] = [{"row": r, "label": lab, "t2": v, "spe": None} for v, lab, _, r in t2_top]
    sections = {"diagnostics": diag_section, "decomposition": decomposition_section(evidence, list(features)),
                "components": components_section(evidence, chosen, override), "discarded": disc,
                **plan_sections(alternatives, options, rulebook, list(features), disc.get("target"))}
    import dataclasses
    import hashlib

    digest = hashlib.sha256()
    for f in files:  # the fingerprint of the parts: the SHA-256 of their bytes in name order
        with open(f, "rb") as handle:
            for block in iter(lambda: handle.read(1 << 20), b""):
                digest.update(block)
    notes = [n_ for n_ in head.notes if n_["id"] != "rows_dropped"] + [intake_mod.note(
        "dask", "note", f"read as {len(files)} part(s) with Dask; the screening of columns was decided on the first part")]
    result = dataclasses.replace(head, source=str(source), sha256=digest.hexdigest(), file_type=kind, rows_read=rows_read,
                                 rows_used=n, data=sample, row_labels=sample_labels, target=sample_y,
                                 missing_per_column={c: int(v) for c, v in zip(features, moments.missing)},
                                 rows_dropped_missing=rows_dropped, notes=notes, missing_policy=options.missing)
    record = build_record(result, moments, options, rulebook, sections)
    record["reproducibility"]["engine"] = {"engine": "dask", "parts": len(files), "scheduler": options.scheduler or "local",
                                           "fingerprint": "SHA-256 of the parts' bytes, concatenated in name order"}
    seal(record)
    return AuditResult(record=record, intake=result, moments=moments)
