"""What-if tools on a plan: sweeps, tolerance runs, corners, design to a target.

Each one solves through :func:`.sweeps.solve_table`: one compiled circuit, the batched solver and
the vectorised analyses, never a Python loop of ``plan.solve()``. The thin methods
:meth:`ampplan.Plan.sweep`, :meth:`~ampplan.Plan.tolerance`, :meth:`~ampplan.Plan.corners` and
:meth:`~ampplan.Plan.design` call them.
"""

from .extremes import Corner, CornersResult, corners
from .targets import DesignResult, design
from .runs import ToleranceResult, ToleranceSample, tolerance
from .sweeps import PlanSweep, sweep

__all__ = ["PlanSweep", "sweep", "ToleranceResult", "ToleranceSample", "tolerance", "Corner", "CornersResult",
           "corners", "DesignResult", "design"]
