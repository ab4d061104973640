"""The rulebook: rules as data, read from TOML, applied to a finished record.

A rule names a figure of the record (a dot path such as ``diagnostics.vif``), a comparison,
a threshold, a severity (``note``, ``caution``, ``blocker``), a plain-words message and the
published source of its threshold (or "common practice" where there is none). A rule
states the *problem* condition: it fires when ``value <compare> threshold`` is true, so
``diagnostics.vif > 10`` fires for every feature whose VIF is above 10.

The file is parsed with :mod:`tomllib` only; nothing in it is executed. Messages may use
the tokens ``{subject}``, ``{value}`` and ``{threshold}``; they are replaced as plain text
in one pass, and any other text in braces is left exactly as written.

The rulebook reads the record and never computes a statistic (DESIGN.md, "Rules are
data").
"""
from __future__ import annotations

import difflib
import hashlib
import math
import numbers
import re
import tomllib
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from .errors import InputError

#: Every figure a rule may read: the dot path into the record and what it holds. Figures
#: marked "per feature" are ``{column: number}`` maps and give one finding per column that
#: breaks the rule; "list" figures give one finding per position (1-based).
KNOWN_FIGURES: dict[str, str] = {
    "diagnostics.vif": "variance inflation factor of each feature (per feature)",
    "diagnostics.condition_number": "sqrt(largest / smallest eigenvalue) of the correlation matrix",
    "diagnostics.condition_indices.indices": "Belsley-Kuh-Welsch condition indices (list, one per dimension)",
    "diagnostics.bartlett.p_value": "p-value of Bartlett's test that the correlation matrix is the identity",
    "diagnostics.kmo.overall": "Kaiser-Meyer-Olkin measure of sampling adequacy, all features together",
    "diagnostics.kmo.per_variable": "Kaiser-Meyer-Olkin measure of sampling adequacy (per feature)",
    "diagnostics.exact_dependencies_count": "number of exact linear dependencies among the features",
    "diagnostics.scale.sd_ratio": "largest standard deviation divided by the smallest one",
    "diagnostics.scale.skewness": "sample skewness of each feature (per feature)",
    "diagnostics.sample_size.n": "number of rows used",
    "diagnostics.sample_size.n_per_feature": "rows used per feature",
    "diagnostics.outliers.share": "share of rows beyond the 97.5% chi-squared limit of the Mahalanobis distance",
    "diagnostics.missing.share_rows_dropped": "share of rows dropped for missing values",
    "diagnostics.condition_indices.max_index": "largest finite Belsley-Kuh-Welsch condition index",
    "diagnostics.condition_indices.near_dependency_count": "number of Belsley-Kuh-Welsch near-dependencies named",
    "diagnostics.scale.positive_skewness": "skewness of each strictly positive feature (per feature)",
    "diagnostics.scale.excess_kurtosis": "excess kurtosis of each feature (per feature)",
    "diagnostics.scale.cv": "coefficient of variation of each feature (per feature)",
    "diagnostics.vif_max": "largest variance inflation factor",
    "diagnostics.without_dependents.vif": "VIF without the exactly dependent features (per feature)",
    "diagnostics.without_dependents.vif_max": "largest VIF without the exactly dependent features",
    "diagnostics.without_dependents.condition_number": "condition number of R without the exactly dependent features",
    "diagnostics.without_dependents.bartlett.p_value": "Bartlett's p-value without the exactly dependent features",
    "diagnostics.without_dependents.kmo.overall": "overall KMO without the exactly dependent features",
    "diagnostics.without_dependents.kmo.per_variable": "KMO without the exactly dependent features (per feature)",
    "diagnostics.outliers.count": "number of rows beyond the 97.5% chi-squared limit of the Mahalanobis distance",
    "input.rows_used": "number of rows that entered the analysis",
    "components.kept_share": "share of the total variance that the chosen components keep",
    "components.recommended": "the recommended number of components",
    "components.chosen": "the number of components chosen",
    "components.overridden": "true when --components N overrode the recommendation",
    "discarded.variance_fraction": "share of the total variance the kept components leave out",
    "discarded.per_feature_retained": "share of each feature's variance the kept components reproduce (per feature)",
    "discarded.share_rows_over_spe_limit": "share of rows beyond the 95% SPE limit",
    "discarded.rows_over_spe_limit": "rows beyond the 95% SPE limit",
    "discarded.rows_over_t2_limit": "rows beyond the 95% Hotelling T-squared limit",
    "discarded.target.max_discarded_share": "largest share of the target's variance explained by one discarded component",
    "discarded.target.loss": "cross-validated fit on all features minus the fit on the kept components",
    "plan_choice.size_ratio": "features the feature-subset plan needs per kept component",
    "plan_choice.overridden": "true when --plan chose against the recommended plan",
}

