"""Unit tests of planner.rulebook: loading, checking, evaluating and listing rules.

The records here are small hand-made dicts: the rulebook reads figures, it computes none.
"""
from __future__ import annotations

import hashlib
from pathlib import Path

import pytest

from planner.assets import rules_dir
from planner.errors import InputError
from planner.rulebook import (
    COMPARISONS,
    KNOWN_FIGURES,
    RULE_KEYS,
    Rule,
    Rulebook,
    format_number,
    format_rulebook,
    load_rulebook,
    render_message,
)

DEFAULT_IDS = [
    "vif_high",
    "exact_dependency",
    "condition_index_high",
    "near_dependency",
    "bartlett_not_significant",
    "kmo_overall_low",
    "kmo_overall_mediocre",
    "kmo_variable_low",
    "scale_disparity",
    "skew_log_candidate",
    "sample_small",
    "sample_ratio_low",
    "outliers_many",
    "missing_rows_many",
    "vif_high_without_dependents",
    "kmo_overall_low_without_dependents",
    "kmo_variable_low_without_dependents",
    "bartlett_not_significant_without_dependents",
    "condition_number_high_without_dependents",
    "kept_share_low",
    "components_overridden",
    "feature_poorly_represented",
    "spe_rows_many",
    "target_signal_discarded",
    "target_fit_lost",
    "subset_plan_within_reach",
    "plan_overridden",
]


def rule_toml(**overrides) -> str:
    """One [[rule]] table; keys given as None are left out, extra keys are added."""
    fields = {
        "id": '"r1"',
        "figure": '"diagnostics.vif"',
        "compare": '">"',
        "threshold": "10",
        "severity": '"caution"',
        "message": '"{subject} is {value}"',
        "source": '"common practice"',
    }
    fields.update(overrides)
    body = "\n".join(f"{key} = {value}" for key, value in fields.items() if value is not None)
    return "[[rule]]\n" + body + "\n"


def write_rules(tmp_path: Path, text: str, name: str = "team_rules.toml") -> Path:
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    return path


def make_rule(rule_id="r", figure="diagnostics.vif", compare=">", threshold=10, severity="caution", message="{subject}={value}", source="s"):
    return Rule(rule_id, figure, compare, threshold, severity, message, source, None)


def book(*rules: Rule) -> Rulebook:
    return Rulebook(rules=list(rules), path="mem.toml", sha256="0" * 64)


# ---------------------------------------------------------------------------------------
# The default rulebook


def test_default_rulebook_loads_with_sources():
    rulebook = load_rulebook()
    assert [rule.id for rule in rulebook.rules] == DEFAULT_IDS
    for rule in rulebook.rules:
        assert rule.source.strip(), rule.id
        assert rule.message.strip(), rule.id
        assert rule.figure in KNOWN_FIGURES
        assert rule.line is not None
    path = rules_dir() / "default.toml"
    assert Path(rulebook.path) == path
    assert rulebook.sha256 == hashlib.sha256(path.read_bytes()).hexdigest()


def test_default_rulebook_thresholds():
    rulebook = load_rulebook()
    expected = {
        "vif_high": (">", 10, "caution"),
        "exact_dependency": (">", 0, "caution"),
        "condition_index_high": (">", 30, "caution"),
        "bartlett_not_significant": (">", 0.05, "blocker"),
        "kmo_overall_low": ("<", 0.5, "blocker"),
        "kmo_overall_mediocre": ("<", 0.6, "caution"),
        "kmo_variable_low": ("<", 0.5, "caution"),
        "scale_disparity": (">", 10, "note"),
        "skew_log_candidate": (">", 1, "note"),
        "sample_small": ("<", 100, "caution"),
        "sample_ratio_low": ("<", 5, "caution"),
        "outliers_many": (">", 0.05, "caution"),
        "missing_rows_many": (">", 0.1, "caution"),
    }
    for rule_id, (compare, threshold, severity) in expected.items():
        rule = rulebook.get(rule_id)
        assert rule is not None, rule_id
        assert (rule.compare, rule.threshold, rule.severity) == (compare, threshold, severity), rule_id


