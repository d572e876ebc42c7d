"""The engine's trust checks of a result, as the run view shows them (issue 12 item 5).

The checks themselves are the engine's (``Result.trust``, a JSON-ready dict,
copied into the result record); this module only words them: one short line
for the read-out and a few lines for the notes.  Nothing here may fail: an
unexpected shape reads as "no trust report".
"""

from __future__ import annotations

import math

#: Said wherever an error estimate is shown.
HEURISTIC = "error estimates are heuristic, not guaranteed bounds"


def trust_of(result) -> dict | None:
    """The trust dict of an engine Result, a result record (dict) or None; None when absent or empty."""
    t = result.get("trust") if isinstance(result, dict) else getattr(result, "trust", None)
    if callable(t):
        try:
            t = t()
        except Exception:  # noqa: BLE001 - display code never raises
            return None
    return t if isinstance(t, dict) and t else None


def _audit_word(audit: str) -> str:
    a = str(audit)
    if a.startswith("passed"):
        return "audit ok"
    if a.startswith("failed"):
        return "audit failed"
    if a.startswith("not run"):
        return "no audit"
    return "audit: " + a[:20]


def trust_line(trust: dict | None) -> str:
    """A few words for the read-out: ``audit ok · smooth`` or ``no audit · non-smooth 85%`` (of the error)."""
    if not trust:
        return ""
    try:
        parts = [_audit_word(trust.get("audit", "not run"))]
        if trust.get("smooth", False):
            parts.append("smooth")
        elif int(trust.get("flagged_regions") or 0):
            parts.append(f"non-smooth {float(trust.get('flagged_error_share') or 0.0):.0%}")
        else:
            parts.append(f"{int(trust.get('disagreed') or 0)} splits corrected")
        return " · ".join(parts)
    except (TypeError, ValueError, AttributeError):
        return ""


def _bounds(lo, hi, names) -> str:
    out = []
    for k, (a, b) in enumerate(zip(lo, hi)):
        n = names[k] if k < len(names) else f"x{k}"
        out.append(f"{n}∈[{a:.4g},{b:.4g}]" if math.isfinite(a) and math.isfinite(b) else f"{n}∈[{a},{b}]")
    return " ".join(out)


def trust_details(trust: dict | None, names: list[str]) -> list[str]:
    """Lines for the notes: the audit's cost, the corrected splits, and where the worst flagged regions are."""
    if not trust:
        return []
    try:
        lines = [f"trust checks: audit {trust.get('audit', 'not run')} ({int(trust.get('audits') or 0)} audits, "
                 f"{int(trust.get('audit_regions') or 0):,} regions, {int(trust.get('audit_evaluations') or 0):,} "
                 f"evaluations); {int(trust.get('disagreed') or 0):,} of {int(trust.get('splits') or 0):,} splits "
                 f"disagreed with their parent and were corrected; {int(trust.get('lower_closer') or 0):,} looked "
                 "non-asymptotic"]
        for w in trust.get("worst") or []:
            sig = ", ".join(str(s) for s in (w.get("signatures") or [])) or "flagged"
            lines.append(f"non-smooth region ({sig}), error {float(w.get('error', math.nan)):.2e}: "
                         f"{_bounds(w.get('lower', []), w.get('upper', []), names)}")
        lines.append(str(trust.get("note") or HEURISTIC))
        return lines
    except (TypeError, ValueError, AttributeError):
        return []