COMPARISONS: tuple[str, ...] = (">", ">=", "<", "<=", "==", "!=")
SEVERITIES: tuple[str, ...] = ("blocker", "caution", "note")  # most serious first
RULE_KEYS: tuple[str, ...] = ("id", "figure", "compare", "threshold", "severity", "message", "source")
DEFAULT_RULEBOOK_NAME = "default.toml"

_COMPARE = {
    ">": lambda a, b: a > b,
    ">=": lambda a, b: a >= b,
    "<": lambda a, b: a < b,
    "<=": lambda a, b: a <= b,
    "==": lambda a, b: a == b,
    "!=": lambda a, b: a != b,
}
_SEVERITY_RANK = {name: rank for rank, name in enumerate(SEVERITIES)}
_TOKEN = re.compile(r"\{(subject|value|threshold)\}")
_HEADER = re.compile(r"^\s*\[\[\s*rule\s*\]\]\s*(?:#.*)?$")
_RULE_ID = re.compile(r"^[A-Za-z0-9][A-Za-z0-9_.\-]*$")


@dataclass(frozen=True)
class Rule:
    """One rule: fires when ``figure <compare> threshold`` holds for a value in the record.

    ``line`` is the line of the rule's ``[[rule]]`` header in its file (1-based), or
    ``None`` when the file wrote the rule some other way (an inline table).
    """

    id: str
    figure: str
    compare: str
    threshold: int | float | bool
    severity: str
    message: str
    source: str
    line: int | None = None

    def fires(self, value: Any) -> bool:
        """True when ``value`` breaks the rule. Values of the wrong kind never fire."""
        value = _as_value(value)
        if value is None:
            return False
        if isinstance(self.threshold, bool) != isinstance(value, bool):
            return False  # a yes/no rule only reads yes/no figures, and the other way round
        return bool(_COMPARE[self.compare](value, self.threshold))

    def condition(self) -> str:
        """The condition in symbols, e.g. ``diagnostics.vif > 10``."""
        return f"{self.figure} {self.compare} {_exact(self.threshold)}"


