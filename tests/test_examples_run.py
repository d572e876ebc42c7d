"""Every shipped example problem, run through the engine, reaches its goal and lands near its reference.

The reference values themselves are checked independently (closed forms and
mpmath / scipy) in tests/test_problem_references.py; here the engine must
reach the file's goal within the file's budget (a new user's first runs), and
its answer must agree with the reference to within ten times the requested
tolerance (the factor because error estimates are heuristic, not bounds).
"""

import numpy as np
import pytest

from cubage.problem.problem_file import bundled_problem_dir, list_problems, load_problem

engine = pytest.importorskip("cubage.engine.run")
import cubage  # noqa: E402

FILES = list_problems([bundled_problem_dir()])


@pytest.mark.parametrize("path", FILES, ids=[f.stem for f in FILES])
def test_example_lands_near_reference(path):
    p = load_problem(path)
    assert p.reference is not None
    kwargs = dict(rel_tol=p.goal.rel_tol, abs_tol=p.goal.abs_tol, rule=p.method.rule)
    if p.goal.budget is not None:
        kwargs["budget"] = p.goal.budget
    if p.method.degree is not None:
        kwargs["degree"] = p.method.degree
    res = cubage.integrate(p.integrand, p.domain, **kwargs)
    # the example reaches its own goal (the 4-ball volume spent its budget at rel_tol 1e-2 once the estimate became
    # honest about the regions the sphere cuts)
    assert res.status == "converged", (path.stem, res.status, res.error)
    ref = np.atleast_1d(np.asarray(p.reference.value, dtype=float))
    got = np.atleast_1d(np.asarray(res.value, dtype=float))
    assert got.shape == ref.shape
    # reference: the [reference] value of the file, source named in its `source` key
    allowed = np.maximum(p.goal.abs_tol, p.goal.rel_tol * np.abs(ref)) * 10
    assert np.all(np.abs(got - ref) <= allowed), (path.stem, got, ref, allowed, res.status)
