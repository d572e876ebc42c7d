"""cubage's engine: adaptive cubature over boxes, unbounded boxes and simplices.

Public API::

    from cubage import Box, Simplex, integrate, Run
    res = integrate(lambda X: np.exp(-(X**2).sum(1)), Box([-1, -1], [1, 1]), rel_tol=1e-8)
    res.value, res.error, res.status

See :func:`integrate` and :class:`Run` (steppable, observable, stoppable,
resumable via checkpoints).  Error estimates are heuristic, not bounds.
"""

from cubage.engine.checkpoint import CheckpointError
from cubage.engine.domains import Box, DomainError, Simplex
from cubage.engine.run import (
                     DEFAULT_BUDGET,
                     STATUSES,
                     IntegrandError,
                     Result,
                     Run,
                     Settings,
                     Snapshot,
                     TopRegion,
                     integrate,
)
from cubage.session.scan import PointResult, ScanResult, scan

__version__ = "0.1.0"

__all__ = ["Box", "Simplex", "DomainError", "integrate", "Run", "Result", "Snapshot", "TopRegion", "Settings",
           "IntegrandError", "CheckpointError", "STATUSES", "DEFAULT_BUDGET", "scan", "ScanResult", "PointResult",
           "__version__"]