def test_default_rulebook_header_lines_match_file():
    rulebook = load_rulebook()
    lines = (rules_dir() / "default.toml").read_text(encoding="utf-8").splitlines()
    for rule in rulebook.rules:
        assert lines[rule.line - 1].strip() == "[[rule]]"
        assert lines[rule.line].strip() == f'id = "{rule.id}"'


def test_threshold_and_get():
    rulebook = load_rulebook()
    assert rulebook.threshold("vif_high", 99) == 10
    assert rulebook.threshold("no_such_rule", 99) == 99
    assert rulebook.threshold("no_such_rule") is None
    assert rulebook.get("no_such_rule") is None
    assert rulebook.get("sample_small").figure == "diagnostics.sample_size.n"


def test_default_rulebook_on_a_troubled_record():
    record = {
        "diagnostics": {
            "vif": {"temp": 25.0, "speed": 1.5, "moisture": None},
            "kmo": {"overall": 0.42, "per_variable": {"temp": 0.7, "speed": 0.3}},
            "bartlett": {"statistic": 3.0, "df": 3, "p_value": 0.4},
            "sample_size": {"n": 60, "n_per_feature": 20.0},
            "scale": {"sd_ratio": 2.0, "positive_skewness": {"temp": 1.5, "speed": -2.0}},
        }
    }
    findings = load_rulebook().evaluate(record)
    got = [(f["rule_id"], f["subject"]) for f in findings]
    assert got == [
        ("bartlett_not_significant", None),
        ("kmo_overall_low", None),
        ("vif_high", "temp"),
        ("kmo_overall_mediocre", None),
        ("kmo_variable_low", "speed"),
        ("sample_small", None),
        ("skew_log_candidate", "temp"),
    ]
    assert [f["severity"] for f in findings] == ["blocker", "blocker", "caution", "caution", "caution", "caution", "note"]


# ---------------------------------------------------------------------------------------
# Evaluation


def test_scalar_fires_and_finding_fields():
    rule = make_rule("n_small", "diagnostics.sample_size.n", "<", 100, "caution", "only {value} rows, need {threshold}", "Gorsuch")
    findings = book(rule).evaluate({"diagnostics": {"sample_size": {"n": 42}}})
    assert findings == [
        {
            "rule_id": "n_small",
            "severity": "caution",
            "message": "only 42 rows, need 100",
            "value": 42,
            "threshold": 100,
            "source": "Gorsuch",
            "figure": "diagnostics.sample_size.n",
            "subject": None,
        }
    ]
    assert book(rule).evaluate({"diagnostics": {"sample_size": {"n": 100}}}) == []


def test_per_feature_dict_one_finding_per_breaking_entry_in_order():
    rule = make_rule()
    record = {"diagnostics": {"vif": {"zeta": 11.0, "alpha": 3.0, "mid": 50.123456, "none": None, "eq": 10}}}
    findings = book(rule).evaluate(record)
    assert [f["subject"] for f in findings] == ["zeta", "mid"]  # record order, not alphabetical
    assert [f["value"] for f in findings] == [11.0, 50.123456]
    assert findings[1]["message"] == "mid=50.12"


def test_list_one_finding_per_index_one_based():
    rule = make_rule("ci", "diagnostics.condition_indices.indices", ">", 30)
    record = {"diagnostics": {"condition_indices": {"indices": [1.0, 45.0, None, 12.0, 31.0]}}}
    findings = book(rule).evaluate(record)
    assert [(f["subject"], f["value"]) for f in findings] == [("2", 45.0), ("5", 31.0)]


def test_none_and_missing_paths_are_skipped():
    rules = book(
        make_rule("a", "diagnostics.condition_number", ">", 1),
        make_rule("b", "diagnostics.kmo.overall", "<", 0.5),
        make_rule("c", "diagnostics.bartlett.p_value", ">", 0.05),
    )
    record = {"diagnostics": {"condition_number": None, "kmo": None}}
    assert rules.evaluate(record) == []
    assert rules.evaluate({}) == []
    assert rules.evaluate({"diagnostics": "not a table"}) == []


