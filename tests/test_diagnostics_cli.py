"""Diagnostics through the command line: findings, the rulebook options, the PDF section."""
from __future__ import annotations

import numpy as np
import pandas as pd
from pypdf import PdfReader

import planner

from .conftest import assert_clean_refusal, load_json, write


def _kiln_like(tmp_path, n=150, seed=4):
    # Invented data for behaviour checks: a sum column, a collinear pair, a skewed column.
    rng = np.random.default_rng(seed)
    a = np.round(rng.normal(600, 20, n), 1)
    b = np.round(rng.normal(590, 25, n), 1)
    t1 = rng.normal(1000, 25, n)
    frame = pd.DataFrame(
        {
            "part_a_kg": a,
            "part_b_kg": b,
            "total_kg": np.round(a + b, 1),
            "zone1_c": t1,
            "zone2_c": t1 + 60 + rng.normal(0, 3, n),
            "defects": np.floor(np.exp(rng.normal(1.0, 0.9, n))) + 1,
            "speed": rng.normal(3, 0.3, n),
        }
    )
    path = tmp_path / "line.csv"
    frame.to_csv(path, index=False)
    return path


def test_exact_dependency_is_named_in_record_and_pdf(cli, tmp_path):
    path = _kiln_like(tmp_path)
    assert cli("audit", path, "--out", "o").code == 0
    record = load_json(tmp_path / "o" / "record.json")
    deps = record["diagnostics"]["exact_dependencies"]
    assert [d["text"] for d in deps] == ["total_kg = part_a_kg + part_b_kg"]
    assert record["diagnostics"]["vif"]["zone1_c"] is None and record["diagnostics"]["vif_reason"]
    assert record["diagnostics"]["without_dependents"]["dropped"] == ["total_kg"]
    ids = {f["rule_id"] for f in record["findings"]}
    assert {"exact_dependency", "vif_high_without_dependents", "skew_log_candidate"} <= ids
    text = " ".join(page.extract_text() for page in PdfReader(str(tmp_path / "o" / "record.pdf")).pages)
    assert "total_kg = part_a_kg + part_b_kg" in text
    assert "Diagnostics" in text and "Findings" in text


def test_findings_carry_the_contract_keys(tmp_path):
    record = planner.audit(_kiln_like(tmp_path)).record
    for f in record["findings"]:
        assert set(f) >= {"rule_id", "severity", "message", "value", "threshold", "source"}
        assert f["severity"] in ("note", "caution", "blocker")
    order = [f["severity"] for f in record["findings"]]
    rank = {"blocker": 0, "caution": 1, "note": 2}
    assert order == sorted(order, key=rank.get)


def test_a_team_rulebook_replaces_the_default(cli, tmp_path):
    rules = write(
        tmp_path / "team.toml",
        '[[rule]]\nid = "vif_strict"\nfigure = "diagnostics.without_dependents.vif"\ncompare = ">"\n'
        'threshold = 2.5\nseverity = "blocker"\nmessage = "{subject}: VIF {value} over {threshold}"\n'
        'source = "our model-risk standard, section 4"\n',
    )
    assert cli("audit", _kiln_like(tmp_path), "--rules", rules, "--out", "o", "--no-pdf").code == 0
    record = load_json(tmp_path / "o" / "record.json")
    rule_ids = {f["rule_id"] for f in record["findings"] if not f["rule_id"].startswith("intake.")}
    assert rule_ids == {"vif_strict"}
    assert record["rulebook"]["rules"] == 1 and len(record["rulebook"]["sha256"]) == 64
    listed = cli("rules", "--rules", rules)
    assert listed.code == 0 and "vif_strict" in listed.out and "our model-risk standard" in listed.out


def test_malformed_rulebook_is_refused_before_anything_is_written(cli, tmp_path):
    rules = write(tmp_path / "bad.toml", '[[rule]]\nid = "x"\nfigure = "diagnostics.vif"\ncompare = ">"\nthreshold = "ten"\n'
                  'severity = "caution"\nmessage = "m"\nsource = "s"\n')
    r = cli("audit", _kiln_like(tmp_path), "--rules", rules, "--out", "o")
    assert_clean_refusal(r, "bad.toml", "line 1")
    assert not (tmp_path / "o").exists()
    assert_clean_refusal(cli("rules", "--rules", write(tmp_path / "syntax.toml", "[[rule]\n")), "syntax.toml")


def test_rules_command_lists_the_default_rulebook_with_sources(cli):
    r = cli("rules")
    assert r.code == 0
    for rule_id in ("vif_high", "bartlett_not_significant", "kmo_overall_low", "sample_small"):
        assert rule_id in r.out
    assert "Kaiser (1974)" in r.out and "Belsley, Kuh and Welsch (1980)" in r.out


def test_p_at_least_n_gives_nulls_with_reasons_not_a_crash(cli, tmp_path):
    rng = np.random.default_rng(0)
    frame = pd.DataFrame(rng.normal(size=(6, 9)), columns=[f"f{j}" for j in range(9)])
    path = tmp_path / "wide.csv"
    frame.to_csv(path, index=False)
    assert cli("audit", path, "--out", "o").code == 0
    d = load_json(tmp_path / "o" / "record.json")["diagnostics"]
    assert all(v is None for v in d["vif"].values()) and "p >= n" in d["vif_reason"]
    assert d["kmo"]["overall"] is None and d["kmo"]["reason"]
    assert d["bartlett"]["statistic"] is None and d["bartlett"]["reason"]
    assert d["condition_number"] is None and d["outliers"]["limit"] is None


def test_demo_names_its_dependency_and_outliers(tmp_path):
    from .conftest import run_subprocess

    r = run_subprocess("demo", "--out", "d", cwd=tmp_path)
    assert r.code == 0, r
    record = load_json(tmp_path / "d" / "record.json")
    d = record["diagnostics"]
    assert [x["text"] for x in d["exact_dependencies"]] == ["batch_load_kg = zone_a_load_kg + zone_b_load_kg"]
    # The generator plants upsets in batches B-0024, B-0072, B-0119, B-0165 and B-0210.
    worst = {w["label"] for w in d["outliers"]["worst"][:5]}
    assert worst == {"B-0024", "B-0072", "B-0119", "B-0165", "B-0210"}
    assert "defect_count" in d["scale"]["log_candidates"]


def test_demo_record_shows_what_is_discarded(tmp_path):
    from .conftest import run_subprocess

    r = run_subprocess("demo", "--out", "d", "--no-pdf", cwd=tmp_path)
    assert r.code == 0, r
    disc = load_json(tmp_path / "d" / "record.json")["discarded"]
    # The generator makes ambient_humidity_pct unrelated to the process.
    assert "ambient_humidity_pct" in disc["poorly_represented"]
    # The planted upsets are the worst rows of the residual or of T-squared.
    flagged = {w["label"] for w in disc["worst_spe"][:6]} | {w["label"] for w in disc["worst_t2"][:6]}
    assert {"B-0024", "B-0072", "B-0119", "B-0165", "B-0210"} <= flagged
    target = disc["target"]
    assert target["target"] == "flexural_strength_mpa" and target["metric"] == "r2"
    # The generator ties strength to a low-variance direction of the zone block.
    assert target["r2_all_features"] > target["r2_kept_components"]
    assert target["signal_carriers"]
