"""Ctrl-C at every moment of ``sweep run`` (issue 12.6): real processes, real signals.

Each run starts in a session of its own and gets SIGINT on its whole process group, as a
terminal's Ctrl-C does, at a moment told by what the run shows: an import finishing
(``python -X importtime``), a process of the cluster appearing, a line of output. Whatever the
moment: exit status 130 within a generous bound, one line saying what happened and no
traceback, no process of the run left behind, and a rerun gives the bytes of an undisturbed run.
"""

from __future__ import annotations

import contextlib
import json
import os
import re
import signal
import subprocess
import sys
import sysconfig
import textwrap
import threading
import time
from pathlib import Path
from typing import Callable

import numpy as np
import psutil
import pytest
import zarr

from support.models import DIMERISING
from support.stores import arrays

# 16 tasks of about a tenth of a second: a second on 2 workers
BODY = """
[run]
replicates = 400
replicates_per_task = 100
seed = 99
[time]
end = 40.0
samples = 9
[design.vary]
k = [300.0, 400.0]
h = [0.01, 0.02]
"""
DATA = ("counts", "status", "events")
EXIT_SECONDS = 15.0  # a bound for hangs, not a speed: the run exits in about a second
NOTHING_LOST = "interrupted before any task ran; nothing was lost"


@pytest.fixture(scope="module")
def reference(reference_run):
    """The spec file and the arrays of one undisturbed run."""
    return reference_run(BODY, DIMERISING)


def _done(store: Path) -> int:
    try:
        return int(zarr.open_group(store, mode="r")["done"][:].sum())
    except Exception:  # not created yet
        return 0


class _Run:
    """``sweep run`` in a session of its own, its output collected line by line as it comes."""

    def __init__(self, spec: Path, store: Path, *, python: tuple[str, ...] = (), program: tuple[str, ...] | None = None):
        program = program or ("-m", "sweep.cli")
        command = [sys.executable, *python, *program, "run", str(spec), "--store", str(store), "--workers", "2"]
        self.proc = subprocess.Popen(command, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                                     start_new_session=True, env={**os.environ, "COLUMNS": "200"})
        self.session = self.proc.pid  # the leader of its own session
        self.ps = psutil.Process(self.proc.pid)
        self.out: list[str] = []
        self.err: list[str] = []
        self.readers = [threading.Thread(target=self._read, args=(stream, lines), daemon=True)
                        for stream, lines in ((self.proc.stdout, self.out), (self.proc.stderr, self.err))]
        for reader in self.readers:
            reader.start()

    @staticmethod
    def _read(stream, lines: list[str]) -> None:
        for line in stream:
            lines.append(line.rstrip("\n"))

    def wait_for(self, what: str, happened: Callable[[], bool], timeout: float = 120) -> None:
        deadline = time.monotonic() + timeout
        while not happened():
            assert self.proc.poll() is None, f"the run ended before {what}:\n" + "\n".join(self.out + self.err)
            assert time.monotonic() < deadline, f"no {what} within {timeout} s"
            time.sleep(0.005)

    def ctrl_c(self, again_after: float | None = None) -> int:
        """SIGINT to the whole process group (twice, with ``again_after``); the exit status, within EXIT_SECONDS."""
        os.killpg(self.proc.pid, signal.SIGINT)
        if again_after is not None:
            time.sleep(again_after)
            with contextlib.suppress(ProcessLookupError):  # it may have ended already
                os.killpg(self.proc.pid, signal.SIGINT)
        try:
            status = self.proc.wait(timeout=EXIT_SECONDS)
        except subprocess.TimeoutExpired:
            raise AssertionError(f"still running {EXIT_SECONDS} s after Ctrl-C:\n" + "\n".join(self.out + self.err))
        for reader in self.readers:
            reader.join(timeout=EXIT_SECONDS)
        return status

    def processes(self, kind: str) -> list[psutil.Process]:
        found = []
        for child in self._children():
            try:
                if kind in " ".join(child.cmdline()):
                    found.append(child)
            except psutil.Error:  # gone meanwhile
                pass
        return found

    def _children(self) -> list[psutil.Process]:
        try:
            return self.ps.children()
        except psutil.Error:
            return []

    def listening_workers(self) -> int:
        count = 0
        for worker in self.processes("spawn_main"):
            try:
                count += any(c.status == psutil.CONN_LISTEN for c in worker.net_connections("tcp"))
            except psutil.Error:
                pass
        return count

    def assert_nothing_left(self) -> None:
        """No process of the run's session is alive (worker processes, the resource tracker ...)."""
        deadline = time.monotonic() + EXIT_SECONDS
        while left := _in_session(self.session):
            assert time.monotonic() < deadline, f"left behind: {left}"
            time.sleep(0.05)

    def stopped_mid_run(self) -> bool:
        """The summary of a sweep that Ctrl-C stopped, and nothing on stderr."""
        return any("Sweep stopped: interrupted" in line for line in self.out) and not self.messages()

    def last_line(self) -> str:
        return next((line for line in reversed(self.out) if line.strip()), "")

    def messages(self) -> list[str]:
        """stderr without the lines of ``-X importtime``."""
        return [line for line in self.err if line.strip() and not line.startswith("import time:")]