def test_non_numeric_values_and_nan_never_fire():
    rule = make_rule("a", "diagnostics.condition_number", "!=", 1)
    assert book(rule).evaluate({"diagnostics": {"condition_number": "big"}}) == []
    assert book(rule).evaluate({"diagnostics": {"condition_number": float("nan")}}) == []
    # a yes/no figure is not a number and the other way round
    assert book(rule).evaluate({"diagnostics": {"condition_number": True}}) == []
    boolean = make_rule("b", "diagnostics.condition_number", "==", True)
    assert book(boolean).evaluate({"diagnostics": {"condition_number": 1}}) == []
    assert len(book(boolean).evaluate({"diagnostics": {"condition_number": True}})) == 1


@pytest.mark.parametrize(
    "compare, value, fires",
    [
        (">", 5.0, False), (">", 5.5, True), (">", 4.9, False),
        (">=", 5.0, True), (">=", 4.999, False), (">=", 6, True),
        ("<", 5.0, False), ("<", 4.9, True), ("<", 5.1, False),
        ("<=", 5.0, True), ("<=", 5.001, False), ("<=", -1, True),
        ("==", 5.0, True), ("==", 5, True), ("==", 5.01, False),
        ("!=", 5.0, False), ("!=", 4, True), ("!=", 5.01, True),
    ],
)
def test_each_comparison(compare, value, fires):
    rule = make_rule("r", "diagnostics.condition_number", compare, 5)
    findings = book(rule).evaluate({"diagnostics": {"condition_number": value}})
    assert len(findings) == (1 if fires else 0)
    assert COMPARISONS == (">", ">=", "<", "<=", "==", "!=")


def test_ordering_by_severity_then_file_order_then_subject():
    rules = book(
        make_rule("note_first", "diagnostics.scale.sd_ratio", ">", 1, "note"),
        make_rule("caution_vif", "diagnostics.vif", ">", 1, "caution"),
        make_rule("blocker_late", "diagnostics.kmo.overall", "<", 1, "blocker"),
        make_rule("caution_kmo", "diagnostics.kmo.per_variable", "<", 1, "caution"),
        make_rule("blocker_later", "diagnostics.sample_size.n", "<", 1000, "blocker"),
    )
    record = {
        "diagnostics": {
            "scale": {"sd_ratio": 5},
            "vif": {"b": 2, "a": 3},
            "kmo": {"overall": 0.1, "per_variable": {"y": 0.2, "x": 0.3}},
            "sample_size": {"n": 10},
        }
    }
    got = [(f["rule_id"], f["subject"]) for f in rules.evaluate(record)]
    assert got == [
        ("blocker_late", None),
        ("blocker_later", None),
        ("caution_vif", "b"),
        ("caution_vif", "a"),
        ("caution_kmo", "y"),
        ("caution_kmo", "x"),
        ("note_first", None),
    ]


# ---------------------------------------------------------------------------------------
# Messages


def test_message_tokens_are_substituted_with_four_significant_digits():
    assert render_message("{subject}: {value} > {threshold}", "temp", 12.345678, 10) == "temp: 12.35 > 10"
    assert render_message("{value}|{value}", "x", 0.000123456, 0.05) == "0.0001235|0.0001235"
    assert render_message("{value}", "x", 123456.0, 1) == "1.235e+05"
    assert render_message("{threshold}", "x", 1.0, 0.05) == "0.05"
    assert format_number(True) == "true"
    assert format_number(7) == "7"


def test_hostile_templates_are_not_expanded():
    template = "{value.__class__} {value.__class__.__mro__} {0} {subject!r} {threshold:>10} {{value}} {VALUE} { value }"
    out = render_message(template, "col", 3.5, 2)
    assert out == "{value.__class__} {value.__class__.__mro__} {0} {subject!r} {threshold:>10} {3.5} {VALUE} { value }"
    assert "float" not in out and "class '" not in out


def test_subject_containing_a_token_is_not_expanded_again():
    rule = make_rule(message="{subject} has {value}")
    findings = book(rule).evaluate({"diagnostics": {"vif": {"{value}{threshold}": 12.0}}})
    assert findings[0]["message"] == "{value}{threshold} has 12"


