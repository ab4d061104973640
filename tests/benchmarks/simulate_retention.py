"""Simulation study of the number-of-components rules in ``component_evidence``.

Data of known rank k (common factor model, see ``sim_data.py`` for the exact design) are
drawn under six conditions, five sample sizes and k = 1..5 (simple structure) or 2..5
(the other conditions).  For every replicate ``planner.analysis.components.
component_evidence(x, scaling="standardize", seed=...)`` is called, and each rule's k is
compared with the true k.

Usage:

    python tests/benchmarks/simulate_retention.py [--reps N] [--seed S] [--quick]
        [--workers W] [--conditions a,b] [--n 200,1000] [--out DIR]
        [--max-minutes M] [--force] [--dry-run]

    --reps N        replicates per (condition, n, k) cell (default 20; --quick: 4)
    --seed S        base seed (default 20250101); every replicate's seed is derived from
                    (S, condition, n, k, rep), so any single replicate can be re-created
    --quick         4 replicates and n in {200, 1000}
    --workers W     worker processes (default 2)
    --conditions    comma list of condition names (default: all six)
    --n             comma list of sample sizes (default 100,200,500,1000,2000)
    --out DIR       folder for the per-replicate CSV (default: a new temporary folder)
    --max-minutes M stop after the timing probe if the estimate exceeds M minutes
                    (default 15) and suggest a --reps that fits; --force runs anyway
    --dry-run       generate all data sets only (no call of the function under test)

Printed: accuracy (% of replicates with rule k == true k) by rule x condition, mean
signed error (rule k - true k, over replicates where the rule gave a k), accuracy by n and
by true k for ``recommended`` and ``parallel_analysis``, share of replicates where a rule
gave no k, mean call time by n, and the total wall time.  Not collected by pytest.
"""

from __future__ import annotations

import os

for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS", "NUMEXPR_NUM_THREADS"):
    os.environ.setdefault(_var, "1")  # two worker processes on two cores: no BLAS threads

import argparse
import csv
import math
import multiprocessing as mp
import sys
import tempfile
import time
import traceback
from collections import defaultdict
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
ROOT = HERE.parents[1]
for _p in (str(HERE), str(ROOT)):
    if _p not in sys.path:
        sys.path.insert(0, _p)

import sim_data  # noqa: E402

