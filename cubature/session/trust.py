"""The engine's trust checks of a result, in words (issue 12 item 5).

The checks themselves are the engine's (``Result.trust``, a JSON-ready dict,
copied into the result record); this module only words them, once for both
front ends: one short line (the UI's read-out, the command line's summary)
and a few lines of details (the UI's notes, the summary).  Nothing here may fail: an
unexpected shape reads as "no trust report".
"""

from __future__ import annotations

import math

#: Said wherever an error estimate is shown.
HEURISTIC = "error estimates are heuristic, not guaranteed bounds"

#: The share of the error estimate flagged regions must hold for a summary to list them.
SHOWN_SHARE = 0.01


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
            share = float(trust.get("flagged_error_share") or 0.0)
            parts.append(f"non-smooth {share:.0%}" if share >= 0.005 else "non-smooth <1%")
        else:
            parts.append(f"{int(trust.get('disagreed') or 0)} splits corrected")
        return " · ".join(parts)
    except (TypeError, ValueError, AttributeError):
        return ""


def _bounds(lo, hi, names) -> str:
    out = []
    for k, (a, b) in enumerate(zip(lo, hi)):
        n = names[k] if k < len(names) else f"x{k}"
        if not (math.isfinite(a) and math.isfinite(b)):
            out.append(f"{n}∈[{a},{b}]")
            continue
        digits = 4      # enough digits to tell the ends of a narrow region apart
        while digits < 17 and f"{a:.{digits}g}" == f"{b:.{digits}g}" and a != b:
            digits += 1
        out.append(f"{n}∈[{a:.{digits}g},{b:.{digits}g}]")
    return " ".join(out)


def _count(n, word: str) -> str:
    n = int(n or 0)
    return f"{n:,} {word}{'' if n == 1 else 's'}"


def _checks_text(trust: dict) -> str:
    return (f"audit {trust.get('audit', 'not run')} ({_count(trust.get('audits'), 'audit')}, "
            f"{_count(trust.get('audit_regions'), 'region')}, {_count(trust.get('audit_evaluations'), 'evaluation')}); "
            f"{int(trust.get('disagreed') or 0):,} of {_count(trust.get('splits'), 'split')} "
            f"disagreed with their parent and were corrected; {int(trust.get('lower_closer') or 0):,} looked "
            "non-asymptotic")


def _worst_text(w: dict, names) -> str:
    sig = ", ".join(str(s) for s in (w.get("signatures") or [])) or "flagged"
    return (f"{_bounds(w.get('lower', []), w.get('upper', []), names)}, error {float(w.get('error', math.nan)):.2e} "
            f"({sig})")


def trust_details(trust: dict | None, names: list[str]) -> list[str]:
    """Lines for the notes: the audit's cost, the corrected splits, and where the worst flagged regions are."""
    if not trust:
        return []
    try:
        lines = ["trust checks: " + _checks_text(trust)]
        lines += ["non-smooth region " + _worst_text(w, names) for w in trust.get("worst") or []]
        lines.append(str(trust.get("note") or HEURISTIC))
        return lines
    except (TypeError, ValueError, AttributeError):
        return []


def trust_rows(trust: dict | None, names, most: int = 3) -> list[tuple[str, str]]:
    """(label, text) rows for a plain summary: the checks in a few words and in full, then the worst flagged
    regions (at most ``most``, and only when they hold :data:`SHOWN_SHARE` of the error); none without a
    trust report."""
    line = trust_line(trust)
    if not line:
        return []
    try:
        rows = [("checks", f"{line}: {_checks_text(trust)}")]
        # regions holding a negligible share of the error are in the JSON result, not worth a line here
        share = float(trust.get("flagged_error_share") or 0.0)
        worst = list(trust.get("worst") or []) if share >= SHOWN_SHARE else []
        rows += [("non-smooth", _worst_text(w, names)) for w in worst[:most]]
        if len(worst) > most:
            rows.append(("", f"(and {len(worst) - most} more in the JSON result)"))
        return rows
    except (TypeError, ValueError, AttributeError):
        return []
