"""Region flags: the signatures a region carries in its ``flags`` column (a uint8), read by the run, every
check and the warm start of scans (:mod:`cubage.session.scan`), and the signature words of the trust report.

A leaf module (it imports nothing) so that :mod:`cubage.engine.run` and each check module can import it."""

from __future__ import annotations

#: Region flags (a uint8 column): the signatures the trust report counts and locates.
FLAG_NON_ASYMPTOTIC = 1   # the rule differences do not shrink with degree
FLAG_DISAGREED = 2        # made by a split whose children disagreed with the parent beyond its estimate
FLAG_LOWER_CLOSER = 4     # made by a split where the parent's lower-degree rule was closer than the rule
FLAG_AUDITED = 8          # made by an audit split
FLAG_PROBE = 16           # values near a vertex disagreed with the rule's nodes (a feature where no node lies)
FLAG_WARY = 32            # child of a region with a non-smooth signature (its estimate gets the learnt factor)
FLAG_WATCH = 64           # descendant of a non-smooth region, not yet cleared by vertex probes (its children are)
FLAG_PROBED = 128         # its vertices were probed and agreed with its nodes
_SIGNATURES = ((FLAG_DISAGREED, "parent and children disagreed beyond the estimate"),
               (FLAG_PROBE, "values near a vertex disagree with the nodes (jump or kink between them)"),
               (FLAG_LOWER_CLOSER, "lower-degree rule closer than the rule"),
               (FLAG_NON_ASYMPTOTIC, "rule differences not shrinking with degree"))

_NON_SMOOTH = FLAG_DISAGREED | FLAG_LOWER_CLOSER | FLAG_NON_ASYMPTOTIC | FLAG_PROBE
