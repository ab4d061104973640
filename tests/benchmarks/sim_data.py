"""Seeded data of known rank for the retention-rule simulation study.

Only numpy is used.  Every data set is drawn from a common factor model

    x = F L' + E diag(sqrt(psi)),    F ~ N(0, Phi),  E ~ N(0, I),

where ``L`` (p x k) has one non-zero loading per marker variable (simple structure),
``Phi`` (k x k) is the factor correlation matrix (ones on the diagonal, one common value
``r`` off it) and ``psi = 1 - diag(L Phi L')`` are the unique variances, so every
variable has unit variance before the optional rescaling.  Pure-noise columns have a
zero row in ``L`` and ``psi = 1``.  Columns are shuffled, and in "scaled" replicates each
column is multiplied by a log-uniform factor in [0.1, 100].

The true number of components is ``k``.

Run this file on its own for a self-check of the generator:

    python tests/benchmarks/sim_data.py
"""

from __future__ import annotations

import zlib
from dataclasses import dataclass, field

import numpy as np

P_MIN = 10
P_MAX = 40
MIN_VARS_PER_FACTOR = 3
SCALE_RANGE = (0.1, 100.0)


@dataclass(frozen=True)
class Condition:
    """One simulation setting.  Ranges are inclusive ``(low, high)``."""

    name: str
    description: str
    loadings: tuple[float, float]
    vars_per_factor: tuple[int, int]
    factor_r: tuple[float, float] = (0.0, 0.0)  # drawn once per replicate, all pairs equal
    small_factor_vars: tuple[int, int] | None = None  # one factor gets this many vars
    noise_cols: tuple[int, int] = (0, 0)
    k_values: tuple[int, ...] = (2, 3, 4, 5)


CONDITIONS: tuple[Condition, ...] = (
    Condition(
        "simple",
        "simple structure: 4-8 markers/factor, loadings U(0.7,0.8), orthogonal",
        loadings=(0.7, 0.8),
        vars_per_factor=(4, 8),
        k_values=(1, 2, 3, 4, 5),
    ),
    Condition(
        "weak",
        "weak loadings: U(0.4,0.6), 5-8 vars/factor, orthogonal",
        loadings=(0.4, 0.6),
        vars_per_factor=(5, 8),
    ),
    Condition(
        "correlated",
        "correlated factors: r ~ U(0.3,0.5) all pairs, loadings U(0.5,0.7), 4-8 vars/factor",
        loadings=(0.5, 0.7),
        vars_per_factor=(4, 8),
        factor_r=(0.3, 0.5),
    ),
    Condition(
        "unequal",
        "unequal sizes: one factor with 3 vars, others 8-10, loadings U(0.6,0.8), orthogonal",
        loadings=(0.6, 0.8),
        vars_per_factor=(8, 10),
        small_factor_vars=(3, 3),
    ),
    Condition(
        "noise",
        "simple structure (4-8 vars, U(0.7,0.8)) + 5-15 pure-noise columns",
        loadings=(0.7, 0.8),
        vars_per_factor=(4, 8),
        noise_cols=(5, 15),
    ),
    Condition(
        "hard",
        "hard mix: loadings U(0.4,0.6), r=0.3, one factor 3-4 vars, others 5-8, 5-10 noise",
        loadings=(0.4, 0.6),
        vars_per_factor=(5, 8),
        factor_r=(0.3, 0.3),
        small_factor_vars=(3, 4),
        noise_cols=(5, 10),
    ),
)

CONDITION_BY_NAME = {c.name: c for c in CONDITIONS}


@dataclass
class SimData:
    x: np.ndarray  # (n, p), possibly rescaled
    k: int  # true number of components
    loadings: np.ndarray  # (p, k), in the (shuffled) column order of x, before scaling
    phi: np.ndarray  # (k, k) factor correlation
    psi: np.ndarray  # (p,) unique variances
    scales: np.ndarray  # (p,) column multipliers (ones if unscaled)
    vars_per_factor: list[int]
    n_noise: int
    factor_r: float
    scaled: bool
    meta: dict = field(default_factory=dict)

    @property
    def p(self) -> int:
        return self.x.shape[1]

    def implied_corr(self) -> np.ndarray:
        """Population correlation matrix of the unscaled variables."""
        s = self.loadings @ self.phi @ self.loadings.T
        s[np.diag_indices_from(s)] = 1.0
        return s


