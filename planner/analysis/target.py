"""The target check: does the discarded part carry the outcome's signal?

A linear model of the target on all features is compared, by k-fold cross-validation with
shuffled folds, with the same model on the kept components, the components refitted inside
every fold (Jolliffe 1982; Hadi and Ling 1998: low-variance components can be the
predictive ones). A continuous target is scored by the cross-validated R-squared
(1 - PRESS / total sum of squares about the training means), a binary one by the AUC of a
logistic model.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

FOLDS = 5
#: A discarded component whose scores explain more than this share of the target's variance
#: is named in a caution (the rulebook may change it).
SIGNAL_SHARE = 0.05


def auc(y: np.ndarray, score: np.ndarray) -> float:
    """Area under the ROC curve by the Mann-Whitney rank formula (ties count half)."""
    import scipy.stats  # imported here: only audits with a target need it

    ranks = scipy.stats.rankdata(score)
    pos = y == 1
    n1, n0 = int(pos.sum()), int((~pos).sum())
    return float((ranks[pos].sum() - n1 * (n1 + 1) / 2) / (n1 * n0))


def _ols_fit(x: np.ndarray, y: np.ndarray) -> np.ndarray:
    design = np.column_stack([np.ones(len(x)), x])
    coef, *_ = np.linalg.lstsq(design, y, rcond=None)
    return coef


def _ols_predict(coef: np.ndarray, x: np.ndarray) -> np.ndarray:
    return coef[0] + x @ coef[1:]


def _logit_fit(x: np.ndarray, y: np.ndarray, ridge: float = 1e-4, iterations: int = 100) -> np.ndarray:
    """Logistic regression by iteratively reweighted least squares, with a small ridge
    penalty (not on the intercept) so that separable data still give a finite answer."""
    design = np.column_stack([np.ones(len(x)), x])
    beta = np.zeros(design.shape[1])
    penalty = ridge * len(x) * np.eye(design.shape[1])
    penalty[0, 0] = 0.0
    for _ in range(iterations):
        eta = np.clip(design @ beta, -30, 30)
        mu = 1.0 / (1.0 + np.exp(-eta))
        w = mu * (1 - mu) + 1e-9
        grad = design.T @ (y - mu) - penalty @ beta
        hess = design.T @ (design * w[:, None]) + penalty
        step = np.linalg.solve(hess, grad)
        beta = beta + step
        if np.max(np.abs(step)) < 1e-8:
            break
    return beta


@dataclass
class TargetCheck:
    target: str
    kind: str                       # "continuous" or "binary"
    metric: str                     # "r2" or "auc"
    folds: int
    seed: int
    rows: int
    all_features: float | None
    kept_components: float | None
    in_sample_all_features: float | None
    discarded_correlations: list[dict] = field(default_factory=list)
    kept_correlations: list[dict] = field(default_factory=list)
    carriers: list[dict] = field(default_factory=list)
    relevance_subset: dict | None = None
    reason: str | None = None
    note: str | None = None
    plan_fits: dict = field(default_factory=dict)


def target_check(
    x: np.ndarray,
    y: np.ndarray,
    k: int,
    fit_scores,
    full_scores: np.ndarray,
    name: str,
    seed: int,
    folds: int = FOLDS,
    signal_share: float = SIGNAL_SHARE,
    feature_plans: dict[str, list[int]] | None = None,
) -> TargetCheck:
    """Cross-validated fit on all features against the kept components.

    ``fit_scores(train_rows)`` refits scaling and decomposition on the training rows and
    returns a function giving the scores of new rows on all components (columns in order).
    ``full_scores`` are the scores of all rows on every component of the full-data model,
    for the correlations of the components with the target. ``feature_plans`` maps a plan
    to the columns it keeps; the same model is fitted on them in the same folds.
    """
    import scipy.stats  # imported here: only audits with a target need it

    present = ~np.isnan(y)
    note = None
    if not present.all():
        note = f"{int((~present).sum())} row(s) without a target value are left out of the target check"
    x, y, full_scores = x[present], y[present], full_scores[present]
    values = np.unique(y)
    kind = "binary" if len(values) == 2 else "continuous"
    metric = "auc" if kind == "binary" else "r2"
    base = TargetCheck(name, kind, metric, folds, seed, int(len(y)), None, None, None, note=note)
    if len(values) < 2:
        base.reason = f"skipped: the target {name!r} is constant on the rows used"
        return base
    if len(y) < 2 * folds:
        base.reason = f"skipped: {len(y)} rows are too few for {folds}-fold cross-validation"
        return base
    if kind == "binary":
        y = (y == values[1]).astype(float)
        if min(y.sum(), len(y) - y.sum()) < folds:
            base.reason = "skipped: the rarer class has fewer rows than there are folds"
            return base
    rng = np.random.default_rng([seed, 11])
    order = rng.permutation(len(y))
    parts = np.array_split(order, folds)
    pred_all = np.empty(len(y))
    pred_kept = np.empty(len(y))
    relevance_pred = np.empty(len(y))
    plans = {plan_id: list(kept) for plan_id, kept in (feature_plans or {}).items() if kept}
    plan_pred = {plan_id: np.empty(len(y)) for plan_id in plans}
    fit = _ols_fit if kind == "continuous" else _logit_fit
    for part in parts:
        train = np.ones(len(y), dtype=bool)
        train[part] = False
        mu, sd = x[train].mean(axis=0), x[train].std(axis=0, ddof=1)
        sd = np.where(sd > 0, sd, 1.0)
        xs_train, xs_test = (x[train] - mu) / sd, (x[part] - mu) / sd
        scores_of = fit_scores(x[train])
        s_train, s_test = scores_of(x[train]), scores_of(x[part])
        # Relevance subset (evidence only): the k components most correlated with y in training.
        corr = np.array([abs(np.corrcoef(s_train[:, c], y[train])[0, 1]) if np.std(s_train[:, c]) > 0 else 0.0
                         for c in range(s_train.shape[1])])
        chosen = np.argsort(-np.nan_to_num(corr), kind="stable")[:k]
        pred_all[part] = _ols_predict(fit(xs_train, y[train]), xs_test)
        pred_kept[part] = _ols_predict(fit(s_train[:, :k], y[train]), s_test[:, :k])
        relevance_pred[part] = _ols_predict(fit(s_train[:, chosen], y[train]), s_test[:, chosen])
        for plan_id, kept in plans.items():
            plan_pred[plan_id][part] = _ols_predict(fit(xs_train[:, kept], y[train]), xs_test[:, kept])
    if kind == "continuous":
        # SST about the training-fold means, so that predicting the mean scores about 0.
        train_means = np.empty(len(y))
        for part in parts:
            mask = np.ones(len(y), dtype=bool)
            mask[part] = False
            train_means[part] = y[mask].mean()
        sst = float(np.sum((y - train_means) ** 2))

        def score(pred):
            return float(1.0 - np.sum((y - pred) ** 2) / sst)

        xs = (x - x.mean(axis=0)) / np.where(x.std(axis=0, ddof=1) > 0, x.std(axis=0, ddof=1), 1.0)
        fitted = _ols_predict(_ols_fit(xs, y), xs)
        in_sample = float(1.0 - np.sum((y - fitted) ** 2) / np.sum((y - y.mean()) ** 2))
    else:
        def score(pred):
            return auc(y, pred)

        in_sample = None
    base.all_features = score(pred_all)
    base.kept_components = score(pred_kept)
    base.plan_fits = {plan_id: score(pred) for plan_id, pred in plan_pred.items()}
    base.in_sample_all_features = in_sample
    base.relevance_subset = {"metric": metric, "value": score(relevance_pred), "components": k,
                             "note": "evidence only: components chosen by their correlation with the target inside each fold"}
    # Correlations of every component (full-data model) with the target.
    q = full_scores.shape[1]
    rows = []
    for c in range(q):
        s = full_scores[:, c]
        if np.std(s) <= 1e-12 * max(1.0, float(np.max(np.abs(s)))):
            r, pval = None, None
        else:
            r, pval = scipy.stats.pearsonr(s, y)
            r, pval = float(r), float(pval)
        rows.append({"component": f"PC{c + 1}", "correlation": r, "share": (r * r if r is not None else None), "p_value": pval})
    base.kept_correlations = rows[:k]
    base.discarded_correlations = rows[k:]
    bonferroni = 0.05 / max(1, q - k)
    base.carriers = [row for row in rows[k:] if row["share"] is not None and row["share"] > signal_share and row["p_value"] < bonferroni]
    return base