@dataclass
class Rulebook:
    """The rules in force, in file order, with the file they came from and its SHA-256."""

    rules: list[Rule]
    path: str
    sha256: str

    def get(self, rule_id: str) -> Rule | None:
        """The rule with this id, or ``None``."""
        return next((rule for rule in self.rules if rule.id == rule_id), None)

    def threshold(self, rule_id: str, default: Any = None) -> Any:
        """The threshold of rule ``rule_id``, or ``default`` when the rulebook has no such rule."""
        rule = self.get(rule_id)
        return default if rule is None else rule.threshold

    def evaluate(self, record: dict) -> list[dict]:
        """Apply every rule to ``record``; return the findings, most serious first.

        For each rule the figure path is looked up in the record. A missing path or a
        ``None`` value is skipped (the figure may not apply to this data). A number is
        compared directly; a ``{name: number}`` map gives one finding per entry that
        breaks the rule (``subject`` = the name); a list gives one finding per position
        (``subject`` = "1", "2", ... ). Order: severity (blocker, caution, note), then the
        rule's place in the file, then the subject's place in the figure.

        A rule that fires for more than MAX_SUBJECTS subjects of one figure (a table of
        thousands of features) gives findings for the MAX_SUBJECTS that break it furthest
        and one more finding that counts the others; the figure itself keeps every value.
        """
        findings: list[tuple[int, int, int, dict]] = []
        for rule_index, rule in enumerate(self.rules):
            found, value = _resolve(record, rule.figure)
            if not found or value is None:
                continue
            if isinstance(value, dict):
                entries = [(str(key), item) for key, item in value.items()]
            elif isinstance(value, (list, tuple)):
                entries = [(str(i), item) for i, item in enumerate(value, start=1)]
            else:
                entries = [(None, value)]
            fired = [(i, subject, item) for i, (subject, item) in enumerate(entries) if rule.fires(item)]
            if len(fired) > MAX_SUBJECTS:
                fired.sort(key=lambda entry: -_breach(rule, _as_value(entry[2])))
                rest = len(fired) - MAX_SUBJECTS
                fired = sorted(fired[:MAX_SUBJECTS])
                summary = {
                    "rule_id": rule.id,
                    "severity": rule.severity,
                    "message": f"{rest} more entries of {rule.figure} break this rule ({rule.condition()}); "
                               f"the {MAX_SUBJECTS} above break it furthest, and {rule.figure} holds every value",
                    "value": None,
                    "threshold": rule.threshold,
                    "source": rule.source,
                    "figure": rule.figure,
                    "subject": None,
                    "more_subjects": rest,
                }
                findings.append((_SEVERITY_RANK[rule.severity], rule_index, len(entries), summary))
            for subject_index, subject, item in fired:
                item = _as_value(item)
                finding = {
                    "rule_id": rule.id,
                    "severity": rule.severity,
                    "message": render_message(rule.message, subject if subject is not None else rule.figure, item, rule.threshold),
                    "value": item,
                    "threshold": rule.threshold,
                    "source": rule.source,
                    "figure": rule.figure,
                    "subject": subject,
                }
                findings.append((_SEVERITY_RANK[rule.severity], rule_index, subject_index, finding))
        findings.sort(key=lambda entry: entry[:3])
        return [entry[3] for entry in findings]


#: Findings of one rule on one figure beyond which the rest are counted in one finding.
MAX_SUBJECTS = 20


def _breach(rule: Rule, value: Any) -> float:
    """How far ``value`` lies beyond the rule's threshold (0 for == and !=)."""
    if isinstance(value, bool) or rule.compare in ("==", "!="):
        return 0.0
    gap = float(value) - float(rule.threshold)
    return gap if rule.compare in (">", ">=") else -gap


def render_message(template: str, subject: str, value: Any, threshold: Any) -> str:
    """Replace ``{subject}``, ``{value}`` and ``{threshold}`` in ``template``, in one pass.

    Plain text replacement: no :meth:`str.format`, so ``{value.__class__}`` or ``{0}``
    stay as written, and a subject that itself contains ``{value}`` is not expanded again.
    Numbers are written with 4 significant digits; whole numbers are written in full.
    """
    replacements = {"subject": str(subject), "value": format_number(value), "threshold": format_number(threshold)}
    return _TOKEN.sub(lambda match: replacements[match.group(1)], template)


def format_number(x: Any) -> str:
    """A number for a message: 4 significant digits (``f"{x:.4g}"``); whole numbers and yes/no in full."""
    if isinstance(x, bool):
        return "true" if x else "false"
    if isinstance(x, numbers.Integral):
        return str(int(x))
    if isinstance(x, numbers.Real):
        return f"{float(x):.4g}"
    return str(x)


def _exact(x: Any) -> str:
    """A threshold written exactly as it will be compared (for the rule listing)."""
    if isinstance(x, bool):
        return "true" if x else "false"
    if isinstance(x, numbers.Integral):
        return str(int(x))
    return repr(float(x))


def _as_value(value: Any) -> Any:
    """A record value as a plain Python bool/int/float, or ``None`` when it is not a number.

    NaN counts as "not computed" (strict JSON writes it as null anyway).
    """
    if isinstance(value, bool):
        return value
    if type(value).__name__ == "bool_":  # numpy's bool, without importing numpy
        return bool(value)
    if isinstance(value, numbers.Integral):
        return int(value)
    if isinstance(value, numbers.Real):
        value = float(value)
        return None if math.isnan(value) else value
    return None


def _resolve(record: Any, path: str) -> tuple[bool, Any]:
    """Follow a dot path through nested dicts: ``(True, value)``, or ``(False, None)`` when absent."""
    node = record
    for part in path.split("."):
        if not isinstance(node, dict) or part not in node:
            return False, None
        node = node[part]
    return True, node


