"""Walltime awareness for shards: start a task only if it will finish before the job's end.

A batch job is killed at its time limit, mid-task if unlucky. A shard instead asks before
every task whether the time left covers the next one: its estimate is the longest task so
far or ``SAFETY_FACTOR`` times the mean, whichever is larger, plus ``RESERVE_SECONDS`` to
record, release the claim and exit. When it does not, the shard stops and leaves the rest
to a resubmission (``sweep run`` exits with ``EXIT_WALLTIME``).

The time left comes from, in order: ``--time-left`` (tests, or runs outside Slurm);
``SLURM_JOB_END_TIME`` (the job's end as a Unix time; set by Slurm 23.02 and later);
``squeue -h -j $SLURM_JOB_ID -o %L`` (older Slurm). Without any of them there is no limit.
"""

from __future__ import annotations

import os
import re
import time
from dataclasses import dataclass, field
from typing import Callable, Mapping

from sweep.batch import jobs

SAFETY_FACTOR = 1.5
RESERVE_SECONDS = 5.0
EXIT_WALLTIME = 75  # sysexits.h EX_TEMPFAIL: "temporary failure; the user is invited to retry"

_DURATION = re.compile(r"^(?:(\d+)-)?(\d+)(?::(\d+))?(?::(\d+))?$")


def parse_duration(text: str) -> float:
    """Seconds in ``text``: plain seconds (``"90"``, ``"12.5"``) or Slurm's ``[D-]HH:MM:SS`` / ``MM:SS``.

    Raises
    ------
    ValueError
        If ``text`` is neither.

    Example
    -------
    >>> parse_duration("1-00:00:30"), parse_duration("2:05"), parse_duration("90")
    (86430.0, 125.0, 90.0)
    """
    text = text.strip()
    try:
        seconds = float(text)
    except ValueError:
        seconds = None
    if seconds is not None:
        if seconds < 0 or seconds != seconds:
            raise ValueError(f"{text!r}: a duration cannot be negative")
        return seconds
    m = _DURATION.match(text)
    if not m or m[3] is None:
        raise ValueError(f"{text!r}: not a duration; give seconds (90) or [D-]HH:MM:SS, HH:MM:SS or MM:SS")
    days = int(m[1] or 0)
    parts = [int(p) for p in m.group(2, 3, 4) if p is not None]
    if len(parts) == 2:  # D-HH:MM with days, else MM:SS (as squeue prints a short time left)
        parts = [*parts, 0] if m[1] is not None else [0, *parts]
    hours, minutes, secs = parts
    return float(((days * 24 + hours) * 60 + minutes) * 60 + secs)


def time_left(env: Mapping[str, str] | None = None, now: float | None = None) -> float | None:
    """Seconds until this Slurm job's time limit, or None outside Slurm (or without a limit)."""
    env = os.environ if env is None else env
    now = time.time() if now is None else now
    end = env.get("SLURM_JOB_END_TIME", "")
    if end.isdigit() and int(end) > 0:
        return max(0.0, int(end) - now)
    job = jobs.job_id(env)
    if not job:
        return None
    try:
        return parse_duration(jobs.time_left_text(job))
    except ValueError:
        return None  # UNLIMITED, NOT_SET, INVALID, or the job is unknown


@dataclass
class Budget:
    """Whether the next task fits in the time left; ``deadline`` is on ``clock``'s scale (None: no limit)."""

    deadline: float | None
    clock: Callable[[], float] = time.monotonic
    seconds: list[float] = field(default_factory=list)

    @classmethod
    def starting_now(cls, left: float | None, clock: Callable[[], float] = time.monotonic) -> Budget:
        return cls(None if left is None else clock() + left, clock)

    def record(self, seconds: float) -> None:
        """One task took ``seconds`` (its simulation and its write)."""
        self.seconds.append(seconds)

    def estimate(self) -> float:
        """Seconds the next task is expected to need, reserve included (0 before any task ran)."""
        if not self.seconds:
            return RESERVE_SECONDS
        mean = sum(self.seconds) / len(self.seconds)
        return max(SAFETY_FACTOR * mean, max(self.seconds)) + RESERVE_SECONDS

    def left(self) -> float | None:
        return None if self.deadline is None else self.deadline - self.clock()

    def next_fits(self) -> bool:
        left = self.left()
        return left is None or left >= self.estimate()