@pytest.fixture
def start():
    """``start(spec, store, ...)`` starts a ``_Run``; any still running at the end is killed with its group."""
    runs: list[_Run] = []

    def make(*args, **kwargs) -> _Run:
        runs.append(_Run(*args, **kwargs))
        return runs[-1]

    yield make
    for run in runs:
        if run.proc.poll() is None:
            os.killpg(run.proc.pid, signal.SIGKILL)
            run.proc.wait()


def _in_session(session: int) -> list[str]:
    left = []
    for p in psutil.process_iter(["pid", "cmdline", "status"]):
        try:
            if os.getsid(p.pid) == session and p.info["status"] != psutil.STATUS_ZOMBIE:
                left.append(f"{p.pid} {' '.join(p.info['cmdline'] or [])[:80]}")
        except (ProcessLookupError, PermissionError, psutil.Error):
            pass
    return left


def _rerun(spec: Path, store: Path, expected: dict[str, np.ndarray]) -> subprocess.CompletedProcess:
    result = subprocess.run([sys.executable, "-m", "sweep.cli", "run", str(spec), "--store", str(store),
                             "--workers", "2"], capture_output=True, text=True, timeout=300,
                            env={**os.environ, "COLUMNS": "200"})
    assert result.returncode == 0, result.stdout + result.stderr
    got = arrays(store, DATA)
    for name in DATA:
        np.testing.assert_array_equal(got[name], expected[name], err_msg=name)
    assert zarr.open_group(store, mode="r")["done"][:].all()
    return result


def _imported(run: _Run, module: str) -> Callable[[], bool]:
    # -X importtime prints a line when an import ends, the name indented by its nesting
    pattern = re.compile(rf"^import time:.*\|\s+{re.escape(module)}$")
    return lambda: any(pattern.match(line) for line in run.err)


def _programs() -> list[tuple[str, ...]]:
    script = Path(sysconfig.get_path("scripts")) / "sweep"  # the console script pip wrote (sweep.cli:main)
    return [("-m", "sweep.cli")] + ([(str(script),)] if script.is_file() else [])


@pytest.mark.parametrize("program", _programs(), ids=lambda p: " ".join(p) if p[0] == "-m" else "sweep script")
def test_ctrl_c_while_importing(reference, tmp_path, start, program):
    spec, _ = reference
    store = tmp_path / "imports.zarr"
    run = start(spec, store, python=("-X", "importtime"), program=program)
    # typer is imported first thing after main() has taken over SIGINT; numpy, zarr, numba
    # and the commands take most of a second more
    run.wait_for("the import of typer", _imported(run, "typer"))
    assert run.ctrl_c() == 130, run.err
    # the line main() prints only while the commands are being imported
    assert run.messages() == ["interrupted while starting; nothing was done"], run.err
    assert not store.exists()  # nothing done: a rerun is a fresh run
    run.assert_nothing_left()


def test_ctrl_c_while_the_cluster_starts_and_mid_run(reference, tmp_path, start):
    """Each moment on the same store, as a user would try again and again; then one rerun."""
    spec, expected = reference
    store = tmp_path / "start.zarr"
    starting, stopping = [NOTHING_LOST], ["interrupted"]  # the second: Ctrl-C again while it stops
    moments = [
        # multiprocessing's resource tracker: the local backend starts it first thing
        ("the resource tracker", lambda run: run.processes("resource_tracker"), None, [starting]),
        # a worker process importing distributed, numpy, ...: the start waits for it
        ("a worker process", lambda run: run.processes("spawn_main"), None, [starting]),
        ("a worker process, twice", lambda run: run.processes("spawn_main"), 0.1, [starting, stopping]),
        # the workers are up; the client is connecting and the workers are loading the kernel,
        # unless this machine was slow to notice (then the run was just past its start)
        ("both workers listening", lambda run: run.listening_workers() >= 2, None, [starting, []]),
    ]
    for moment, happened, again_after, outcomes in moments:
        run = start(spec, store)
        run.wait_for(moment, lambda: happened(run))
        assert run.ctrl_c(again_after) == 130, (moment, run.out, run.err)
        assert not any("Traceback" in line for line in run.err), (moment, run.err)
        assert run.messages() in outcomes, (moment, run.out, run.err)
        if run.messages() == []:
            assert run.stopped_mid_run(), (moment, run.out, run.err)
        else:
            assert _done(store) == 0, moment  # no task had started
        if run.messages() != stopping:
            assert run.last_line().startswith("resume with: "), (moment, run.out)
        run.assert_nothing_left()

    run = start(spec, store)
    # mid-run: a worker has written a task's chunk, and some 14 tasks are still to go
    run.wait_for("a chunk written", lambda: any((store / "counts" / "c").rglob("*")))
    assert run.ctrl_c() == 130, (run.out, run.err)
    assert run.stopped_mid_run(), (run.out, run.err)
    assert run.last_line().startswith("resume with: "), run.out
    assert _done(store) < 16
    run.assert_nothing_left()

    result = _rerun(spec, store, expected)
    assert "resuming: " in result.stdout


