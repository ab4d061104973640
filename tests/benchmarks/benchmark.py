"""axisledger benchmarks: speed figures measured on this machine (not collected by pytest).

    python tests/benchmarks/benchmark.py [SECTION ...]

Sections (default: all that exist):
    parallel    Horn's parallel analysis, 1000 Wishart draws at p = 100, one core
                (target: under 2 s)

Each section prints its figures and its target; the figures are wall-clock seconds from
time.perf_counter, best of a few repeats. BLAS is held to one thread for the one-core figures.
"""
from __future__ import annotations

import os

os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")
os.environ.setdefault("OMP_NUM_THREADS", "1")

import argparse
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

import numpy as np


def best_of(fn, repeats: int = 3) -> float:
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        fn()
        times.append(time.perf_counter() - start)
    return min(times)


def section_parallel() -> list[tuple[str, str, str]]:
    from planner.analysis.retention import parallel_analysis

    rng = np.random.default_rng(0)
    p, n = 100, 1000
    eig = np.sort(rng.uniform(0.5, 2.0, p))[::-1]
    seconds = best_of(lambda: parallel_analysis(eig, n, p, np.random.default_rng(1), standardized=True, draws=1000))
    return [("parallel analysis, 1000 draws, p = 100, n = 1000", f"{seconds:.2f} s", "under 2 s")]


SECTIONS = {"parallel": section_parallel}


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("sections", nargs="*", default=list(SECTIONS), help=f"any of: {', '.join(SECTIONS)}")
    args = ap.parse_args()
    rows = []
    for name in args.sections:
        if name not in SECTIONS:
            print(f"unknown section {name!r}; choose from {', '.join(SECTIONS)}", file=sys.stderr)
            return 2
        rows.extend(SECTIONS[name]())
    width = max(len(r[0]) for r in rows)
    print(f"{'measurement':<{width}}  {'figure':>12}  target")
    for what, figure, target in rows:
        print(f"{what:<{width}}  {figure:>12}  {target}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