def test_scalar_subject_token_is_the_figure():
    rule = make_rule("n", "diagnostics.sample_size.n", "<", 100, message="{subject}={value}")
    assert book(rule).evaluate({"diagnostics": {"sample_size": {"n": 3}}})[0]["message"] == "diagnostics.sample_size.n=3"


# ---------------------------------------------------------------------------------------
# Loading a team's file


def test_custom_rulebook_loads(tmp_path):
    text = "# team rules\n\n" + rule_toml() + "\n" + rule_toml(id='"r2"', figure='"diagnostics.bartlett.p_value"', threshold="0.01", severity='"blocker"')
    path = write_rules(tmp_path, text)
    rulebook = load_rulebook(str(path))
    assert [(r.id, r.line) for r in rulebook.rules] == [("r1", 3), ("r2", 12)]
    assert rulebook.path == str(path)
    assert rulebook.sha256 == hashlib.sha256(path.read_bytes()).hexdigest()
    assert rulebook.get("r2").threshold == 0.01
    assert load_rulebook(path).sha256 == rulebook.sha256  # a Path works too


def test_bool_threshold_with_equality_loads(tmp_path):
    path = write_rules(tmp_path, rule_toml(compare='"=="', threshold="true"))
    rule = load_rulebook(str(path)).rules[0]
    assert rule.threshold is True and rule.compare == "=="


def expect_error(path: Path, *fragments: str) -> str:
    with pytest.raises(InputError) as info:
        load_rulebook(str(path))
    message = str(info.value)
    assert "\n" not in message
    assert path.name in message, message
    for fragment in fragments:
        assert fragment in message, (fragment, message)
    return message


def three_rules(bad: str) -> str:
    """Two good rules, then the bad one: its [[rule]] header is on line 21."""
    text = "# comment\n\n" + rule_toml(id='"good1"') + "\n" + rule_toml(id='"good2"') + "\n" + bad
    assert text.splitlines()[20] == "[[rule]]"
    return text


def test_syntax_error_names_file_and_line(tmp_path):
    path = write_rules(tmp_path, rule_toml() + "\n[[rule]]\nid = \"x\"\nfigure = = \"oops\"\n")
    message = expect_error(path, "not valid TOML")
    assert "line 12" in message


def test_unknown_key(tmp_path):
    path = write_rules(tmp_path, three_rules(rule_toml(id='"extra"', colour='"red"')))
    expect_error(path, "line 21", "extra", "'colour'")


def test_missing_key(tmp_path):
    path = write_rules(tmp_path, three_rules(rule_toml(id='"nosrc"', source=None)))
    expect_error(path, "line 21", "nosrc", "'source'")


def test_missing_id_uses_rule_number(tmp_path):
    path = write_rules(tmp_path, three_rules(rule_toml(id=None)))
    expect_error(path, "line 21", "rule number 3", "'id'")


def test_threshold_as_text(tmp_path):
    path = write_rules(tmp_path, three_rules(rule_toml(id='"vif_high"', threshold='"ten"')))
    expect_error(path, "line 21", "vif_high", "'ten'", "not a number")


def test_bool_threshold_with_order_comparison(tmp_path):
    path = write_rules(tmp_path, three_rules(rule_toml(id='"flag"', compare='">"', threshold="true")))
    expect_error(path, "line 21", "flag", "==")


def test_non_finite_threshold(tmp_path):
    path = write_rules(tmp_path, three_rules(rule_toml(id='"inf_rule"', threshold="nan")))
    expect_error(path, "line 21", "inf_rule", "finite")


def test_wrong_type_for_text_key(tmp_path):
    path = write_rules(tmp_path, three_rules(rule_toml(id='"sev"', severity="3")))
    expect_error(path, "line 21", "sev", "severity", "not text")


def test_unknown_severity(tmp_path):
    path = write_rules(tmp_path, three_rules(rule_toml(id='"vif_high"', severity='"fatal"')))
    message = expect_error(path, "line 21", "rule 'vif_high' has unknown severity 'fatal'")
    assert "note, caution or blocker" in message


def test_unknown_compare(tmp_path):
    path = write_rules(tmp_path, three_rules(rule_toml(id='"cmp"', compare='"=>"')))
    expect_error(path, "line 21", "cmp", "'=>'", ">=")


