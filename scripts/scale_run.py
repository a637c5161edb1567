"""A sweep of many tiny tasks, end to end: wall time, the client's peak memory, a kill and its resume.

Writes a Latin hypercube of N points of a birth-death process x 10 short replicates (one
(point, block) task per point before packing), then:

1. runs `sweep run` in a subprocess on a local cluster and polls the client's memory (VmHWM,
   the kernel's record of its peak resident set) and the Dask dashboard while it runs;
2. with ``--kill-after S``: SIGKILLs a second, fresh run S seconds in, times how long reading
   the completion record and listing the remaining tasks takes (what a resume does first), then
   resumes it with the same command and checks that the resumed store's bytes equal the first
   run's.

Prints one JSON line per run. Measures the sweep, not the machine: run it alone.

    python scripts/scale_run.py --points 100000 --kill-after 60
"""

from __future__ import annotations

import argparse
import hashlib
import json
import os
import re
import signal
import subprocess
import sys
import tempfile
import textwrap
import threading
import time
import urllib.request
from pathlib import Path

from sweep.plan.throughput import BIRTH_DEATH  # the bench's tiny model (numpy only: no cluster imported)

SPEC = BIRTH_DEATH.replace("{", "{{").replace("}", "}}") + """
[run]
store = "{store}"
replicates = 10
replicates_per_task = 10
seed = 3
[time]
end = 2.0
samples = 5
[design]
kind = "lhs"
points = {points}
[design.vary]
k = {{ low = 1.0, high = 10.0 }}
g = {{ low = 0.2, high = 1.0 }}
"""


def _peak_kib(pid: int) -> int | None:
    try:
        text = Path(f"/proc/{pid}/status").read_text()
    except OSError:
        return None
    found = re.search(r"VmHWM:\s+(\d+) kB", text)
    return int(found.group(1)) if found else None


class Watch:
    """The client's peak memory and the dashboard's response times, sampled while it runs."""

    def __init__(self, proc: subprocess.Popen, log: Path):
        self.proc, self.log = proc, log
        self.peak_kib = 0
        self.dashboard_ms: list[float] = []
        self.dashboard_errors = 0
        self._thread = threading.Thread(target=self._poll, daemon=True)
        self._thread.start()

    def _poll(self) -> None:
        url = None
        last_probe = 0.0
        while self.proc.poll() is None:
            peak = _peak_kib(self.proc.pid)
            if peak:
                self.peak_kib = max(self.peak_kib, peak)
            if url is None:
                found = re.search(r"Dask dashboard: (\S+)", self.log.read_text(errors="replace"))
                url = found.group(1) if found else None
            elif time.monotonic() - last_probe > 5.0:
                last_probe = time.monotonic()
                began = time.perf_counter()
                try:
                    with urllib.request.urlopen(url, timeout=10) as answer:
                        answer.read()
                    self.dashboard_ms.append(1000 * (time.perf_counter() - began))
                except Exception:
                    self.dashboard_errors += 1
            time.sleep(0.05)

    def join(self) -> None:
        self._thread.join()


def _run(spec: Path, log: Path, kill_after: float | None = None) -> dict:
    command = [sys.executable, "-m", "sweep.cli", "run", str(spec), "--workers", "2"]
    began = time.perf_counter()
    with open(log, "w") as out:
        proc = subprocess.Popen(command, stdout=out, stderr=subprocess.STDOUT, cwd=spec.parent,
                                env={**os.environ, "COLUMNS": "120"}, start_new_session=True)
        watch = Watch(proc, log)
        if kill_after is not None:
            try:
                proc.wait(kill_after)
            except subprocess.TimeoutExpired:
                os.killpg(proc.pid, signal.SIGKILL)  # the client and its workers, as a node failure would
        proc.wait()
        watch.join()
    wall = time.perf_counter() - began
    return {"rc": proc.returncode, "wall_s": round(wall, 2), "client_peak_mib": round(watch.peak_kib / 1024, 1),
            "dashboard_probes": len(watch.dashboard_ms), "dashboard_errors": watch.dashboard_errors,
            "dashboard_ms_max": round(max(watch.dashboard_ms), 1) if watch.dashboard_ms else None,
            "tail": log.read_text(errors="replace")[-300:].strip().splitlines()[-1:]}


def _remaining(store: Path) -> dict:
    """What a resume does first: read the completion record and list the tasks not done."""
    import numpy as np

    from sweep import store as store_mod

    began = time.perf_counter()
    done = store_mod.read_done(store)
    left = np.argwhere(~done)
    return {"resume_lookup_s": round(time.perf_counter() - began, 3), "done": int(done.sum()),
            "left": int(left.shape[0])}


def _digest(store: Path) -> str:
    """The data arrays' values and the completion record, as one hash."""
    import numpy as np
    import zarr

    from sweep.store.chunks import read_whole

    g = zarr.open_group(store, mode="r", use_consolidated=False)
    h = hashlib.sha256()
    for name in ("status", "events"):
        h.update(np.ascontiguousarray(read_whole(store, name)).tobytes())
    h.update(np.ascontiguousarray(g["done"][:]).tobytes())
    return h.hexdigest()[:16]


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--points", type=int, default=100_000)
    ap.add_argument("--kill-after", type=float, default=None, help="seconds; then a killed run and its resume")
    ap.add_argument("--folder", type=Path, default=None)
    args = ap.parse_args()
    folder = args.folder or Path(tempfile.mkdtemp(prefix="sweep-scale-"))
    folder.mkdir(parents=True, exist_ok=True)
    whole = folder / "whole.toml"
    whole.write_text(textwrap.dedent(SPEC.format(store="whole.zarr", points=args.points)))
    figures = {"points": args.points, "run": "uninterrupted", **_run(whole, folder / "whole.log")}
    print(json.dumps(figures), flush=True)
    if args.kill_after is None:
        return
    killed = folder / "killed.toml"
    killed.write_text(textwrap.dedent(SPEC.format(store="killed.zarr", points=args.points)))
    first = _run(killed, folder / "killed.log", kill_after=args.kill_after)
    print(json.dumps({"points": args.points, "run": f"SIGKILL after {args.kill_after:g} s", **first,
                      **_remaining(folder / "killed.zarr")}), flush=True)
    resumed = _run(killed, folder / "resumed.log")
    same = _digest(folder / "whole.zarr") == _digest(folder / "killed.zarr")
    print(json.dumps({"points": args.points, "run": "resumed", **resumed, "same_bytes_as_uninterrupted": same}),
          flush=True)


if __name__ == "__main__":
    main()