# ---------------------------------------------------------------------------------------
# Loading


def default_rulebook_path() -> Path:
    """The rulebook that ships with axisledger (``rules/default.toml``)."""
    from .assets import rules_dir

    return rules_dir() / DEFAULT_RULEBOOK_NAME


def load_rulebook(path: str | Path | None = None) -> Rulebook:
    """Read and check a rulebook file; ``None`` means the default rulebook.

    Every problem raises :class:`~planner.errors.InputError` with one line naming the file
    and, for a problem in one rule, the line of that rule's ``[[rule]]`` header.
    """
    file = default_rulebook_path() if path is None else Path(path)
    name = str(file)
    fix_path = "check the path given to --rules" if path is not None else "reinstall axisledger"
    if not file.exists():
        raise InputError(f"rulebook {name} does not exist", fix_path)
    if file.is_dir():
        raise InputError(f"rulebook {name} is a folder, not a file", "give the path of a .toml rulebook file")
    try:
        data = file.read_bytes()
    except OSError as exc:
        raise InputError(f"rulebook {name} cannot be read ({exc.strerror or exc})", "check that the file exists and is readable") from None
    try:
        text = data.decode("utf-8")
    except UnicodeDecodeError as exc:
        line = data[: exc.start].count(b"\n") + 1
        raise InputError(f"rulebook {name} line {line}: the file is not UTF-8 text", "save the rulebook as UTF-8") from None
    if text.startswith("\ufeff"):
        text = text[1:]
    try:
        document = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise InputError(f"rulebook {name} is not valid TOML: {exc}", "correct the TOML syntax at that place") from None

    extra = sorted(key for key in document if key != "rule")
    if extra:
        hint = "; rules go in [[rule]] tables" if any(key.lower().startswith("rule") for key in extra) else ""
        raise InputError(
            f"rulebook {name} has unknown top-level {'entries' if len(extra) > 1 else 'entry'} {_names(extra)}{hint}",
            "the file holds only [[rule]] tables with the keys " + ", ".join(RULE_KEYS),
        )
    raw_rules = document.get("rule", [])
    if isinstance(raw_rules, dict):
        raise InputError(f"rulebook {name}: 'rule' is a single table, not an array of tables", "write each rule under [[rule]] (two brackets)")
    if not isinstance(raw_rules, list):
        raise InputError(f"rulebook {name}: 'rule' must be an array of tables", "write each rule under its own [[rule]] header")
    if not raw_rules:
        raise InputError(
            f"rulebook {name} contains no rules",
            "add at least one [[rule]] table, or leave out --rules to use the default rulebook",
        )

    headers = [number for number, line in enumerate(text.splitlines(), start=1) if _HEADER.match(line)]
    lines: list[int | None] = headers if len(headers) == len(raw_rules) else [None] * len(raw_rules)

    rules: list[Rule] = []
    seen: dict[str, int | None] = {}
    for index, (raw, line) in enumerate(zip(raw_rules, lines), start=1):
        rule = _check_rule(raw, name, index, line)
        if rule.id in seen:
            first = seen[rule.id]
            where = f" (first defined at line {first})" if first is not None else ""
            raise InputError(f"{_where(name, index, line)}: rule id '{rule.id}' is used twice{where}", "give every rule its own id")
        seen[rule.id] = line
        rules.append(rule)
    return Rulebook(rules=rules, path=name, sha256=hashlib.sha256(data).hexdigest())


def _where(name: str, index: int, line: int | None) -> str:
    return f"{name} line {line}" if line is not None else f"{name} rule number {index}"


def _names(keys: list[str]) -> str:
    return ", ".join(f"'{key}'" for key in keys)


