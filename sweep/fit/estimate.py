"""``sweep fit --dry-run``: the cost of a fit, from a calibration like ``sweep plan``'s.

The round-0 batch (``particles`` draws from the prior, under every condition) is calibrated with
``sweep.plan.estimate.plan``: seconds per candidate. Later rounds cannot be known before they run;
the estimate assumes a round-t acceptance of ``quantile x 0.75^(t-1)`` (a rule of thumb: each
tighter tolerance accepts a little less), not below ``min_acceptance``, for ``max_rounds`` rounds,
capped by ``max_simulations``. It is an order of magnitude, stated as such.
"""

from __future__ import annotations

import tempfile
from dataclasses import dataclass
from pathlib import Path

from sweep.fit import smc
from sweep.fit.spec import FitSpec

DECAY = 0.75


@dataclass(frozen=True)
class Cost:
    seconds_per_candidate: float
    candidates: tuple[int, ...]  # expected per round
    simulations: int
    seconds: float
    workers: int
    calibration_seconds: float


def estimate(fit: FitSpec, workers: int, seconds: float = 3.0) -> Cost:
    import sweep
    from sweep.fit.engine import SweepEvaluator
    from sweep.plan.estimate import plan

    s = fit.settings
    theta, _, _ = smc.propose(fit.prior, None, s.seed, 0, 0, s.particles)
    with tempfile.TemporaryDirectory(prefix="sweep-fit-plan-") as tmp:
        folder = Path(tmp)
        table = SweepEvaluator.table(_Table(fit), theta)
        (folder / "points.csv").write_text(table, encoding="utf-8")
        (folder / "spec.toml").write_text(fit.batch_text(smc.batch_seed(s.seed, 0, 0), folder / "x.zarr",
                                                         "points.csv"), encoding="utf-8")
        p = plan(sweep.load(folder / "spec.toml"), workers=workers, seconds=seconds)
    per_candidate = max(p.seconds - 0.0, 0.0) / s.particles * workers  # worker-seconds per candidate
    counts = [s.particles]
    for t in range(1, s.max_rounds):
        rate = max(s.quantile * DECAY ** (t - 1), s.min_acceptance or 0.0, 1e-3)
        counts.append(int(round(s.particles / rate)))
    per = fit.sweep.replicates * len(fit.conditions)
    kept, total = [], 0
    for c in counts:
        if s.max_simulations is not None and (total + c) * per > s.max_simulations:
            kept.append(max(0, s.max_simulations // per - total))
            break
        kept.append(c)
        total += c
    total = sum(kept)
    return Cost(per_candidate, tuple(kept), total * per, total * per_candidate / workers, workers,
                p.calibration_seconds)


class _Table:
    """Just what ``SweepEvaluator.table`` reads."""

    def __init__(self, fit: FitSpec):
        self.fit = fit