KNOWN_RULES = (
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
DEFAULT_N = (100, 200, 500, 1000, 2000)
QUICK_N = (200, 1000)
DEFAULT_SEED = 20250101

_component_evidence = None


# --------------------------------------------------------------------------- workers


def _import_tool():
    from planner.analysis.components import component_evidence

    return component_evidence


def _init_worker(dry_run: bool) -> None:
    global _component_evidence
    if not dry_run:
        _component_evidence = _import_tool()


def _as_k(value):
    """A rule's k as an int, or None.  Tolerates numpy ints and objects with a ``k``."""
    if value is None:
        return None
    if hasattr(value, "k") and not isinstance(value, (int, np.integer)):
        value = value.k
        if value is None:
            return None
    try:
        f = float(value)
    except (TypeError, ValueError):
        return None
    if not math.isfinite(f):
        return None
    return int(round(f))


def _population_gap(data):
    ev = np.sort(np.linalg.eigvalsh(data.implied_corr()))[::-1]
    k = data.k
    return {"pop_eig_k": round(float(ev[k - 1]), 4),
            "pop_eig_k1": round(float(ev[k]) if k < ev.size else float("nan"), 4)}


def run_task(args):
    base_seed, cond_name, n, k, rep, dry_run = args
    cond = sim_data.CONDITION_BY_NAME[cond_name]
    data, tool_seed = sim_data.make_replicate(base_seed, cond, n, k, rep)
    out = {
        "condition": cond_name,
        "n": n,
        "k_true": k,
        "rep": rep,
        "p": data.p,
        "n_noise": data.n_noise,
        "vars_per_factor": "-".join(map(str, data.vars_per_factor)),
        "factor_r": round(data.factor_r, 4),
        "scaled": int(data.scaled),
        "tool_seed": tool_seed,
        # population eigenvalues of the correlation matrix at the true k (how hard the cell is)
        **_population_gap(data),
        "seconds": 0.0,
        "error": "",
        "rules": {},
        "none_reasons": {},
        "recommended": None,
    }
    if dry_run:
        return out
    t0 = time.perf_counter()
    try:
        ev = _component_evidence(data.x, scaling="standardize", seed=tool_seed)
        out["rules"] = {str(r): _as_k(v) for r, v in dict(ev.rules).items()}
        out["none_reasons"] = {str(r): str(getattr(v, "reason", None) or "")[:120]
                               for r, v in dict(ev.rules).items() if out["rules"][str(r)] is None}
        out["recommended"] = _as_k(ev.recommended)
    except Exception as exc:  # recorded, counted as a miss for every rule
        last = traceback.extract_tb(exc.__traceback__)[-1]
        out["error"] = f"{type(exc).__name__}: {exc} [{Path(last.filename).name}:{last.lineno}]"
    out["seconds"] = time.perf_counter() - t0
    return out


# --------------------------------------------------------------------------- tasks


def build_tasks(conditions, ns, reps, base_seed, dry_run):
    tasks = []
    for cond in conditions:
        for n in ns:
            for k in cond.k_values:
                for rep in range(reps):
                    tasks.append((base_seed, cond.name, n, k, rep, dry_run))
    return tasks


def probe_indices(tasks, ns, base_seed, per_n=2):
    """A stratified sample (``per_n`` tasks for each n) for the run-time estimate."""
    rng = np.random.default_rng([base_seed, 999])
    picked = []
    for n in ns:
        idx = [i for i, t in enumerate(tasks) if t[2] == n]
        if idx:
            picked.extend(rng.choice(idx, size=min(per_n, len(idx)), replace=False).tolist())
    return picked


def estimate_seconds(probe_results, tasks, workers):
    by_n = defaultdict(list)
    for r in probe_results:
        by_n[r["n"]].append(r["seconds"])
    mean_all = float(np.mean([s for v in by_n.values() for s in v])) if by_n else 0.0
    total = 0.0
    for t in tasks:
        v = by_n.get(t[2])
        total += float(np.mean(v)) if v else mean_all
    return total / max(workers, 1)


# --------------------------------------------------------------------------- tables


def rule_order(results):
    seen = set()
    for r in results:
        seen.update(r["rules"])
    ordered = [r for r in KNOWN_RULES if r in seen]
    ordered += sorted(seen - set(KNOWN_RULES))
    missing = [r for r in KNOWN_RULES if r not in seen]
    return ordered + ["recommended"], missing


def k_of(result, rule):
    return result["recommended"] if rule == "recommended" else result["rules"].get(rule)


def summarise(results, rule, key=None):
    """dict group -> (accuracy %, mean signed error, share with no k %, count)."""
    groups = defaultdict(list)
    for r in results:
        groups[key(r) if key else "all"].append(r)
    out = {}
    for g, rs in groups.items():
        ks = [k_of(r, rule) for r in rs]
        hits = sum(1 for r, kh in zip(rs, ks) if kh is not None and kh == r["k_true"])
        errs = [kh - r["k_true"] for r, kh in zip(rs, ks) if kh is not None]
        none = sum(1 for kh in ks if kh is None)
        out[g] = (
            100.0 * hits / len(rs),
            float(np.mean(errs)) if errs else float("nan"),
            100.0 * none / len(rs),
            len(rs),
        )
    return out


def print_table(title, rows, cols, cell, row_w=20, col_w=11):
    print(f"\n{title}")
    head = f"{'':{row_w}s}" + "".join(f"{c:>{col_w}s}" for c in cols)
    print(head)
    print("-" * len(head))
    for row in rows:
        print(f"{row:{row_w}s}" + "".join(f"{cell(row, c):>{col_w}s}" for c in cols))


def fmt_pct(v):
    return "" if v is None else f"{v:.1f}"


def fmt_err(v):
    return "n/a" if v is None or not math.isfinite(v) else f"{v:+.2f}"


def report(results, cond_names, ns):
    rules, missing = rule_order(results)
    cols = list(cond_names) + ["all"]

    stats = {}
    for rule in rules:
        per_cond = summarise(results, rule, key=lambda r: r["condition"])
        per_cond.update(summarise(results, rule))
        stats[rule] = per_cond

    def get(rule, c, i):
        v = stats[rule].get(c)
        return None if v is None else v[i]

    counts = summarise(results, "recommended", key=lambda r: r["condition"])
    print("\nreplicates per condition: " + ", ".join(f"{c}={counts[c][3]}" for c in cond_names if c in counts)
          + f", all={len(results)}")
    if missing:
        print("rule ids expected but never returned: " + ", ".join(missing))
    print("population correlation eigenvalues at the true k (median over replicates): "
          + "; ".join(f"{c}: l_k={np.median([r['pop_eig_k'] for r in results if r['condition'] == c]):.2f}, "
                      f"l_k+1={np.median([r['pop_eig_k1'] for r in results if r['condition'] == c]):.2f}"
                      for c in cond_names if c in counts))

    print_table("ACCURACY (% of replicates with k_rule == k_true)", rules, cols,
                lambda r, c: fmt_pct(get(r, c, 0)))
    print_table("MEAN SIGNED ERROR (k_rule - k_true; + = over-extraction; replicates with a k only)",
                rules, cols, lambda r, c: fmt_err(get(r, c, 1)))
    if any(get(r, "all", 2) for r in rules):
        print_table("NO K RETURNED (% of replicates where the rule gave None or the call failed)",
                    rules, cols, lambda r, c: fmt_pct(get(r, c, 2)))

    for rule in ("recommended", "parallel_analysis"):
        if rule not in rules:
            continue
        by = {}
        for c in cond_names:
            sub = [r for r in results if r["condition"] == c]
            for g, v in summarise(sub, rule, key=lambda r: r["n"]).items():
                by[(g, c)] = v
        for g, v in summarise(results, rule, key=lambda r: r["n"]).items():
            by[(g, "all")] = v
        print_table(f"ACCURACY BY n: {rule} (%)", [str(n) for n in ns], cols,
                    lambda row, c: fmt_pct(by.get((int(row), c), (None,))[0]), row_w=8)

    for rule in ("recommended", "parallel_analysis"):
        if rule not in rules:
            continue
        by = {}
        for c in cond_names:
            sub = [r for r in results if r["condition"] == c]
            for g, v in summarise(sub, rule, key=lambda r: r["k_true"]).items():
                by[(g, c)] = v
        for g, v in summarise(results, rule, key=lambda r: r["k_true"]).items():
            by[(g, "all")] = v
        ks = sorted({r["k_true"] for r in results})
        print_table(f"ACCURACY BY TRUE k: {rule} (%)", [str(k) for k in ks], cols,
                    lambda row, c: fmt_pct(by.get((int(row), c), (None,))[0]), row_w=8)

    # rescaled vs not: the tool standardizes, so these should agree
    by_s = summarise(results, "recommended", key=lambda r: r["scaled"])
    if len(by_s) == 2:
        print(f"\nrecommended accuracy, unscaled vs rescaled columns: "
              f"{by_s[0][0]:.1f}% vs {by_s[1][0]:.1f}%")

    t_by_n = defaultdict(list)
    for r in results:
        t_by_n[r["n"]].append(r["seconds"])
    print("\nmean seconds per component_evidence call by n: "
          + ", ".join(f"n={n}: {np.mean(t_by_n[n]):.3f}" for n in ns if n in t_by_n))

    reasons = defaultdict(int)
    for r in results:
        for rule, why in r["none_reasons"].items():
            reasons[(rule, why or "(no reason given)")] += 1
    if reasons:
        print("\nreasons given with k = None (rule: count x reason):")
        for (rule, why), cnt in sorted(reasons.items(), key=lambda kv: -kv[1])[:12]:
            print(f"  {rule}: {cnt} x {why}")

    errors = [r for r in results if r["error"]]
    if errors:
        distinct = defaultdict(int)
        for r in errors:
            distinct[r["error"]] += 1
        print(f"\n{len(errors)} call(s) raised; distinct messages:")
        for msg, cnt in sorted(distinct.items(), key=lambda kv: -kv[1])[:8]:
            print(f"  {cnt:5d} x {msg}")


def write_csv(results, path):
    rules, _ = rule_order(results)
    fields = ["condition", "n", "k_true", "rep", "p", "n_noise", "vars_per_factor", "factor_r",
              "scaled", "tool_seed", "pop_eig_k", "pop_eig_k1", "seconds", "error"] + [f"k_{r}" for r in rules]
    with open(path, "w", newline="") as fh:
        w = csv.writer(fh)
        w.writerow(fields)
        for r in sorted(results, key=lambda r: (r["condition"], r["n"], r["k_true"], r["rep"])):
            ks = [k_of(r, rule) for rule in rules]
            w.writerow([r[f] for f in fields[:14]] + ["" if kh is None else kh for kh in ks])


# --------------------------------------------------------------------------- main


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--reps", type=int, default=None, help="replicates per cell (default 20; --quick 4)")
    ap.add_argument("--seed", type=int, default=DEFAULT_SEED, help=f"base seed (default {DEFAULT_SEED})")
    ap.add_argument("--quick", action="store_true", help="4 replicates, n in {200, 1000}")
    ap.add_argument("--workers", type=int, default=2)
    ap.add_argument("--conditions", default=None, help="comma list; default all: "
                    + ",".join(c.name for c in sim_data.CONDITIONS))
    ap.add_argument("--n", default=None, help="comma list of sample sizes")
    ap.add_argument("--out", default=None, help="folder for the CSV (default: new temp folder)")
    ap.add_argument("--max-minutes", type=float, default=15.0)
    ap.add_argument("--force", action="store_true", help="run even if the estimate exceeds --max-minutes")
    ap.add_argument("--dry-run", action="store_true", help="generate data only")
    a = ap.parse_args(argv)

    reps = a.reps if a.reps is not None else (4 if a.quick else 20)
    if reps < 1:
        ap.error("--reps must be >= 1")
    ns = tuple(int(v) for v in a.n.split(",")) if a.n else (QUICK_N if a.quick else DEFAULT_N)
    if a.conditions:
        names = [s.strip() for s in a.conditions.split(",") if s.strip()]
        bad = [s for s in names if s not in sim_data.CONDITION_BY_NAME]
        if bad:
            ap.error(f"unknown condition(s) {bad}; choose from {list(sim_data.CONDITION_BY_NAME)}")
        conditions = [sim_data.CONDITION_BY_NAME[s] for s in names]
    else:
        conditions = list(sim_data.CONDITIONS)

    if not a.dry_run:
        try:
            _import_tool()
        except Exception as exc:
            print(f"cannot import planner.analysis.components.component_evidence ({type(exc).__name__}: {exc}).\n"
                  "Check the generator with: python tests/benchmarks/sim_data.py, or use --dry-run.",
                  file=sys.stderr)
            return 3

    t_start = time.perf_counter()
    tasks = build_tasks(conditions, ns, reps, a.seed, a.dry_run)
    print(f"retention-rule simulation: {len(conditions)} conditions, n in {list(ns)}, {reps} reps/cell, "
          f"{len(tasks)} replicates, base seed {a.seed}, {a.workers} workers")
    for c in conditions:
        print(f"  {c.name:11s} k={list(c.k_values)}  {c.description}")

    ctx = mp.get_context("fork") if "fork" in mp.get_all_start_methods() else mp.get_context()
    results = []
    with ctx.Pool(a.workers, initializer=_init_worker, initargs=(a.dry_run,)) as pool:
        probe = probe_indices(tasks, ns, a.seed, per_n=a.workers) if not a.dry_run else []
        if probe:
            t0 = time.perf_counter()
            results.extend(pool.map(run_task, [tasks[i] for i in probe], chunksize=1))
            est = estimate_seconds(results, tasks, a.workers)
            print(f"timing probe: {len(probe)} replicates in {time.perf_counter() - t0:.1f}s; "
                  f"estimated total {est / 60:.1f} min")
            if est > a.max_minutes * 60:
                fit = max(1, int(reps * a.max_minutes * 60 / est))
                print(f"estimate exceeds {a.max_minutes:g} min; suggest --reps {fit} "
                      f"(or --quick, or --force to run anyway)")
                if not a.force:
                    return 2
        probe_set = set(probe)
        rest = [t for i, t in enumerate(tasks) if i not in probe_set]
        done, step = len(results), max(1, len(tasks) // 10)
        for r in pool.imap_unordered(run_task, rest, chunksize=2):
            results.append(r)
            done += 1
            if done % step == 0 or done == len(tasks):
                el = time.perf_counter() - t_start
                print(f"  {done}/{len(tasks)} done, {el:.0f}s elapsed", file=sys.stderr, flush=True)

    out_dir = Path(a.out) if a.out else Path(tempfile.mkdtemp(prefix="axisledger_retention_"))
    out_dir.mkdir(parents=True, exist_ok=True)
    csv_path = out_dir / f"retention_seed{a.seed}_reps{reps}{'_quick' if a.quick else ''}.csv"

    if a.dry_run:
        ps = np.array([r["p"] for r in results])
        print(f"\ndry run: p from {ps.min()} to {ps.max()} (median {np.median(ps):.0f}); "
              f"{sum(r['scaled'] for r in results)} of {len(results)} replicates rescaled")
    else:
        report(results, [c.name for c in conditions], ns)
    write_csv(results, csv_path)
    print(f"\nper-replicate CSV: {csv_path}")
    print(f"total wall time: {time.perf_counter() - t_start:.1f}s")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