def _check_rule(raw: Any, name: str, index: int, line: int | None) -> Rule:
    where = _where(name, index, line)
    if not isinstance(raw, dict):
        raise InputError(f"{where}: a rule must be a table of keys", "write each rule under its own [[rule]] header")
    label = f"rule '{raw['id']}'" if isinstance(raw.get("id"), str) and raw["id"].strip() else f"rule number {index}"

    unknown = [key for key in raw if key not in RULE_KEYS]
    if unknown:
        raise InputError(f"{where}: {label} has unknown {'keys' if len(unknown) > 1 else 'key'} {_names(unknown)}", "a rule has exactly the keys " + ", ".join(RULE_KEYS))
    missing = [key for key in RULE_KEYS if key not in raw]
    if missing:
        raise InputError(f"{where}: {label} is missing {'keys' if len(missing) > 1 else 'the key'} {_names(missing)}", "a rule has exactly the keys " + ", ".join(RULE_KEYS))

    for key in ("id", "figure", "compare", "severity", "message", "source"):
        if not isinstance(raw[key], str):
            raise InputError(f"{where}: {label} has {key} = {_show(raw[key])}, which is not text", f'write {key} as a quoted string, e.g. {key} = "..."')
        if not raw[key].strip():
            raise InputError(f"{where}: {label} has an empty {key}", f"give the rule a {key}" + (" (a publication, or \"common practice\")" if key == "source" else ""))

    rule_id = raw["id"].strip()
    if not _RULE_ID.match(rule_id):
        raise InputError(f"{where}: rule id {_show(rule_id)} has characters other than letters, digits, '_', '-' and '.'", "use an id such as vif_high")

    figure = raw["figure"].strip()
    if figure not in KNOWN_FIGURES:
        close = difflib.get_close_matches(figure, list(KNOWN_FIGURES), n=1)
        fix = f"did you mean '{close[0]}'?" if close else "the known figures are " + ", ".join(KNOWN_FIGURES)
        raise InputError(f"{where}: {label} reads unknown figure {_show(figure)}", fix)

    compare = raw["compare"].strip()
    if compare not in COMPARISONS:
        raise InputError(f"{where}: {label} has unknown compare {_show(compare)}", "use one of " + ", ".join(COMPARISONS))

    severity = raw["severity"].strip()
    if severity not in SEVERITIES:
        raise InputError(f"{where}: {label} has unknown severity {_show(severity)}", "use note, caution or blocker")

    threshold = raw["threshold"]
    if isinstance(threshold, bool):
        if compare not in ("==", "!="):
            raise InputError(f"{where}: {label} compares with {compare} against the yes/no threshold {_exact(threshold)}", "a true/false threshold only goes with == or !=; give a number for " + compare)
    elif isinstance(threshold, (int, float)):
        if isinstance(threshold, float) and not math.isfinite(threshold):
            raise InputError(f"{where}: {label} has the threshold {threshold!r}, which is not a finite number", "give a finite number as the threshold")
    else:
        raise InputError(f"{where}: {label} has threshold = {_show(threshold)}, which is not a number", "write the threshold as a bare number, e.g. threshold = 10 (no quotes)")

    return Rule(
        id=rule_id,
        figure=figure,
        compare=compare,
        threshold=threshold,
        severity=severity,
        message=" ".join(raw["message"].split()),
        source=" ".join(raw["source"].split()),
        line=line,
    )


def _show(value: Any) -> str:
    """A user's value, quoted and cut short, for an error message."""
    if isinstance(value, str):
        text = value if len(value) <= 60 else value[:57] + "..."
        return f"'{text}'"
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, (int, float)):
        return repr(value)
    return f"a {type(value).__name__}" if not isinstance(value, (dict, list)) else ("a table" if isinstance(value, dict) else "an array")


# ---------------------------------------------------------------------------------------
# Listing


def format_rulebook(rulebook: Rulebook) -> str:
    """The rulebook as text for ``axisledger rules``: a header, then one block per rule."""
    count = len(rulebook.rules)
    out = [
        f"rulebook {rulebook.path} (sha256 {rulebook.sha256})",
        f"{count} rule{'s' if count != 1 else ''}; a rule fires when its condition is true",
    ]
    for rule in rulebook.rules:
        description = KNOWN_FIGURES.get(rule.figure, "")
        out += [
            "",
            f"{rule.id} [{rule.severity}]",
            f"  fires when {rule.condition()}",
            f"  figure:  {description}" if description else "  figure:  (no description)",
            f"  message: {rule.message}",
            f"  source:  {rule.source}",
        ]
    return "\n".join(out) + "\n"
