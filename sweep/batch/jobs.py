"""Every question the tool asks Slurm about jobs, in one place (``squeue``).

- ``job_id``: this process's job, as ``squeue -j`` names it (the lock records it);
- ``is_gone``: whether a job that holds a store's lock has ended (the lock's staleness test);
- ``time_left_text``: the time limit left, as ``squeue`` prints it (walltime);
- ``queued_ids``: this user's jobs still queued or running (the Slurm cluster's job watch).

Each answers None when Slurm cannot say (no ``squeue`` here, or it hangs or errs): callers then
decide as if they did not know, never as if the job had ended.
"""

from __future__ import annotations

import asyncio
import getpass
import os
import subprocess
from typing import Mapping

TIMEOUT_SECONDS = 30

_LIVE_STATES = {"RUNNING", "COMPLETING", "CONFIGURING", "SUSPENDED", "STOPPED", "RESIZING", "SIGNALING",
                "STAGE_OUT", "REQUEUED", "PENDING", "REQUEUE_HOLD", "REQUEUE_FED"}


def job_id(env: Mapping[str, str] | None = None) -> str:
    """This Slurm job as ``squeue -j`` names it ("" outside Slurm).

    An array element is ``<array job>_<index>``: its own ``SLURM_JOB_ID`` is not enough, since
    the last element's equals the array's id, which ``squeue -j`` expands to every element.
    """
    env = os.environ if env is None else env
    array, index = env.get("SLURM_ARRAY_JOB_ID", ""), env.get("SLURM_ARRAY_TASK_ID", "")
    return f"{array}_{index}" if array and index else env.get("SLURM_JOB_ID", "")


def _squeue(*args: str) -> subprocess.CompletedProcess | None:
    try:
        return subprocess.run(["squeue", "-h", *args], capture_output=True, text=True, timeout=TIMEOUT_SECONDS)
    except (OSError, subprocess.SubprocessError):
        return None


def is_gone(job: str) -> bool | None:
    """True if ``job`` ended, False if it still runs or waits, None if Slurm cannot say.

    A job id is never reused while Slurm still lists the job, so a job it lists as ended (or
    no longer knows: it forgets finished jobs after ``MinJobAge``) cannot hold anything.
    """
    out = _squeue("-t", "all", "-j", job, "-o", "%T")
    if out is None:
        return None
    if out.returncode != 0:
        return True if "Invalid job id" in out.stderr else None
    return not (set(out.stdout.split()) & _LIVE_STATES)


def time_left_text(job: str) -> str:
    """``squeue``'s time left of ``job`` (``D-HH:MM:SS``, ``UNLIMITED``, ...); "" if it cannot say."""
    out = _squeue("-j", job, "-o", "%L")
    return (out.stdout.split() or [""])[0] if out is not None else ""


async def queued_ids() -> set[str] | None:
    """Ids of this user's jobs still in Slurm's queue (pending, running, completing), or None on error."""
    try:
        proc = await asyncio.create_subprocess_exec(
            "squeue", "-h", "-o", "%i", "-u", getpass.getuser(),
            stdout=asyncio.subprocess.PIPE, stderr=asyncio.subprocess.PIPE)
        out, _ = await asyncio.wait_for(proc.communicate(), timeout=2 * TIMEOUT_SECONDS)
    except (OSError, asyncio.TimeoutError):
        return None
    return set(out.decode().split()) if proc.returncode == 0 else None
