"""The short terminal summary printed by ``axisledger audit``."""
from __future__ import annotations

from .formatting import num


def render_summary(record: dict, paths: dict | None = None) -> str:
    inp = record["input"]
    lines = [
        f"axisledger record {record['record_id']} ({record['status']})",
        f"  data      {inp['source']}: {inp['rows_read']} rows read, {inp['rows_used']} used, "
        f"{len(inp['columns_used'])} features, {len(inp['excluded'])} column(s) set aside",
    ]
    for e in inp["excluded"][:8]:
        lines.append(f"            - {e['column']}: {e['reason']}")
    if len(inp["excluded"]) > 8:
        lines.append(f"            ... and {len(inp['excluded']) - 8} more")
    findings = record.get("findings", [])
    if findings:
        counts = {s: sum(1 for f in findings if f["severity"] == s) for s in ("blocker", "caution", "note")}
        lines.append(f"  findings  {counts['blocker']} blocker(s), {counts['caution']} caution(s), {counts['note']} note(s)")
    comp = record.get("components")
    if comp:
        dec = record.get("decomposition", {})
        lines.append(
            f"  decision  {dec.get('scaling', {}).get('method')} scaling, {comp.get('chosen')} component(s) kept"
        )
    disc = record.get("discarded")
    if disc and disc.get("variance_fraction") is not None:
        lines.append(f"  discarded {num(100 * disc['variance_fraction'], 3)}% of the variance")
    choice = record.get("plan_choice")
    if choice:
        plans = {row["plan_id"]: row for row in record.get("alternatives", [])}
        taken = plans.get(choice["chosen"], {})
        what = (f"{taken.get('size')} original feature(s)" if choice["chosen"] != "components"
                else f"{taken.get('size')} component(s)")
        share = taken.get("variance_retained")
        kept = f", {num(100 * share, 3)}% of the variance kept" if share is not None else ""
        note = "" if choice["chosen"] == choice["recommended"] else f" (recommended: {choice['recommended']})"
        lines.append(f"  plan      {choice['chosen']}: {what}{kept}{note}")
    for label, path in (paths or {}).items():
        lines.append(f"  {label:<9} {path}")
    return "\n".join(lines)
