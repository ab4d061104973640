"""Reductions that keep original features, to set beside the component plan.

A reviewer may prefer a model on a few original, nameable features to one on components
that mix every feature; a record must show that such plans were considered and why they
were or were not taken. Two plans keep original features:

* ``feature_subset``: McCabe's (1984) principal variables, the subset S of the features
  that explains the largest share of the total variance of all of them,
  trace(C[:, S] C[S, S]^-1 C[S, :]) / trace(C), C the matrix decomposed; found by greedy
  forward selection and improved by exchanging one feature at a time. Jolliffe's (1972)
  rules B2 and B4, which read the loadings, are shown beside it as cheaper evidence.
* ``vif_pruning``: drop the feature with the largest variance inflation factor and
  recompute, until every VIF is below the rulebook's threshold.

Everything here is a function of the matrices (C, the correlation matrix R, the
loadings); no rows are read.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .collinearity import rank_tolerance
from .monitoring import spe_limit

#: A feature whose residual variance, after the selected ones, is below this share of its
#: own variance is explained already (an exact copy, or an exact combination).
EXPLAINED = 1e-10
#: The exchange pass stops after this many improving swaps.
MAX_SWAPS = 200
#: A pass of exchanges costs about |S| p^2 operations; the passes of one search (every
#: size it tries) are capped so that together they stay within this many.
EXCHANGE_BUDGET = 2e9
#: The greedy search and its exchanges are checked by exhaustive search when every subset of
#: every size up to the one they found can be scored within this much work in all, counted
#: as sum over the sizes m of C(p, m) m^2 (22 features of which 8 are kept: 3.2e7, about 2 s here).
EXHAUSTIVE_MAX_WORK = 5e7
#: Numbers of one m x m matrix batch of the exhaustive search (16 MB an array).
EXHAUSTIVE_BATCH_NUMBERS = 2_000_000


def subset_share(c: np.ndarray, subset: list[int]) -> float:
    """McCabe's criterion: the share of trace(C) explained by the features in ``subset``,
    trace(C[:, S] C[S, S]^+ C[S, :]) / trace(C). The inverse is taken on the non-null
    eigenvectors of C[S, S], so a subset holding an exact copy explains what the rest of
    it explains.

    References
    ----------
    G. P. McCabe (1984), "Principal variables", Technometrics 26(2), 137-144.
    """
    if not subset:
        return 0.0
    a = _explained_part(c, list(subset))
    return float(np.sum(a * a) / np.trace(c))


def _explained_part(c: np.ndarray, subset: list[int]) -> np.ndarray:
    """A with A A^T = C[:, S] C[S, S]^+ C[S, :] (the inverse on the non-null eigenvectors)."""
    values, vectors = np.linalg.eigh(c[np.ix_(subset, subset)])
    keep = values > rank_tolerance(values[-1], len(subset))
    return (c[:, subset] @ vectors[:, keep]) / np.sqrt(values[keep])


def _gains(residual: np.ndarray, candidates: np.ndarray, scale: np.ndarray) -> np.ndarray:
    """For each candidate j, the variance it would add: ||E[:, j]||^2 / E[j, j], with E the
    residual covariance after the features already chosen; 0 for an explained feature."""
    diag = residual[candidates, candidates]
    sq = np.einsum("ij,ij->j", residual[:, candidates], residual[:, candidates])
    with np.errstate(divide="ignore", invalid="ignore"):
        gain = np.where(diag > EXPLAINED * scale[candidates], sq / diag, 0.0)
    return gain


def _residual(c: np.ndarray, subset: list[int]) -> np.ndarray:
    """E = C - C[:, S] C[S, S]^+ C[S, :], the covariance left after regressing every feature
    on the features of S."""
    if not subset:
        return c.copy()
    a = _explained_part(c, subset)
    return c - a @ a.T


@dataclass
class SubsetSearch:
    """The greedy path (order of entry, share after each step) and the chosen subset."""

    order: list[int]
    path_share: list[float]
    subset: list[int]
    share: float
    target: float
    swaps: int
    note: str | None = None
    exhaustive: bool = False  # the size is the smallest possible and the subset the best of its size


def greedy_path(c: np.ndarray, max_size: int | None = None) -> tuple[list[int], list[float]]:
    """Forward selection on McCabe's criterion: each step adds the feature that explains most
    of what the chosen ones leave (ties: the first in file order). Stops when every
    feature is explained or at ``max_size``. Returns the order and the share after each step.
    """
    p = c.shape[0]
    total = float(np.trace(c))
    scale = np.diag(c).copy()
    residual = c.copy()
    order: list[int] = []
    shares: list[float] = []
    remaining = np.arange(p)
    explained = 0.0
    while len(order) < (max_size or p) and remaining.size:
        gains = _gains(residual, remaining, scale)
        best = int(np.argmax(gains))
        if gains[best] <= 0:
            break
        j = int(remaining[best])
        column = residual[:, j].copy()
        residual -= np.outer(column, column) / column[j]
        explained += float(gains[best])
        order.append(j)
        shares.append(min(explained / total, 1.0))
        remaining = np.delete(remaining, best)
    return order, shares


def exchange(c: np.ndarray, subset: list[int], max_swaps: int = MAX_SWAPS) -> tuple[list[int], int]:
    """Improve ``subset`` by exchanges: swap the member and the outsider whose exchange
    raises the explained share most, and repeat until no exchange raises it.

    Leaving out member i lowers the explained variance by ||u||^2 / G_ii, with
    G = C[S, S]^-1 and u = C[:, S] G e_i, and returns the residual covariance to
    E' = E + u u^T / G_ii; an outsider j then adds ||E'[:, j]||^2 / E'[j, j], where
    ||E'[:, j]||^2 = ||E[:, j]||^2 + 2 a_j (E u)_j + a_j^2 ||u||^2 with a_j = u_j / G_ii, and
    E'[j, j] = E[j, j] + u_j a_j. One product E u a member: a pass costs O(|S| p^2).
    Above EXCHANGE_BUDGET a pass is not run.
    """
    s = list(subset)
    p = c.shape[0]
    scale = np.diag(c).copy()
    tolerance = 1e-12 * float(np.trace(c))
    swaps = 0
    while swaps < max_swaps and 0 < len(s) < p:
        residual = _residual(c, s)
        g = np.linalg.pinv(c[np.ix_(s, s)], hermitian=True)
        u_all = c[:, s] @ g  # column t is u for member s[t]
        column_sq = np.einsum("ij,ij->j", residual, residual)
        diag = residual.diagonal()
        outsider = np.ones(p, dtype=bool)
        outsider[s] = False
        best = (0.0, None, None)
        for t in range(len(s)):
            if g[t, t] <= 0:
                continue
            u = u_all[:, t]
            a = u / g[t, t]
            loss = float(u @ u) / g[t, t]
            opened_sq = column_sq + 2.0 * a * (residual @ u) + a * a * float(u @ u)
            opened_diag = diag + u * a
            with np.errstate(divide="ignore", invalid="ignore"):
                gains = np.where(outsider & (opened_diag > EXPLAINED * scale), opened_sq / opened_diag, -np.inf)
            j = int(np.argmax(gains))
            change = float(gains[j]) - loss
            if change > best[0] + tolerance:
                best = (change, t, j)
        if best[1] is None:
            break
        _, t, j = best
        s[t] = j
        swaps += 1
    return s, swaps


def _batch_shares(c: np.ndarray, c2: np.ndarray, subsets: np.ndarray) -> np.ndarray:
    """McCabe's criterion, times trace(C), of each row of ``subsets`` (index arrays of one
    size): trace(C[S, S]^-1 (C C)[S, S]), since C[S, :] C[:, S] = (C C)[S, S]. A subset in
    which some feature is explained by the ones before it (its Cholesky pivot, the residual
    variance given them, below EXPLAINED of its own variance) scores -inf: it explains no
    more than a smaller subset."""
    a = c[subsets[:, :, None], subsets[:, None, :]]
    b = c2[subsets[:, :, None], subsets[:, None, :]]
    diag = np.diagonal(a, axis1=1, axis2=2)
    scores = np.full(len(subsets), -np.inf)
    # A ridge far below the pivot test keeps an exactly singular C[S, S] (rounded to a tiny
    # negative eigenvalue) factorable, so that one Cholesky serves the whole batch; the
    # pivots of such a subset stay near the ridge and fail the test.
    ridge = 1e-13 * np.max(diag, axis=1)
    ridged = a + ridge[:, None, None] * np.eye(a.shape[1])
    try:
        pivots = np.diagonal(np.linalg.cholesky(ridged), axis1=1, axis2=2) ** 2
        valid = np.all(pivots > EXPLAINED * diag, axis=1)
    except np.linalg.LinAlgError:  # not even with the ridge: sort them out one at a time
        valid = np.zeros(len(subsets), dtype=bool)
        for i, one in enumerate(ridged):
            try:
                pivots = np.diagonal(np.linalg.cholesky(one)) ** 2
            except np.linalg.LinAlgError:
                continue
            valid[i] = bool(np.all(pivots > EXPLAINED * diag[i]))
    if valid.any():
        scores[valid] = np.trace(np.linalg.solve(a[valid], b[valid]), axis1=1, axis2=2)
    return np.where(np.isfinite(scores), scores, -np.inf)


def best_subset_of_size(c: np.ndarray, size: int, c2: np.ndarray | None = None) -> tuple[list[int], float]:
    """The subset of ``size`` features with the largest McCabe criterion, by scoring every
    one of the C(p, size) subsets (ties: the first in lexicographic order), and its share.

    References
    ----------
    G. P. McCabe (1984), "Principal variables", Technometrics 26(2), 137-144 (the criterion
    and the search over all subsets of a size).
    """
    from itertools import combinations, islice

    p = c.shape[0]
    if size < 1 or size > p:
        return [], 0.0
    c2 = c @ c if c2 is None else c2
    every = combinations(range(p), size)
    per_batch = max(1, min(32_768, EXHAUSTIVE_BATCH_NUMBERS // (size * size)))
    best_score, best = -np.inf, None
    while True:
        batch = np.array(list(islice(every, per_batch)), dtype=np.intp).reshape(-1, size)
        if not len(batch):
            break
        scores = _batch_shares(c, c2, batch)
        i = int(np.argmax(scores))
        if scores[i] > best_score:
            best_score, best = float(scores[i]), [int(j) for j in batch[i]]
    if best is None:  # every subset of this size holds a dependency
        return [], 0.0
    return best, subset_share(c, best)


def smallest_by_exhaustion(c: np.ndarray, target: float, largest: int) -> tuple[list[int], float] | str:
    """The smallest subset, and the best of its size, whose share reaches ``target``,
    searching every size from 1 to ``largest``; else why not, in words (the work is above
    EXHAUSTIVE_MAX_WORK, or no size up to ``largest`` reaches the target)."""
    from math import comb

    p = c.shape[0]
    work = sum(comb(p, m) * m * m for m in range(1, largest + 1))
    if work > EXHAUSTIVE_MAX_WORK:
        return (f"scoring every subset up to this size ({work:.3g} operations against a budget of "
                f"{EXHAUSTIVE_MAX_WORK:.3g}) was beyond budget")
    c2 = c @ c
    for size in range(1, largest + 1):
        subset, share = best_subset_of_size(c, size, c2)
        if subset and share >= target - 1e-12:
            return subset, share
    return f"no subset of up to {largest} features reaches the target share"


def principal_variables(c: np.ndarray, target: float, max_path: int = 1000) -> SubsetSearch:
    """The smallest subset whose share reaches ``target`` (the component plan's share).

    The greedy path gives the first size that reaches it; the exchange pass then improves
    that subset, and the next smaller size is tried with its own exchange pass for as long
    as it still reaches the target. The path is kept for sizes 1..min(p, ``max_path``).
    """
    p = c.shape[0]
    order, shares = greedy_path(c, max_size=min(p, max_path))
    reached = [m + 1 for m, share in enumerate(shares) if share >= target - 1e-12]
    if not reached:  # the path stopped early (explained features) or was cut: take it all
        size = len(order)
    else:
        size = reached[0]
    # The exchange passes affordable in all (each costs about |S| p^2), shared by the sizes tried.
    budget = min(MAX_SWAPS, int(EXCHANGE_BUDGET // max(1, size * p * p)))
    best, swaps = exchange(c, order[:size], budget)
    budget -= swaps
    best_share = subset_share(c, best)
    while size > 1 and budget > 0:
        trial, trial_swaps = exchange(c, order[: size - 1], budget)
        budget -= trial_swaps + 1
        trial_share = subset_share(c, trial)
        if trial_share < target - 1e-12:
            break
        size -= 1
        best, best_share, swaps = trial, trial_share, swaps + trial_swaps
    note = None
    exhaustive = smallest_by_exhaustion(c, target, size)
    if not isinstance(exhaustive, str):
        found, found_share = exhaustive
        if len(found) < size or found_share > best_share + 1e-12:
            note = (f"the exhaustive search found a better subset than greedy selection with exchanges "
                    f"({len(found)} feature(s) for {found_share:.4%}, against {size} for {best_share:.4%})")
        best, best_share = found, found_share
    else:
        note = ("the size may not be the smallest nor the subset the best of its size: " + exhaustive)
        if budget <= 0:
            note += f"; exchanges stopped at their budget ({swaps} made; each costs O(|S| p^2) with {p} features)"
    if len(order) < p and len(order) == max_path:
        note = ((note + "; ") if note else "") + f"the greedy path is shown for the first {max_path} sizes"
    return SubsetSearch(order, shares, sorted(best), best_share, target, swaps, note, not isinstance(exhaustive, str))


def jolliffe_b4(loadings: np.ndarray, k: int) -> list[int]:
    """Jolliffe's B4: for each of the first k components, in order, keep the feature with
    the largest absolute loading not kept already.

    References
    ----------
    I. T. Jolliffe (1972), "Discarding variables in a principal component analysis. I:
    Artificial data", Journal of the Royal Statistical Society C 21(2), 160-173.
    """
    chosen: list[int] = []
    for comp in range(min(k, loadings.shape[1])):
        weights = np.abs(loadings[:, comp]).copy()
        weights[chosen] = -1.0
        chosen.append(int(np.argmax(weights)))
    return sorted(chosen)


def jolliffe_b2(loadings: np.ndarray, k: int) -> list[int]:
    """Jolliffe's B2: for each of the discarded components, from the last one back to
    component k + 1, discard the feature with the largest absolute loading on it among
    those not discarded yet; keep the rest.

    References
    ----------
    I. T. Jolliffe (1972), "Discarding variables in a principal component analysis. I:
    Artificial data", Journal of the Royal Statistical Society C 21(2), 160-173.
    """
    p, q = loadings.shape
    dropped: list[int] = []
    for comp in range(q - 1, k - 1, -1):
        if p - len(dropped) <= k:
            break
        weights = np.abs(loadings[:, comp]).copy()
        weights[dropped] = -1.0
        dropped.append(int(np.argmax(weights)))
    return [j for j in range(p) if j not in dropped]


def inflation_factors(r: np.ndarray, subset: list[int]) -> np.ndarray:
    """VIF_j = (R[S, S]^-1)_jj for the features of ``subset``; inf for a feature in an exact
    linear dependency among them (an eigenvector of R[S, S] with eigenvalue zero that
    weighs on it)."""
    sub = r[np.ix_(subset, subset)]
    values, vectors = np.linalg.eigh(sub)
    tol = rank_tolerance(values[-1], len(subset))
    null = values <= tol
    vif = (vectors[:, ~null] ** 2) @ (1.0 / values[~null])
    if null.any():
        involved = np.any(np.abs(vectors[:, null]) > 1e-8, axis=1)
        vif = np.where(involved, np.inf, vif)
    return np.maximum(vif, 1.0)


@dataclass
class VifPruning:
    """The order of removal (each with its VIF at removal), what is kept, its largest VIF."""

    kept: list[int]
    removed: list[tuple[int, float]]
    max_vif: float
    threshold: float


def vif_pruning(r: np.ndarray, threshold: float) -> VifPruning:
    """Remove the feature with the largest VIF and recompute, until every VIF is below
    ``threshold`` (ties, an exact copy and its original among them: the later feature in
    file order goes first, so the copy leaves and the original stays).

    References
    ----------
    M. H. Kutner, C. J. Nachtsheim, J. Neter and W. Li (2004), Applied Linear Statistical
    Models, 5th ed., McGraw-Hill, section 10.5 (variance inflation factors and remedial
    measures).
    """
    kept = list(range(r.shape[0]))
    removed: list[tuple[int, float]] = []
    if not np.all(np.isfinite(inflation_factors(r, kept))):
        # Exact dependencies: the one-at-a-time rule removes, each time, the last feature in
        # a dependency, which leaves the features that are independent of those before them
        # in file order. Found in one pass, removed last first (the order the rule takes).
        for j in sorted(dependent_in_order(r), reverse=True):
            removed.append((j, np.inf))
            kept.remove(j)
    inverse, since_fresh = None, 0
    while len(kept) > 1:
        if inverse is None or since_fresh >= FRESH_INVERSE_STEPS or len(kept) <= FRESH_INVERSE_SIZE:
            vif, inverse = _inflation_and_inverse(r, kept)
            since_fresh = 0
        else:
            vif = np.maximum(np.diag(inverse), 1.0)
        top = float(np.max(vif))
        if top < threshold:
            break
        worst = len(vif) - 1 - int(np.argmax(vif[::-1]))  # the last of the largest
        removed.append((kept[worst], top))
        del kept[worst]
        if inverse is not None:  # the inverse without row and column ``worst`` (block inverse)
            rest = np.delete(np.arange(len(vif)), worst)
            column = inverse[rest, worst]
            inverse = inverse[np.ix_(rest, rest)] - np.outer(column, column) / inverse[worst, worst]
            since_fresh += 1
    final = float(np.max(inflation_factors(r, kept))) if len(kept) > 1 else 1.0
    return VifPruning(kept, removed, final, threshold)


def dependent_in_order(r: np.ndarray) -> list[int]:
    """The features that are exact linear combinations of the features before them, taken
    in file order: a Cholesky factor of R grown one feature at a time, a feature whose
    residual variance given those kept before it is below rounding (relative to its own
    variance) being left out. O(p^3) in all."""
    from scipy.linalg import solve_triangular

    p = r.shape[0]
    tolerance = p * np.finfo(float).eps * 100
    factor = np.zeros((p, p))
    kept: list[int] = []
    dependent: list[int] = []
    for j in range(p):
        if kept:
            m = len(kept)
            w = solve_triangular(factor[:m, :m], r[kept, j], lower=True, check_finite=False)
            residual = r[j, j] - float(w @ w)
        else:
            w, residual = np.empty(0), r[j, j]
        if residual <= tolerance * r[j, j]:
            dependent.append(j)
            continue
        m = len(kept)
        factor[m, :m] = w
        factor[m, m] = np.sqrt(residual)
        kept.append(j)
    return dependent


#: VIF pruning recomputes R[S, S]^-1 afresh at every step up to this many features, and
#: every FRESH_INVERSE_STEPS steps beyond (between them it updates the inverse).
FRESH_INVERSE_SIZE = 60
FRESH_INVERSE_STEPS = 100


def _inflation_and_inverse(r: np.ndarray, subset: list[int]) -> tuple[np.ndarray, np.ndarray | None]:
    """The VIFs of ``subset`` and R[S, S]^-1 (None when R[S, S] is singular). Up to
    FRESH_INVERSE_SIZE features from the eigendecomposition; beyond, from a Cholesky
    factor, falling back to the eigendecomposition when that fails or a VIF is so large
    that the dependency may be exact."""
    if len(subset) > FRESH_INVERSE_SIZE:
        sub = r[np.ix_(subset, subset)]
        try:
            factor = np.linalg.cholesky(sub)
            half = np.linalg.solve(factor, np.eye(len(subset)))
            inverse = half.T @ half
            vif = np.diag(inverse)
            if np.all(np.isfinite(vif)) and vif.max() < 1e10:
                return np.maximum(vif, 1.0), inverse
        except np.linalg.LinAlgError:
            pass
    vif = inflation_factors(r, subset)
    if not np.all(np.isfinite(vif)):
        return vif, None
    values, vectors = np.linalg.eigh(r[np.ix_(subset, subset)])
    return vif, (vectors / values) @ vectors.T


def reconstruction(c: np.ndarray, subset: list[int]) -> tuple[np.ndarray, np.ndarray]:
    """The least-squares reconstruction of every scaled feature from the subset,
    z_hat = z_S B with B = C[S, S]^+ C[S, :], and the eigenvalues of the residual
    covariance C - C[:, S] B (descending), for the SPE of a row and its limit."""
    s = list(subset)
    b = np.linalg.pinv(c[np.ix_(s, s)], hermitian=True) @ c[s, :]
    residual = c - c[:, s] @ b
    residual = (residual + residual.T) / 2.0
    values = np.clip(np.linalg.eigvalsh(residual)[::-1], 0.0, None)
    return b, values


# ---------------------------------------------------------------------- the plans compared
#: How each plan is named in prose (its id is what --plan takes).
PLAN_NAMES = {"components": "components", "feature_subset": "feature subset", "vif_pruning": "VIF pruning"}
#: Above this many features the subset search is not run (its matrices are p x p and its
#: exchange pass costs O(|S| p^2) a swap); the wide route never forms C at all.
SUBSET_MAX_FEATURES = 2000

POLICY = (
    "the component plan is recommended, unless the feature subset (McCabe's principal variables) keeps at "
    "least the component plan's share of the variance with at most {ratio:g} times as many features as there "
    "are components and no variance inflation factor above {vif:g} among them: then the subset is recommended, "
    "for it uses original, nameable features and needs only those to be collected, where the components need "
    "every feature; VIF pruning removes collinearity, not redundancy of information, and is shown for comparison"
)


@dataclass
class FeaturePlan:
    """A plan that keeps original features: which, how much variance they explain, their
    largest VIF, and how every feature is rebuilt from them (for the SPE of a row)."""

    plan_id: str
    kept: list[int]
    share: float
    max_vif: float
    coefficients: np.ndarray  # (|S|, p): z_hat = z_S B, scaled units
    residual_eigenvalues: np.ndarray


@dataclass
class Alternatives:
    """Everything the comparison of plans needs, computed from the matrices."""

    k: int
    component_share: float
    subset: SubsetSearch | None
    subset_plan: FeaturePlan | None
    pruning: VifPruning | None
    pruning_plan: FeaturePlan | None
    b4: list[int] = field(default_factory=list)
    b2: list[int] = field(default_factory=list)
    b4_share: float | None = None
    b2_share: float | None = None
    reason: str | None = None
    largest_eigenvalue: float = 0.0  # of C: the scale of rounding in its eigenvalues


def _feature_plan(plan_id: str, c: np.ndarray, kept: list[int], share: float, max_vif: float) -> FeaturePlan:
    b, residual_eigen = reconstruction(c, kept)
    return FeaturePlan(plan_id, list(kept), share, max_vif, b, residual_eigen)


def plan_alternatives(c: np.ndarray | None, r: np.ndarray | None, loadings: np.ndarray, explained_ratio: np.ndarray, k: int,
                      vif_threshold: float, reason: str | None = None) -> Alternatives:
    """The feature-subset plan sized to the component plan's share, Jolliffe's B2 and B4 as
    evidence, and the VIF-pruning plan. ``c`` is the matrix decomposed, ``r`` the
    correlation matrix; with either missing (the wide route) only the component plan
    exists and ``reason`` says why."""
    share = float(np.sum(explained_ratio[:k]))
    if c is None or r is None:
        return Alternatives(k, share, None, None, None, None, reason=reason)
    if c.shape[0] > SUBSET_MAX_FEATURES:
        return Alternatives(k, share, None, None, None, None,
                            reason=f"not computed above {SUBSET_MAX_FEATURES} features (the search costs O(p^3))")
    search = principal_variables(c, share)
    pruning = vif_pruning(r, vif_threshold)
    b4, b2 = jolliffe_b4(loadings, k), jolliffe_b2(loadings, k)
    return Alternatives(
        k, share, search,
        _feature_plan("feature_subset", c, search.subset, search.share, float(np.max(inflation_factors(r, search.subset)))),
        pruning, _feature_plan("vif_pruning", c, pruning.kept, subset_share(c, pruning.kept), pruning.max_vif),
        b4=b4, b2=b2, b4_share=subset_share(c, b4), b2_share=subset_share(c, b2),
        largest_eigenvalue=float(explained_ratio[0] * np.trace(c)),
    )


@dataclass
class PlanChoice:
    recommended: str
    chosen: str
    reasons: list[str]
    because: str | None
    overridden: bool = False  # a plan asked for (--plan) against the recommendation


def recommend_plan(alt: Alternatives, size_ratio: float, vif_threshold: float) -> tuple[str, list[str]]:
    """The recommended plan by POLICY, with the reasons in words."""
    sub = alt.subset_plan
    if sub is None:
        return "components", [f"only the component plan could be formed: {alt.reason}"]
    m, k = len(sub.kept), alt.k
    if m <= size_ratio * k and sub.max_vif <= vif_threshold and sub.share >= alt.component_share - 1e-12:
        return "feature_subset", [
            f"{m} original feature(s) keep {sub.share:.1%} of the variance, at least the {alt.component_share:.1%} "
            f"that {k} component(s) keep, with at most {size_ratio:g} times as many inputs and no VIF above "
            f"{vif_threshold:g} (largest {sub.max_vif:.3g}): nameable features are easier to defend and only they "
            "need to be collected",
        ]
    why = []
    if m > size_ratio * k:
        needs = "needs" if alt.subset.exhaustive else "needed, in a search that need not find the smallest subset,"
        why.append(f"the feature subset {needs} {m} feature(s) to keep what {k} component(s) keep "
                   f"({sub.share:.1%} against {alt.component_share:.1%}), more than {size_ratio:g} times as many")
    if sub.max_vif > vif_threshold:
        why.append(f"the feature subset's largest VIF is {sub.max_vif:.3g}, above {vif_threshold:g}")
    return "components", why


def choose_plan(alt: Alternatives, requested: str | None, because: str | None, size_ratio: float,
                vif_threshold: float) -> PlanChoice:
    """The plan taken: the one asked for (``--plan``), else the component plan. A request
    against the recommendation needs a reason (the caller checks ``because``)."""
    recommended, reasons = recommend_plan(alt, size_ratio, vif_threshold)
    chosen = requested or "components"
    if requested is None and recommended != "components":
        reasons.append(f"the component plan was taken by default (no --plan); choose the recommended one with --plan {recommended}")
    return PlanChoice(recommended, chosen, reasons, because, overridden=requested is not None and chosen != recommended)


#: A plan's reconstruction coefficients are kept in the record up to this many numbers.
MAX_RECONSTRUCTION_NUMBERS = 250_000


def _reconstruction_entry(plan: FeaturePlan, columns: list[str], limit) -> dict:
    """How the features a plan leaves out are rebuilt from those it keeps (for the SPE of a
    row at apply time): coefficients kept ones x left-out ones; a kept feature rebuilds itself."""
    rebuilt = [j for j in range(len(columns)) if j not in set(plan.kept)]
    entry = {
        "kept": _names(plan.kept, columns),
        "rebuilt": _names(rebuilt, columns),
        "residual_eigenvalues": plan.residual_eigenvalues,
        "spe_limit": limit.value,
        "spe_limit_method": limit.method,
        "note": "each left-out scaled feature rebuilt from the kept ones as z_hat = z_kept B "
                "(B = C[S, S]^-1 C[S, rest], least squares); SPE = ||z_rest - z_hat||^2",
    }
    if len(plan.kept) * len(rebuilt) <= MAX_RECONSTRUCTION_NUMBERS:
        entry["coefficients"] = plan.coefficients[:, rebuilt]
    else:
        entry["coefficients"] = None
        entry["coefficients_reason"] = (f"{len(plan.kept)} x {len(rebuilt)} coefficients are more than "
                                        f"{MAX_RECONSTRUCTION_NUMBERS:,}: not kept, so apply leaves the SPE empty")
    return entry


def _names(indices: list[int], columns: list[str]) -> list[str]:
    return [columns[j] for j in indices]


def _set_aside(plan_id: str, alt: Alternatives, choice: PlanChoice) -> str:
    """Why a plan that was not taken was set aside, in words."""
    k = alt.k
    if plan_id == "components":
        taken = alt.subset_plan if choice.chosen == "feature_subset" else alt.pruning_plan
        name = PLAN_NAMES[choice.chosen]
        return (f"set aside for the {name} plan ({choice.because or 'recommended'}): {len(taken.kept)} original "
                f"feature(s) keep {taken.share:.1%}, where {k} component(s) keep {alt.component_share:.1%}")
    if plan_id == "feature_subset":
        sub = alt.subset_plan
        needs = "needs" if alt.subset.exhaustive else "as found by a heuristic search, needs"
        return (f"{needs} {len(sub.kept)} of the features to keep {sub.share:.1%} of the variance, where {k} component(s) "
                f"keep {alt.component_share:.1%}" + (f"; largest VIF {sub.max_vif:.3g}" if sub.max_vif > 1.0 else ""))
    pr = alt.pruning_plan
    if not alt.pruning.removed:
        return (f"no VIF reaches {alt.pruning.threshold:g}, so it removes nothing: it keeps all {len(pr.kept)} features "
                f"(components: {k} for {alt.component_share:.1%})")
    return (f"removes collinearity, not redundancy: it keeps {len(pr.kept)} feature(s) and {pr.share:.1%} of the variance "
            f"(components: {k} for {alt.component_share:.1%})")


def alternatives_section(alt: Alternatives, choice: PlanChoice, columns: list[str], target: dict | None,
                         size_ratio: float, vif_threshold: float) -> dict:
    """The ``alternatives`` list and the ``plan_choice`` of the record (keys of DESIGN.md)."""
    fits = (target or {}).get("plan_fits") or {}
    metric = (target or {}).get("metric")
    kept_metric = (target or {}).get(f"{metric}_kept_components") if metric else None
    rows = [{
        "plan_id": "components", "kind": "components", "kept": [f"PC{j + 1}" for j in range(alt.k)],
        "size": alt.k, "inputs_needed": len(columns), "variance_retained": alt.component_share, "max_vif": 1.0,
        "max_vif_note": "principal component scores are uncorrelated, so every VIF is 1",
        "method": "principal components of the matrix decomposed",
    }]
    if metric:
        rows[0]["target_fit"] = {"metric": metric, "value": kept_metric}
    for plan_id, plan in (("feature_subset", alt.subset_plan), ("vif_pruning", alt.pruning_plan)):
        if plan is None:
            rows.append({"plan_id": plan_id, "kind": plan_id, "kept": [], "size": None, "inputs_needed": None,
                         "variance_retained": None, "max_vif": None, "reason": alt.reason})
            continue
        limit = spe_limit(plan.residual_eigenvalues, 0.95, rank_tolerance(alt.largest_eigenvalue, len(columns)))
        row = {
            "plan_id": plan_id, "kind": plan_id, "kept": _names(plan.kept, columns), "size": len(plan.kept),
            "inputs_needed": len(plan.kept), "variance_retained": plan.share, "max_vif": plan.max_vif,
            "reconstruction": _reconstruction_entry(plan, columns, limit),
        }
        if plan_id == "feature_subset":
            s = alt.subset
            row["method"] = ("McCabe (1984) principal variables: greedy forward selection, then exchanges"
                             + ("; checked by scoring every subset of every size up to the one kept, so the size is the "
                                "smallest that keeps the target share and the subset the best of its size"
                                if s.exhaustive else "; a heuristic, not checked by exhaustive search"))
            row["exhaustive"] = s.exhaustive
            row["target_share"] = s.target
            row["exchanges"] = s.swaps
            if s.note:
                row["note"] = s.note
            row["greedy_path"] = {"order": _names(s.order, columns), "share": s.path_share}
            row["evidence"] = {
                "jolliffe_b4": {"kept": _names(alt.b4, columns), "variance_retained": alt.b4_share},
                "jolliffe_b2": {"kept": _names(alt.b2, columns), "variance_retained": alt.b2_share},
                "source": "Jolliffe (1972), rules B4 (the top feature of each kept component) and B2 (drop the "
                          "top feature of each discarded component, from the last)",
            }
        else:
            pr = alt.pruning
            row["method"] = ("remove the largest VIF, recompute, until every VIF is below the threshold; "
                             "between equal VIFs (an exact copy and its original) the later feature in file order goes")
            row["threshold"] = pr.threshold
            row["removed"] = [{"step": i + 1, "column": columns[j], "vif": (v if np.isfinite(v) else None),
                               "vif_reason": None if np.isfinite(v) else "exact linear dependency: infinite"}
                              for i, (j, v) in enumerate(pr.removed)]
        if metric:
            row["target_fit"] = {"metric": metric, "value": fits.get(plan_id)}
        rows.append(row)
    for row in rows:
        row["recommended"] = row["plan_id"] == choice.recommended
        row["chosen"] = row["plan_id"] == choice.chosen
        if not row["chosen"] and row.get("variance_retained") is not None:
            row["set_aside_because"] = _set_aside(row["plan_id"], alt, choice)
    decision = {
        "trade_off": trade_off(alt, columns, metric, kept_metric, fits, vif_threshold),
        "recommended": choice.recommended,
        "chosen": choice.chosen,
        "reasons": list(choice.reasons),
        "because": choice.because,
        "overridden": choice.overridden,
        "policy": POLICY.format(ratio=size_ratio, vif=vif_threshold),
        "size_ratio": (len(alt.subset_plan.kept) / alt.k) if alt.subset_plan else None,
    }
    return {"alternatives": rows, "plan_choice": decision}



def _fit_text(metric: str | None, value: float | None) -> str:
    if metric is None or value is None:
        return ""
    name = "R\u00b2" if metric == "r2" else "AUC"
    return f"cross-validated {name} {value:.3f}"


def trade_off(alt: Alternatives, columns: list[str], metric: str | None, kept_metric: float | None, fits: dict,
              vif_threshold: float) -> str:
    """The trade-off between the plans in plain words: information kept against
    interpretability and the inputs a downstream model needs."""
    p, k = len(columns), alt.k
    parts = [
        f"The component plan keeps {alt.component_share:.1%} of the variance in {k} component(s), but each component "
        f"mixes all {p} features, and every one of them must still be measured to compute it."
    ]
    sub, pr = alt.subset_plan, alt.pruning_plan
    if sub is None:
        parts.append(f"No plan on original features was formed ({alt.reason}).")
        return " ".join(parts)
    extra = len(sub.kept) - k
    parts.append(
        f"The feature subset keeps {sub.share:.1%} with {len(sub.kept)} original feature(s) that a reviewer can name and "
        f"that alone need to be collected (largest VIF {sub.max_vif:.3g}); it needs "
        + (f"{extra} more input(s) than there are components." if extra > 0 else "no more inputs than there are components.")
    )
    if alt.pruning.removed:
        parts.append(
            f"VIF pruning removes {len(alt.pruning.removed)} feature(s) to bring every VIF below {vif_threshold:g} and keeps "
            f"{pr.share:.1%} of the variance with {len(pr.kept)} features: it cures collinearity but reduces little."
        )
    else:
        parts.append(f"VIF pruning removes nothing: no VIF reaches {vif_threshold:g}.")
    if metric is not None:
        scored = [("components", kept_metric), ("feature subset", fits.get("feature_subset")), ("VIF pruning", fits.get("vif_pruning"))]
        shown = [f"{name} {_fit_text(metric, value)}" for name, value in scored if value is not None]
        if shown:
            parts.append("On the target: " + "; ".join(shown) + ". Explained variance is not predictive relevance.")
    return " ".join(parts)