def replicate_seed(base_seed: int, condition: str, n: int, k: int, rep: int) -> np.random.SeedSequence:
    """A SeedSequence that depends only on (base seed, condition, n, k, rep)."""
    cid = zlib.crc32(condition.encode("utf-8"))
    return np.random.SeedSequence([int(base_seed), cid, int(n), int(k), int(rep)])


def _fit_counts(counts: list[int], n_noise: int, fixed: int | None) -> list[int]:
    """Adjust variables per factor so that P_MIN <= sum(counts) + n_noise <= P_MAX.

    Too many: take one from the largest adjustable factor (never below
    MIN_VARS_PER_FACTOR).  Too few: add one to the smallest adjustable factor.
    ``fixed`` is the index of the small factor in the unequal-sizes settings; it is left
    alone unless it is the only factor.
    """
    counts = list(counts)
    adjustable = [i for i in range(len(counts)) if i != fixed] or list(range(len(counts)))
    while sum(counts) + n_noise > P_MAX:
        i = max(adjustable, key=lambda j: counts[j])
        if counts[i] <= MIN_VARS_PER_FACTOR:
            break
        counts[i] -= 1
    while sum(counts) + n_noise < P_MIN:
        i = min(adjustable, key=lambda j: counts[j])
        counts[i] += 1
    return counts


def generate(cond: Condition, n: int, k: int, rng: np.random.Generator, scaled: bool) -> SimData:
    """Draw one data set of ``n`` rows with ``k`` factors under ``cond``."""
    if k < 1:
        raise ValueError("k must be >= 1")
    lo, hi = cond.vars_per_factor
    counts = [int(rng.integers(lo, hi + 1)) for _ in range(k)]
    fixed = None
    if cond.small_factor_vars is not None and k >= 2:
        fixed = 0
        slo, shi = cond.small_factor_vars
        counts[0] = int(rng.integers(slo, shi + 1))
    nlo, nhi = cond.noise_cols
    n_noise = int(rng.integers(nlo, nhi + 1)) if nhi > 0 else 0
    # If the noise alone pushes p past the cap, shed noise columns last.
    n_noise = min(n_noise, P_MAX - MIN_VARS_PER_FACTOR * k)
    counts = _fit_counts(counts, n_noise, fixed)

    p_sig = sum(counts)
    p = p_sig + n_noise
    lam = np.zeros((p, k))
    row = 0
    for j, c in enumerate(counts):
        lam[row : row + c, j] = rng.uniform(cond.loadings[0], cond.loadings[1], size=c)
        row += c

    r = float(rng.uniform(*cond.factor_r)) if cond.factor_r[1] > 0 else 0.0
    phi = np.full((k, k), r)
    np.fill_diagonal(phi, 1.0)
    h2 = np.einsum("ij,jk,ik->i", lam, phi, lam)
    psi = 1.0 - h2
    if np.any(psi <= 0):
        raise ValueError("a communality reached 1; loadings too large for this Phi")

    f = rng.standard_normal((n, k)) @ np.linalg.cholesky(phi).T
    e = rng.standard_normal((n, p)) * np.sqrt(psi)
    x = f @ lam.T + e

    perm = rng.permutation(p)
    x = x[:, perm]
    lam = lam[perm]
    psi = psi[perm]

    if scaled:
        a, b = np.log(SCALE_RANGE[0]), np.log(SCALE_RANGE[1])
        scales = np.exp(rng.uniform(a, b, size=p))
        x = x * scales
    else:
        scales = np.ones(p)

    return SimData(
        x=x,
        k=k,
        loadings=lam,
        phi=phi,
        psi=psi,
        scales=scales,
        vars_per_factor=counts,
        n_noise=n_noise,
        factor_r=r,
        scaled=scaled,
        meta={"condition": cond.name, "n": n},
    )


def make_replicate(base_seed: int, cond: Condition, n: int, k: int, rep: int) -> tuple[SimData, int]:
    """Data for one cell replicate, plus a seed for the function under test.

    Odd replicates are rescaled, even ones are not, so exactly half of each cell is
    rescaled when the replicate count is even.
    """
    ss = replicate_seed(base_seed, cond.name, n, k, rep)
    data_ss, tool_ss = ss.spawn(2)
    rng = np.random.default_rng(data_ss)
    data = generate(cond, n, k, rng, scaled=(rep % 2 == 1))
    tool_seed = int(tool_ss.generate_state(1, dtype=np.uint32)[0] & 0x7FFFFFFF)
    return data, tool_seed


# --------------------------------------------------------------------------- self-check


