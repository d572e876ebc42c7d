"""Every shipped example problem, run through the engine, lands near its reference.

The reference values themselves are checked independently (closed forms and
mpmath / scipy) in tests/test_problem_references.py; here the engine's answer
must agree with them to within ten times the requested tolerance (the factor
because error estimates are heuristic, not bounds).
"""

import time

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
    t0 = time.perf_counter()
    res = cubage.integrate(p.integrand, p.domain, **kwargs)
    elapsed = time.perf_counter() - t0
    ref = np.atleast_1d(np.asarray(p.reference.value, dtype=float))
    got = np.atleast_1d(np.asarray(res.value, dtype=float))
    assert got.shape == ref.shape
    # reference: the [reference] value of the file, source named in its `source` key
    allowed = np.maximum(p.goal.abs_tol, p.goal.rel_tol * np.abs(ref)) * 10
    assert np.all(np.abs(got - ref) <= allowed), (path.stem, got, ref, allowed, res.status, elapsed)
    assert elapsed < 60, (path.stem, elapsed)
