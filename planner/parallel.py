"""Passes over the rows shared between the processor's cores.

A long table is cut into spans of SPAN_ROWS rows; each span is walked by one thread, in
blocks, with the linear algebra library held to one thread of its own (threadpoolctl), so
that the threads do not compete with its threads for the same cores. The spans depend on
the number of rows alone, never on the number of cores, and their results are combined in
span order (the Moments of the spans merged with the pairwise formulas, exactly as the
chunks of a stream are), so the way the work is cut and summed does not change with the
machine; what the linear algebra library itself does with a product may still differ in
the last bits from one processor to another.
"""
from __future__ import annotations

import os
from concurrent.futures import ThreadPoolExecutor

#: Rows a span. Tables shorter than two spans are walked by one thread.
SPAN_ROWS = 65_536


def spans(n: int) -> list[tuple[int, int]]:
    """[start, stop) of each span of ``n`` rows."""
    count = max(1, n // SPAN_ROWS)
    edges = [round(i * n / count) for i in range(count + 1)]
    return list(zip(edges[:-1], edges[1:]))


def cores() -> int:
    """The cores this process may run on."""
    try:
        return len(os.sched_getaffinity(0))
    except AttributeError:  # pragma: no cover - not Linux
        return os.cpu_count() or 1


def one_blas_thread():
    """A context in which the linear algebra library runs on one thread.

    For the many small products of the rules that work on p x p matrices and row samples
    (a cross-validation fold, a simulated null draw), a second BLAS thread costs more in
    hand-over than it gives: cross-validation of a 20,000-row sample at p = 100 took 0.9 s
    on two threads against 0.35 s on one on the benchmark machine.
    """
    from threadpoolctl import threadpool_limits

    return threadpool_limits(limits=1, user_api="blas")


def run_spans(n: int, work) -> list:
    """``[work(start, stop) for each span]``, the spans run on as many threads as there are
    cores (numpy and BLAS release the interpreter lock while they compute)."""
    parts = spans(n)
    threads = min(len(parts), cores())
    if threads <= 1:
        return [work(start, stop) for start, stop in parts]
    with one_blas_thread(), ThreadPoolExecutor(max_workers=threads) as pool:
        futures = [pool.submit(work, start, stop) for start, stop in parts]
        return [future.result() for future in futures]
