"""Honest estimates on simplices next to singular faces (issue 12): x0^-p on the standard simplex.

Reference values: Dirichlet's integral over the standard d-simplex, int x0^(a - 1) = Gamma(a) / Gamma(a + d)
(Whittaker & Watson, *A Course of Modern Analysis*, section 12.5), here with a = 1 - p.  The per-crossing
retention 2^(p - 1): int_0^h t^-p dt = h^(1 - p) / (1 - p), so halving a region's distance to the face leaves
2^(p - 1) of what it held (by hand).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

import cubage
from cubage.engine import estimate as E
from cubage.engine.rules.grundmann_moller import bisect_simplices


def _standard(d: int) -> cubage.Simplex:
    return cubage.Simplex(np.vstack([np.zeros(d), np.eye(d)]))


def _face_lineage(d: int, splits: int) -> str:
    """The kinds of split along one lineage of regions holding a facet on x0 = 0 under longest-edge bisection
    of the standard d-simplex: 'X' crosses the face (one vertex on it, one off), 'f' lies in it.  Where both
    children hold a facet on the face, the lineage takes each in turn."""
    v = np.vstack([np.zeros(d), np.eye(d)])[None]
    kinds = ""
    for step in range(splits):
        kids, edges = bisect_simplices(v)
        on = v[0, :, 0] == 0
        a, b = edges[0]
        kinds += "f" if on[a] and on[b] else "X"
        face = [i for i in range(2) if (kids[i, :, 0] == 0).sum() == d]
        v = kids[[face[step % len(face)]]]
    return kinds


def test_splits_along_a_face_come_unevenly():
    """The premise of the fix: in 3-D a face lineage's crossings are not one in every three consecutive splits
    (windows counted in splits then held 0, 1 or 2 of them)."""
    kinds = _face_lineage(3, 24)
    counts = {kinds[i:i + 3].count("X") for i in range(len(kinds) - 2)}
    assert counts != {1}


@pytest.mark.parametrize("d", [2, 3, 4])
def test_lineage_tail_of_a_face_lineage_counts_measured_splits(d):
    """A face lineage of the standard simplex, split by split: a split in the face halves the region's error
    between two affine images (D exactly 0, shares 1/2); one across it leaves alpha and beta of it (q = alpha +
    beta per crossing).  The errors are known by construction; with the splits that measured nothing left out of
    the window, the tail is each child's error exactly after two crossings, whatever their spacing.  Counted in
    splits (every split an entry), the 3-D lineage's tail missed the error on most steps."""
    alpha, beta = 0.6, 0.333                        # q = 0.933 = 2^-0.1 (x0^-0.9)
    kinds = _face_lineage(d, 8 * d)
    for skip in (True, False):
        window = np.full((1, 2 * d, 1), np.nan)
        err, crossings, exact, missed = 1.0, 0, 0, 0
        for kind in kinds:
            kids = np.array([alpha, beta]) * err if kind == "X" else np.array([0.5, 0.5]) * err
            D = np.array([[err - kids.sum()]])      # the children's errors less the parent's (signed)
            share = (kids / kids.sum())[:, None, None]
            measured = np.array([[kind == "X"]]) if skip else None
            full, children = E.lineage_windows(-D, window, share, measured)
            crossings += kind == "X"
            if crossings >= 2:
                rho = np.repeat(E.split_ratio(full, d), 2, axis=0) ** np.maximum(E.lineage_cycles(children, d)[2], 1)
                tails = E.lineage_tail(children, rho, d)[:, 0]
                if np.allclose(tails, kids):
                    exact += 1
                elif np.any(tails < 0.9 * kids):
                    missed += 1
            window, err = children[:1], kids[0]     # follow the child holding the face
        if skip:
            assert missed == 0 and exact == len(kinds) - kinds.index("X", kinds.index("X") + 1)
        elif d == 3:
            assert missed > 0


