"""Tests marked ``slurm`` run against a real Slurm controller, whenever one answers.

CI starts a single-node Slurm with ``tests/slurm/start_cluster.sh`` (as root, from ``.ci/run``).
Where no controller answers ``scontrol ping``, these tests are skipped and say why.
"""

from __future__ import annotations

import functools
import shutil
import subprocess

import pytest


@functools.cache
def slurm_missing() -> str | None:
    """Why Slurm cannot be used here, or None when a controller answers."""
    if shutil.which("scontrol") is None or shutil.which("sbatch") is None:
        return "Slurm is not installed (start one with `bash tests/slurm/start_cluster.sh`, as root)"
    try:
        ping = subprocess.run(["scontrol", "ping"], capture_output=True, text=True, timeout=20)
    except (OSError, subprocess.SubprocessError) as exc:
        return f"`scontrol ping` failed: {exc}"
    if "is UP" not in ping.stdout:
        return ("no Slurm controller answers `scontrol ping` "
                "(start one with `bash tests/slurm/start_cluster.sh`, as root)")
    return None


def pytest_collection_modifyitems(config, items):
    reason = None
    for item in items:
        if "slurm" in item.keywords:
            reason = reason or slurm_missing()
            if reason:
                item.add_marker(pytest.mark.skip(reason=reason))