def _self_check(n: int = 20000, seed: int = 12345) -> int:
    """Check the generator against its design on large samples; returns the failure count."""
    failures = 0

    def check(ok: bool, msg: str) -> None:
        nonlocal failures
        if not ok:
            failures += 1
        print(("ok   " if ok else "FAIL ") + msg)

    for cond in CONDITIONS:
        for k in cond.k_values:
            for scaled in (False, True):
                rng = np.random.default_rng([seed, zlib.crc32(cond.name.encode()), k, int(scaled)])
                d = generate(cond, n, k, rng, scaled)
                tag = f"{cond.name:10s} k={k} scaled={int(scaled)} p={d.p:2d} noise={d.n_noise:2d} counts={d.vars_per_factor}"
                check(P_MIN <= d.p <= P_MAX, f"{tag}: p in [{P_MIN},{P_MAX}]")
                # unscaled variables have unit variance
                xu = d.x / d.scales
                var = xu.var(axis=0, ddof=1)
                check(np.max(np.abs(var - 1)) < 0.06, f"{tag}: unit variances (max dev {np.max(np.abs(var - 1)):.3f})")
                # sample correlation close to the implied one (scaling does not change it)
                rs = np.corrcoef(d.x, rowvar=False)
                dev = np.max(np.abs(rs - d.implied_corr()))
                check(dev < 0.05, f"{tag}: |R_sample - R_implied| max {dev:.3f}")
                # noise columns: uncorrelated with everything else
                noise = np.where(~d.loadings.any(axis=1))[0]
                if noise.size:
                    off = rs[noise].copy()
                    off[np.arange(noise.size), noise] = 0.0  # drop the unit diagonal
                    mx = np.max(np.abs(off))
                    check(mx < 0.05, f"{tag}: noise columns max |r| {mx:.3f}")
                check(noise.size == d.n_noise, f"{tag}: {noise.size} noise columns found")
                # loadings recovered: within-factor r_ij ~ l_i l_j; estimate l_i by the
                # one-factor triad formula l_i^2 = r_ij r_il / r_jl averaged over pairs
                rec_err = []
                for j in range(k):
                    idx = np.where(d.loadings[:, j] != 0)[0]
                    if idx.size < 3:
                        continue
                    for i in idx:
                        others = [t for t in idx if t != i]
                        ests = []
                        for a in range(len(others)):
                            for b in range(a + 1, len(others)):
                                u, v = others[a], others[b]
                                ests.append(rs[i, u] * rs[i, v] / rs[u, v])
                        rec_err.append(abs(np.sqrt(max(np.mean(ests), 0)) - d.loadings[i, j]))
                mx = max(rec_err) if rec_err else 0.0
                check(mx < 0.05, f"{tag}: loadings recovered (max abs err {mx:.3f})")
                # factor correlation: between-factor r = l_i l_j r
                if k >= 2 and cond.factor_r[1] > 0:
                    a_idx = np.where(d.loadings[:, 0] != 0)[0]
                    b_idx = np.where(d.loadings[:, 1] != 0)[0]
                    la, lb = d.loadings[a_idx, 0], d.loadings[b_idx, 1]
                    r_hat = np.sum(rs[np.ix_(a_idx, b_idx)] * np.outer(la, lb)) / np.sum(np.outer(la, lb) ** 2)
                    check(abs(r_hat - d.factor_r) < 0.05, f"{tag}: factor r {d.factor_r:.3f} recovered as {r_hat:.3f}")
                # rank: k eigenvalues of the reduced correlation matrix are positive
                red = d.implied_corr() - np.diag(d.psi)
                ev = np.sort(np.linalg.eigvalsh(red))[::-1]
                check(np.all(ev[:k] > 0.1) and np.all(np.abs(ev[k:]) < 1e-10),
                      f"{tag}: reduced correlation has rank {k} (lambda_k={ev[k-1]:.3f})")
    # reproducibility
    c = CONDITION_BY_NAME["hard"]
    d1, s1 = make_replicate(7, c, 200, 3, 5)
    d2, s2 = make_replicate(7, c, 200, 3, 5)
    d3, _ = make_replicate(7, c, 200, 3, 6)
    check(np.array_equal(d1.x, d2.x) and s1 == s2, "make_replicate is reproducible")
    check(not np.array_equal(d1.x[:, :3], d3.x[:, :3]), "different rep gives different data")
    check(d1.scaled and not d3.scaled, "odd reps rescaled, even reps not")
    print(f"\n{failures} failure(s)")
    return failures


if __name__ == "__main__":
    raise SystemExit(1 if _self_check() else 0)