@pytest.mark.parametrize("d, p", [(2, 0.9), (3, 0.9), (4, 0.9), (3, 0.8), (4, 0.5)])
def test_face_singularity_reports_an_error_above_the_true_one(d, p):
    """Issue 12 item 6: x0^-0.9 on a face of the 3-D and 4-D simplex reported 0.55x and 0.65x of its true error at
    2e5 evaluations (0.61x and 0.43x at 2e6): the regions along the face had windows of exact zeros.  Budget
    spent, never converged, and the reported error must cover the true one."""
    exact = math.gamma(1 - p) / math.gamma(1 - p + d)           # Dirichlet (Whittaker & Watson 12.5)
    res = cubage.integrate(lambda X: X[:, 0] ** -p, _standard(d), rel_tol=1e-6, budget=200_000,
                           raise_on_failure=False)
    assert not res.converged
    assert abs(res.value - exact) <= res.error


@pytest.mark.parametrize("d, p", [(3, 0.9), (4, 0.5)])
def test_learnt_face_ratio_is_the_retention_per_crossing(d, p):
    """The class's per-split ratio of a face lineage measures what each crossing of the face leaves, 2^(p - 1)
    (by hand, see the module's docstring): 0.933 for p = 0.9, 0.707 for p = 1/2.  Counted per cycle of d splits
    it read 0.76 for p = 0.9 in 3-D."""
    run = cubage.Run(lambda X: X[:, 0] ** -p, _standard(d), rel_tol=1e-6, budget=200_000)
    run.run()
    c = run.checks
    learnt = c["lineage_weighted"][0] / c["lineage_weight"][0]
    assert learnt == pytest.approx(2.0 ** (p - 1), abs=0.04)


@pytest.mark.parametrize("d, p", [(2, 0.5), (3, 0.5), (4, 0.5), (4, 0.25), (3, 0.9), (4, 0.9)])
def test_face_singularity_at_a_loose_goal_claims_no_convergence_beyond_it(d, p):
    """Issue 12: at rel_tol 3e-2 x0^-1/2 converged 2.2x (3-D) and 3.1x (4-D) beyond its goal, before any face
    lineage was deep (the class's ratio counted only the splits that measured something: 9 of the 16 it
    needs in 4-D).  A run may stop early, but what it reports must hold (Dirichlet's formula, as above)."""
    tol = 3e-2
    exact = math.gamma(1 - p) / math.gamma(1 - p + d)
    res = cubage.integrate(lambda X: X[:, 0] ** -p, _standard(d), rel_tol=tol, budget=200_000,
                           raise_on_failure=False)
    true = abs(res.value - exact)
    assert not (res.converged and true > 2 * tol * exact)
    assert true <= res.error


@pytest.mark.parametrize("d, p, tol", [(2, 0.7, 1e-1), (2, 0.8, 1e-1), (2, 0.9, 1e-1), (3, 0.8, 1e-1),
                                       (4, 0.25, 1e-2)])
def test_simplex_cycle_audit_reads_the_lineage(d, p, tol):
    """Issue 12 item 5: an audit through a cycle of d bisections measures what one crossing of the face removes,
    1 - 2^(p - 1) of a region's error (7 % for p = 0.9), and passed where the regions' estimates covered that
    alone: x0^-0.9 on the 2-D simplex at rel_tol 1e-1 converged after 589 evaluations 6.2x beyond its goal,
    x0^-0.8 in 3-D 4.2x, x0^-1/4 in 4-D at 1e-2 2.6x.  The audit now compares the parent's estimate with what
    its lineage says it held.  Dirichlet's formula, as above."""
    exact = math.gamma(1 - p) / math.gamma(1 - p + d)
    res = cubage.integrate(lambda X: X[:, 0] ** -p, _standard(d), rel_tol=tol, budget=200_000,
                           raise_on_failure=False)
    assert not (res.converged and abs(res.value - exact) > 2 * tol * exact)
