"""cubage's engine: adaptive cubature over boxes, unbounded boxes and simplices.

Public API::

    from cubature import Box, Simplex, integrate, Run
    res = integrate(lambda X: np.exp(-(X**2).sum(1)), Box([-1, -1], [1, 1]), rel_tol=1e-8)
    res.value, res.error, res.status

See :func:`integrate` and :class:`Run` (steppable, observable, stoppable,
resumable via checkpoints).  Error estimates are heuristic, not bounds.
"""

from .checkpoint import CheckpointError
from .domains import Box, DomainError, Simplex
from .engine import (DEFAULT_MAX_EVALS, STATUSES, IntegrandError, Result, Run, Settings, Snapshot, TopRegion,
                     integrate)

__version__ = "0.1.0"

__all__ = ["Box", "Simplex", "DomainError", "integrate", "Run", "Result", "Snapshot", "TopRegion", "Settings",
           "IntegrandError", "CheckpointError", "STATUSES", "DEFAULT_MAX_EVALS", "__version__"]