API_USER = textwrap.dedent("""
    import json, multiprocessing, os, signal, sys, threading, time
    import psutil
    import sweep

    def ctrl_c_once_a_worker_runs():
        me = psutil.Process()
        while not any("spawn_main" in " ".join(c.cmdline()) for c in me.children()):
            time.sleep(0.005)
        os.kill(os.getpid(), signal.SIGINT)

    if __name__ == "__main__":
        spec = sweep.load(sys.argv[1], store=sys.argv[2])
        threading.Thread(target=ctrl_c_once_a_worker_runs, daemon=True).start()
        try:
            sweep.run(spec, workers=2)
            print("finished")
        except KeyboardInterrupt:
            print("KeyboardInterrupt")
        # what a notebook would still hold: processes and threads of the cluster
        print(json.dumps({"processes": [p.pid for p in multiprocessing.active_children()],
                          "threads": [t.name for t in threading.enumerate()]}))
""")


def test_an_undisturbed_run_ends_its_workers_quietly(reference, tmp_path, start):
    """The workers are ended with SIGKILL once every completion is recorded (sweep.execute.local._close):
    no process is left, stderr stays empty (no lost-worker log, no leaked-semaphore warning from
    multiprocessing's resource tracker) and the bytes are those of an undisturbed run."""
    spec, expected = reference
    store = tmp_path / "quiet.zarr"
    run = start(spec, store)
    status = run.proc.wait(timeout=300)
    for reader in run.readers:
        reader.join(timeout=EXIT_SECONDS)
    assert status == 0, "\n".join(run.out + run.err)
    assert run.messages() == [], run.err
    run.assert_nothing_left()
    got = arrays(store, DATA)
    for name in DATA:
        np.testing.assert_array_equal(got[name], expected[name], err_msg=name)


def test_ctrl_c_while_starting_leaves_nothing_in_a_python_session(reference, tmp_path):
    spec, _ = reference
    script = tmp_path / "api_user.py"
    script.write_text(API_USER)
    result = subprocess.run([sys.executable, str(script), str(spec), str(tmp_path / "api.zarr")], capture_output=True,
                            text=True, timeout=120)
    assert result.returncode == 0, result.stdout + result.stderr
    outcome, left = result.stdout.splitlines()
    assert outcome == "KeyboardInterrupt", result.stdout + result.stderr
    left = json.loads(left)
    assert left["processes"] == [], left
    # the cluster's event loop, its process watchers and our helper are gone (zarr's I/O threads
    # and distributed's one offload thread stay for the life of the process, as they always do)
    assert not [t for t in left["threads"] if t.startswith(("IO loop", "AsyncProcess", "sweep:"))], left


LAZY_API = textwrap.dedent("""
    import sys, types
    import sweep
    heavy = sorted(m for m in ("numpy", "zarr", "xarray", "numba", "distributed", "typer") if m in sys.modules)
    import sweep.cli  # the command line's package too: main() takes over SIGINT before the commands load
    heavy += sorted(m for m in ("numpy", "typer") if m in sys.modules)
    from sweep.store.status import verify  # the modules live in subpackages: sweep.status stays the function
    import sweep.execute.trace, sweep.store.export
    kinds = {name: type(getattr(sweep, name)).__name__ for name in sweep.__all__}
    from sweep import *
    print(heavy, sorted(set(sweep.__all__) - set(dir())), kinds["status"], kinds["trace"], kinds["export"],
          sorted(n for n, k in kinds.items() if k == "module"), verify is sweep.verify)
""")


def test_importing_sweep_is_cheap_and_the_api_is_whole():
    result = subprocess.run([sys.executable, "-c", LAZY_API], capture_output=True, text=True, timeout=120)
    assert result.returncode == 0, result.stderr
    assert result.stdout.split() == ["[]", "[]", "function", "function", "function", "[]", "True"], result.stdout
