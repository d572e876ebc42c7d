"""cubage's engine: adaptive cubature over boxes, unbounded boxes and simplices.

Public API::

    from cubage import Box, Simplex, integrate, Run
    res = integrate(lambda X: np.exp(-(X**2).sum(1)), Box([-1, -1], [1, 1]), rel_tol=1e-8)
    res.value, res.error, res.status

See :func:`integrate` and :class:`Run` (steppable, observable, stoppable,
resumable via checkpoints).  Error estimates are heuristic, not bounds.

The names are loaded on first use (a module ``__getattr__``, PEP 562), so
that ``import cubage.cli`` and ``cubage --help`` start without importing
numpy and the engine.
"""

from __future__ import annotations

import importlib

__version__ = "0.1.0"

#: public name -> module that defines it
_WHERE = {
    "CheckpointError": "cubage.engine.checkpoint",
    "Box": "cubage.engine.domains", "DomainError": "cubage.engine.domains", "Simplex": "cubage.engine.domains",
    "DEFAULT_BUDGET": "cubage.engine.run", "STATUSES": "cubage.engine.statuses", "IntegrandError": "cubage.engine.run",
    "Result": "cubage.engine.run", "Run": "cubage.engine.run", "Settings": "cubage.engine.run",
    "Snapshot": "cubage.engine.run", "TopRegion": "cubage.engine.run", "integrate": "cubage.engine.run",
    "scan": "cubage.session.scan", "ScanResult": "cubage.session.scan", "PointResult": "cubage.session.scan",
}

__all__ = ["Box", "Simplex", "DomainError", "integrate", "Run", "Result", "Snapshot", "TopRegion", "Settings",
           "IntegrandError", "CheckpointError", "STATUSES", "DEFAULT_BUDGET", "scan", "ScanResult", "PointResult",
           "__version__"]


def __getattr__(name: str):
    mod = _WHERE.get(name)
    if mod is None:
        raise AttributeError(f"module 'cubage' has no attribute {name!r}")
    value = getattr(importlib.import_module(mod), name)
    globals()[name] = value
    return value


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(__all__))
