"""The component decision through the command line: scaling, override, audit trail, PDF."""
from __future__ import annotations

import numpy as np
import pandas as pd
from pypdf import PdfReader

import planner

from .conftest import assert_clean_refusal, load_json


def _factor_table(tmp_path, n=300, k=3, per=5, seed=2, scales=None, names=None):
    # Invented data of known rank, for behaviour checks only.
    rng = np.random.default_rng(seed)
    f = rng.standard_normal((n, k))
    load = np.zeros((k * per, k))
    for j in range(k):
        load[j * per : (j + 1) * per, j] = 0.75
    x = f @ load.T + rng.standard_normal((n, k * per)) * np.sqrt(1 - 0.75**2)
    if scales is not None:
        x = x * scales
    cols = names or [f"s{j + 1}" for j in range(k * per)]
    path = tmp_path / "factors.csv"
    pd.DataFrame(x, columns=cols).to_csv(path, index=False)
    return path


def test_recommendation_recovers_a_clear_structure(tmp_path):
    record = planner.audit(_factor_table(tmp_path)).record
    assert record["components"]["recommended"] == 3 == record["components"]["chosen"]
    assert record["components"]["rules"]["parallel_analysis"]["k"] == 3
    assert len(record["components"]["reasons"]) >= 2
    assert set(record["components"]["rules"]) >= {
        "kaiser", "cumulative_variance", "scree_elbow", "parallel_analysis", "broken_stick",
        "velicer_map", "minka", "gavish_donoho", "cross_validation",
    }


def test_auto_scaling_standardizes_disparate_spreads_and_centres_comparable_ones(tmp_path):
    scales = np.array([1, 1000, 1, 1, 1, 1, 1, 1, 1, 1, 1, 1, 1, 1, 1.0])
    rec = planner.audit(_factor_table(tmp_path, scales=scales)).record
    assert rec["decomposition"]["scaling"]["method"] == "standardize"
    rec = planner.audit(_factor_table(tmp_path)).record
    assert rec["decomposition"]["scaling"]["method"] == "center"
    assert all(v == 1.0 for v in rec["decomposition"]["scale"].values())


def test_mixed_units_in_the_names_mean_standardize(tmp_path):
    names = [f"t{j}_temp_c" for j in range(5)] + [f"p{j}_press_bar" for j in range(5)] + [f"m{j}_moist_pct" for j in range(5)]
    rec = planner.audit(_factor_table(tmp_path, names=names)).record
    assert rec["decomposition"]["scaling"]["method"] == "standardize"
    assert "different units" in rec["decomposition"]["scaling"]["reasons"][0]


def test_override_needs_a_reason_and_is_kept_in_the_audit_trail(cli, tmp_path):
    path = _factor_table(tmp_path)
    assert_clean_refusal(cli("audit", path, "--components", "2"), "--because")
    r = cli("audit", path, "--components", "2", "--because", "fixed by the model specification", "--analyst", "J. Roe", "--no-pdf")
    assert r.code == 0, r
    rec = load_json(tmp_path / "axisledger-out" / "record.json")
    assert rec["components"]["chosen"] == 2 and rec["components"]["recommended"] == 3
    events = [e for e in rec["audit_trail"] if e["event"] == "override"]
    assert events and events[0]["because"] == "fixed by the model specification" and events[0]["by"] == "J. Roe"
    assert any(f["rule_id"] == "components_overridden" for f in rec["findings"])


def test_every_scaling_option_runs_and_is_recorded(tmp_path):
    path = _factor_table(tmp_path)
    for method in ("standardize", "center", "robust", "pareto"):
        rec = planner.audit(path, scaling=method).record
        dec = rec["decomposition"]
        assert dec["scaling"]["method"] == method and dec["scaling"]["requested"] == method
        assert abs(sum(dec["eigenvalues"]) - dec["trace"]) <= 1e-9 * dec["trace"]


def test_permutation_null_is_an_option(tmp_path):
    rec = planner.audit(_factor_table(tmp_path, n=120), parallel_null="permutation").record
    pa = rec["components"]["rules"]["parallel_analysis"]
    assert pa["method"] == "column permutation of the data" and pa["k"] == 3


def test_seed_makes_the_rules_reproducible(tmp_path):
    path = _factor_table(tmp_path)
    a = planner.audit(path, seed=5).record["components"]
    b = planner.audit(path, seed=5).record["components"]
    assert a["rules"]["parallel_analysis"]["null_percentile"] == b["rules"]["parallel_analysis"]["null_percentile"]
    assert a["rules"]["cross_validation"]["press"] == b["rules"]["cross_validation"]["press"]


def test_pdf_shows_the_component_evidence(cli, tmp_path):
    assert cli("audit", _factor_table(tmp_path), "--out", "o").code == 0
    text = " ".join(p.extract_text() for p in PdfReader(str(tmp_path / "o" / "record.pdf")).pages)
    for heading in ("Component evidence", "The stopping rules side by side", "Recommendation", "parallel analysis"):
        assert heading in text
