"""Fit rate constants to observed single-cell distributions by ABC-SMC, on the sweep engine.

``sweep.fit.spec`` loads a fit spec and its data, ``sweep.fit.smc`` holds the procedure's
arithmetic, ``sweep.fit.loop`` the rounds and stop rules, ``sweep.fit.engine`` runs each batch
of candidates as a sweep, ``sweep.fit.records`` keeps what each batch and round found,
``sweep.fit.driver`` ties them together; ``summary``, ``figures``, ``estimate`` and
``synthetic`` report, draw, cost and make demo data. See docs/fit.md.
"""

from typing import TYPE_CHECKING

from sweep import lazy

_NAMES = {
    "FitSpec": "sweep.fit.spec",
    "load": "sweep.fit.spec",
    "FitSummary": "sweep.fit.driver",
    "run": "sweep.fit.driver",
}
__all__ = sorted(_NAMES)
__getattr__, __dir__ = lazy.exports(__name__, _NAMES)

if TYPE_CHECKING:
    from sweep.fit.driver import FitSummary, run
    from sweep.fit.spec import FitSpec, load
