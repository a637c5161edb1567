"""Before a run: size a sweep and estimate its cost (``estimate``), run an exact method beside an
approximate one (``compare``, ``sweep plan --compare-methods``), and measure kernels (``bench``)
and whole sweeps (``throughput``, ``sweep bench --sweep``)."""

from typing import TYPE_CHECKING

from sweep import lazy

_NAMES = {
    "CALIBRATION_KEY": "sweep.plan.estimate",
    "MAX_BYTES": "sweep.plan.estimate",
    "MAX_TASKS": "sweep.plan.estimate",
    "STARTUP_SECONDS": "sweep.plan.estimate",
    "Plan": "sweep.plan.estimate",
    "Size": "sweep.plan.estimate",
    "limits": "sweep.plan.estimate",
    "method_advice": "sweep.plan.estimate",
    "plan": "sweep.plan.estimate",
    "size": "sweep.plan.estimate",
    "write_trial": "sweep.plan.estimate",
}
__all__ = sorted(_NAMES)
__getattr__, __dir__ = lazy.exports(__name__, _NAMES)

if TYPE_CHECKING:  # what type checkers and IDEs see
    from sweep.plan.estimate import (CALIBRATION_KEY, MAX_BYTES, MAX_TASKS, STARTUP_SECONDS, Plan, Size, limits,
                                     method_advice, plan,
                                     size, write_trial)