def test_unknown_figure(tmp_path):
    path = write_rules(tmp_path, three_rules(rule_toml(id='"fig"', figure='"diagnostics.vfi"')))
    expect_error(path, "line 21", "fig", "diagnostics.vfi", "did you mean 'diagnostics.vif'")
    path = write_rules(tmp_path, three_rules(rule_toml(id='"fig"', figure='"__class__"')))
    expect_error(path, "line 21", "unknown figure")


def test_empty_text_field(tmp_path):
    path = write_rules(tmp_path, three_rules(rule_toml(id='"quiet"', source='"  "')))
    expect_error(path, "line 21", "quiet", "empty source")


def test_duplicate_id(tmp_path):
    path = write_rules(tmp_path, three_rules(rule_toml(id='"good1"')))
    expect_error(path, "line 21", "'good1'", "twice", "line 3")


def test_header_with_comment_and_spaces_still_counts(tmp_path):
    text = rule_toml().replace("[[rule]]", "  [[ rule ]]   # first") + "\n" + rule_toml(id='"r2"', severity='"grave"')
    path = write_rules(tmp_path, text)
    expect_error(path, "line 10", "r2", "grave")


def test_empty_file(tmp_path):
    path = write_rules(tmp_path, "")
    expect_error(path, "no rules")
    path = write_rules(tmp_path, "# only a comment\n", name="comments.toml")
    expect_error(path, "no rules")


def test_single_brackets_and_unknown_top_level(tmp_path):
    path = write_rules(tmp_path, rule_toml().replace("[[rule]]", "[rule]"))
    expect_error(path, "[[rule]]")
    path = write_rules(tmp_path, rule_toml().replace("[[rule]]", "[[rules]]"), name="typo.toml")
    expect_error(path, "'rules'")


def test_missing_file(tmp_path):
    path = tmp_path / "absent.toml"
    expect_error(path, "does not exist")


def test_folder(tmp_path):
    path = tmp_path / "rules_folder.toml"
    path.mkdir()
    expect_error(path, "folder")


def test_not_utf8(tmp_path):
    path = tmp_path / "latin.toml"
    path.write_bytes(rule_toml(message='"caf\u00e9"').encode("latin-1"))
    expect_error(path, "UTF-8", "line 7")


def test_rule_keys_are_the_contract():
    assert RULE_KEYS == ("id", "figure", "compare", "threshold", "severity", "message", "source")


# ---------------------------------------------------------------------------------------
# Listing


def test_format_rulebook_lists_every_rule_with_source():
    rulebook = load_rulebook()
    text = format_rulebook(rulebook)
    assert text.splitlines()[0] == f"rulebook {rulebook.path} (sha256 {rulebook.sha256})"
    for rule in rulebook.rules:
        assert rule.id in text
        assert rule.source in text
        assert rule.message in text
    assert "fires when diagnostics.vif > 10" in text
    assert "fires when diagnostics.bartlett.p_value > 0.05" in text
    assert "fires when diagnostics.kmo.overall < 0.5" in text
    assert "bartlett_not_significant [blocker]" in text


def test_a_rule_breaking_many_entries_names_the_worst_and_counts_the_rest():
    # Our contract: beyond MAX_SUBJECTS findings of one rule, the worst ones are kept (in
    # the figure's order) and one more finding counts the others.
    from planner.rulebook import MAX_SUBJECTS

    rule = make_rule()
    values = {f"f{i:03d}": 10.5 + i for i in range(MAX_SUBJECTS + 7)}
    values["calm"] = 2.0
    findings = book(rule).evaluate({"diagnostics": {"vif": values}})
    named = [f for f in findings if f["subject"] is not None]
    assert len(named) == MAX_SUBJECTS
    assert [f["subject"] for f in named] == [f"f{i:03d}" for i in range(7, MAX_SUBJECTS + 7)]
    summary = [f for f in findings if f["subject"] is None]
    assert len(summary) == 1 and summary[0]["more_subjects"] == 7
    assert "7 more entries of diagnostics.vif" in summary[0]["message"]
