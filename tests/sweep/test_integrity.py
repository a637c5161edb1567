"""No silent wrong results: a resume is the same sweep or a refusal, a store exists only once it is
whole, damage is found by ``--verify`` and mended, and a store someone else prepared cannot redirect
writes or the terminal.

Every case runs real code on real stores on disk; kills are real (SIGKILL of a forked process at
each file operation of store creation), Ctrl-C is a real SIGINT, a full disk is a real tmpfs.
"""

from __future__ import annotations

import builtins
import io
import logging
import os
import signal
import subprocess
from pathlib import Path

import numpy as np
import pytest
import zarr
from distributed import LocalCluster
from typer.testing import CliRunner

import kernels
import sweep
from sweep import store
from sweep.store import layout
from sweep.execute import session
from sweep.store import integrity, lock
from sweep.cli import app
from support.stores import DATA, EVERYTHING, arrays, assert_same

cli = CliRunner()

SPECIES_AB = """
[model.species]
A = 0
B = 0
"""
PARAMETERS = """
[model.parameters]
k = 400.0
g = 1.0
h = 0.01
"""
REACTIONS = """
[model.reactions]
make = { reaction = "0 -> A", rate = "k" }
loss = { reaction = "A -> 0", rate = "g" }
pair = { reaction = "2 A -> B", rate = "h" }
"""
RUN = """
[run]
replicates = 40
replicates_per_task = 10
seed = 99
[time]
end = 8.0
samples = 5
"""
VARY = """
[design.vary]
k = [300.0, 400.0]
h = [0.01, 0.02]
"""


@pytest.fixture(autouse=True)
def wide_terminal(monkeypatch):
    """Messages on one line each, whatever the terminal the tests run in."""
    monkeypatch.setenv("COLUMNS", "250")


@pytest.fixture(scope="module")
def scheduler():
    """A real Dask cluster whose workers are threads of this process (fast to reach, and they see
    test-only kernels registered in this process)."""
    with LocalCluster(n_workers=2, threads_per_worker=1, processes=False, dashboard_address=":0",
                      silence_logs=logging.CRITICAL) as cluster:
        yield cluster.scheduler_address


def _write(folder: Path, *parts: str, name: str = "spec.toml") -> Path:
    path = folder / name
    path.write_text("\n".join(parts), encoding="utf-8")
    return path


@pytest.fixture(scope="module")
def reference(reference_run):
    """The spec file and every array of an undisturbed run of it."""
    return reference_run("\n".join((RUN, VARY)), "\n".join((SPECIES_AB, PARAMETERS, REACTIONS)), EVERYTHING)


def _half_done(folder: Path, spec_path: Path, scheduler: str) -> Path:
    """A store with half its tasks done: the state a killed sweep leaves."""
    target = folder / "half.zarr"
    assert sweep.run(sweep.load(spec_path, store=target), scheduler=scheduler).complete
    done = zarr.open_array(target, path="done", mode="r+")
    flags = done[:]
    flags.reshape(-1)[1::2] = False
    done[:] = flags
    return target


def _files(path: Path) -> dict[str, bytes]:
    return {str(p.relative_to(path)): p.read_bytes() for p in sorted(path.rglob("*")) if p.is_file()}


# -- 1. a resume is the same sweep, or a refusal that says what moved -----------------------------

REORDERINGS = {
    "design.vary keys": ((SPECIES_AB, PARAMETERS, REACTIONS, RUN, "[design.vary]\nh = [0.01, 0.02]\nk = [300.0, 400.0]\n"),
                         "varied parameters ([design.vary]) order: [k, h] -> [h, k]"),
    "species": (("[model.species]\nB = 0\nA = 0\n", PARAMETERS, REACTIONS, RUN, VARY),
                "species order: [A, B] -> [B, A]"),
    "reactions": ((SPECIES_AB, PARAMETERS, REACTIONS.replace(
        'make = { reaction = "0 -> A", rate = "k" }\nloss = { reaction = "A -> 0", rate = "g" }',
        'loss = { reaction = "A -> 0", rate = "g" }\nmake = { reaction = "0 -> A", rate = "k" }'), RUN, VARY),
                  "reaction order: [make, loss, pair] -> [loss, make, pair]"),
    "values of a grid axis": ((SPECIES_AB, PARAMETERS, REACTIONS, RUN, VARY.replace("[300.0, 400.0]", "[400.0, 300.0]")),
                              "design points: the same number of points, at other parameter values or in another order"),
}


@pytest.mark.parametrize("case", sorted(REORDERINGS))
def test_a_reordering_that_moves_bytes_is_refused_and_the_store_is_untouched(case, reference, tmp_path, scheduler):
    spec_path, _ = reference
    target = _half_done(tmp_path, spec_path, scheduler)
    before = _files(target)
    parts, moved = REORDERINGS[case]
    edited = _write(tmp_path, *parts, name="edited.toml")
    result = cli.invoke(app, ["run", str(edited), "--store", str(target), "--scheduler", scheduler])
    assert result.exit_code == 2, result.output
    assert "cannot be resumed" in result.output and moved in result.output, result.output
    assert _files(target) == before


def test_refusing_moved_points_names_them(reference, tmp_path, scheduler):
    spec_path, _ = reference
    target = _half_done(tmp_path, spec_path, scheduler)
    edited = _write(tmp_path, *REORDERINGS["design.vary keys"][0], name="edited.toml")
    result = cli.invoke(app, ["run", str(edited), "--store", str(target), "--scheduler", scheduler])
    # the grid's first axis is now h: point 1 was (k = 300, h = 0.02) and would be (h = 0.01, k = 400)
    assert "2 of 4 points now have other parameter values" in result.output, result.output
    assert "point 1: k = 300, h = 0.02 -> h = 0.01, k = 400" in result.output, result.output


SAFE_EDITS = {
    "order of [parameters]": (SPECIES_AB, "[model.parameters]\nh = 0.01\ng = 1.0\nk = 400.0\n", REACTIONS, RUN, VARY),
    "keys inside a reaction": (SPECIES_AB, PARAMETERS, REACTIONS.replace('{ reaction = "0 -> A", rate = "k" }',
                                                                         '{ rate = "k", reaction = "0 -> A" }'), RUN, VARY),
    "order of the tables": (VARY, RUN, REACTIONS, "# a comment\n" + PARAMETERS, SPECIES_AB),
    "order of the [run] keys": (SPECIES_AB, PARAMETERS, REACTIONS,
                                RUN.replace("replicates = 40\nreplicates_per_task = 10\nseed = 99",
                                            "seed = 99\nreplicates_per_task = 10\nreplicates = 40"), VARY),
    "a reaction renamed": (SPECIES_AB, PARAMETERS, REACTIONS.replace("loss =", "decay ="), RUN, VARY),
}


@pytest.mark.parametrize("case", sorted(SAFE_EDITS))
def test_an_edit_that_moves_no_byte_resumes_to_identical_results(case, reference, tmp_path, scheduler):
    spec_path, expected = reference
    target = _half_done(tmp_path, spec_path, scheduler)
    edited = _write(tmp_path, *SAFE_EDITS[case], name="edited.toml")
    result = cli.invoke(app, ["run", str(edited), "--store", str(target), "--scheduler", scheduler])
    assert result.exit_code == 0, result.output
    assert "resuming: 8 of 16 tasks left" in result.output, result.output
    assert_same(arrays(target, EVERYTHING), expected)


def test_a_store_from_before_fingerprints_is_checked_against_its_own_spec_text(reference, tmp_path, scheduler):
    spec_path, expected = reference
    target = _half_done(tmp_path, spec_path, scheduler)
    g = zarr.open_group(target, mode="r+", use_consolidated=False)
    for key in ("identity", "identity_sha256"):
        del g.attrs[key]
    store.consolidate(target)
    for case in ("species", "design.vary keys"):
        edited = _write(tmp_path, *REORDERINGS[case][0], name="edited.toml")
        result = cli.invoke(app, ["run", str(edited), "--store", str(target), "--scheduler", scheduler])
        assert result.exit_code == 2 and REORDERINGS[case][1] in result.output, result.output
    result = cli.invoke(app, ["run", str(spec_path), "--store", str(target), "--scheduler", scheduler])
    assert result.exit_code == 0, result.output
    assert_same(arrays(target, EVERYTHING), expected)


# -- 2. a store exists only once it is whole ------------------------------------------------------

def _fault_at(step: int, root: Path, action) -> dict:
    """Patch the file operations so that the ``step``-th one under ``root`` runs ``action`` first.

    File operations: a file opened for writing, a name renamed or linked into place, a folder made
    (not one that exists already), a file or folder removed. Returns a counter of those seen.
    """
    seen = {"n": 0}
    prefix = str(root)

    def wrap(fn, writes=lambda *a, **k: True):
        def wrapped(*args, **kwargs):
            if args and str(args[0]).startswith(prefix) and writes(*args, **kwargs):
                seen["n"] += 1
                if seen["n"] == step:
                    action()
            return fn(*args, **kwargs)
        return wrapped

    for name in ("rename", "replace", "unlink", "rmdir", "link"):
        setattr(os, name, wrap(getattr(os, name)))
    os.mkdir = wrap(os.mkdir, lambda p, *a, **k: not os.path.isdir(p))
    io.open = builtins.open = wrap(io.open, lambda f, mode="r", *a, **k: any(c in mode for c in "wxa+"))
    os.open = wrap(os.open, lambda p, flags, *a, **k: bool(flags & (os.O_CREAT | os.O_WRONLY | os.O_RDWR)))
    return seen


def _create_in_child(spec_path: Path, target: Path, step: int, how: str) -> int:
    """Fork; in the child, take the lock and create the store as `sweep run` does, with a fault at
    file operation ``step``: a SIGKILL, or a Ctrl-C (SIGINT). Returns how the child ended."""
    spec = sweep.load(spec_path, store=target)
    pid = os.fork()
    if pid == 0:  # the child: never returns to pytest
        code = 0
        try:
            kill = lambda: os.kill(os.getpid(), signal.SIGKILL)  # noqa: E731
            interrupt = lambda: signal.raise_signal(signal.SIGINT)  # noqa: E731
            holder = session._claim(spec, False)
            seen = _fault_at(step, target, kill if how == "kill" else interrupt)
            try:
                session.prepare(spec)
            finally:
                lock.release(target, holder)
            code = 3 if seen["n"] < step else 0  # 3: finished before reaching the fault
        except KeyboardInterrupt:
            code = 130
        except BaseException:
            code = 1
        os._exit(code)
    _, status = os.waitpid(pid, 0)
    return -os.WTERMSIG(status) if os.WIFSIGNALED(status) else os.WEXITSTATUS(status)


def _layout(path: Path) -> dict:
    """What a fresh store holds, minus the creation time and the random id of each creation."""
    attrs = dict(zarr.open_group(path, mode="r").attrs)
    attrs.pop("created")
    attrs.pop("store_id")
    return {"attrs": attrs, "arrays": arrays(path, EVERYTHING),
            "files": sorted(str(p.relative_to(path)) for p in path.rglob("*") if "sweep.store.lock" not in p.name)}


def _recreate(spec_path: Path, target: Path) -> None:
    """What the next `sweep run` does first: take the lock, then create or resume the store."""
    spec = sweep.load(spec_path, store=target)
    holder = session._claim(spec, False)
    try:
        session.prepare(spec)
    finally:
        lock.release(target, holder)


@pytest.mark.parametrize("how,every", [("kill", 1), ("interrupt", 3)])
def test_creation_interrupted_at_every_file_operation_recovers(how, every, reference, tmp_path, scheduler):
    """SIGKILL at each file operation of store creation (Ctrl-C at every third): a reader refuses
    what is left with a message, and the next run rebuilds a store identical to one made in one go."""
    spec_path, expected = reference
    fresh = tmp_path / "fresh.zarr"
    _recreate(spec_path, fresh)
    want = _layout(fresh)
    step, tried = 1, 0
    while True:
        target = tmp_path / f"s{step}.zarr"
        code = _create_in_child(spec_path, target, step, how)
        if code == 3:
            break  # creation needed fewer operations: every one of them was tried
        assert code == (-signal.SIGKILL if how == "kill" else 130), (step, code)
        tried += 1
        if store.exists(target):  # cut after the store was complete (releasing the lock)
            assert sweep.status(target).tasks_total == 16
        else:  # a reader refuses what is left with a message, never a traceback or a wrong answer
            with pytest.raises(sweep.StoreError, match="interrupted|no results store"):
                sweep.status(target)
            if tried % 10 == 1:
                result = cli.invoke(app, ["status", str(target)])
                assert result.exit_code == 2 and "Traceback" not in result.output, (step, result.output)
        _recreate(spec_path, target)  # the next run: identical to a store created in one go
        got = _layout(target)
        assert got["attrs"] == want["attrs"] and got["files"] == want["files"], step
        assert_same(got["arrays"], want["arrays"])
        step += every
    assert tried > 40 // every, tried  # the creation really was cut at each of its many file operations
    # a full run on stores cut early, midway and late gives the undisturbed bytes
    for cut in (1, 1 + every * (tried // 2), 1 + every * (tried - 1)):
        target = tmp_path / f"s{cut}.zarr"
        assert sweep.run(sweep.load(spec_path, store=target), scheduler=scheduler).complete
        assert_same(arrays(target, EVERYTHING), expected)


@pytest.fixture
def tmpfs(tmp_path):
    """A real tmpfs of a size the test sets (``remount(size)``); needs root to mount."""
    folder = tmp_path / "disk"
    folder.mkdir()

    def remount(size: str) -> None:
        subprocess.run(["mount", "-o", f"remount,size={size}", str(folder)], check=True, capture_output=True)

    try:
        subprocess.run(["mount", "-t", "tmpfs", "-o", "size=4k", "tmpfs", str(folder)], check=True,
                       capture_output=True)
    except (subprocess.CalledProcessError, FileNotFoundError, PermissionError):
        pytest.skip("needs permission to mount a tmpfs (root)")
    yield folder, remount
    subprocess.run(["umount", "-l", str(folder)], check=False)


def test_a_disk_that_fills_during_creation_leaves_nothing_that_passes_for_a_store(reference, tmp_path, tmpfs,
                                                                                   scheduler):
    spec_path, expected = reference
    disk, remount = tmpfs
    fresh = tmp_path / "fresh.zarr"
    _recreate(spec_path, fresh)
    want = _layout(fresh)
    failed_sizes = 0
    for kib in range(4, 400, 4):  # one page more each time, until creation fits
        target = disk / f"s{kib}.zarr"
        remount(f"{kib}k")
        try:
            _recreate(spec_path, target)
        except sweep.StoreError as exc:
            assert "No space left on device" in str(exc), exc
        else:
            break
        failed_sizes += 1
        with pytest.raises(sweep.StoreError, match="interrupted|no results store"):
            sweep.status(target)
        remount("64m")
        _recreate(spec_path, target)  # room again: the next run rebuilds it whole
        got = _layout(target)
        assert got["attrs"] == want["attrs"] and got["files"] == want["files"], kib
        assert_same(got["arrays"], want["arrays"])
        subprocess.run(["rm", "-rf", str(target)], check=True)  # a tmpfs cannot shrink below what it holds
    assert failed_sizes >= 5, failed_sizes
    # through the command line: a clear refusal, then a run that completes with the undisturbed bytes
    subprocess.run(["rm", "-rf", str(target)], check=True)
    remount("12k")
    target = disk / "cli.zarr"
    result = cli.invoke(app, ["run", str(spec_path), "--store", str(target), "--scheduler", scheduler])
    assert result.exit_code == 2 and "No space left on device" in result.output, result.output
    remount("64m")
    result = cli.invoke(app, ["run", str(spec_path), "--store", str(target), "--scheduler", scheduler])
    assert result.exit_code == 0, result.output
    assert_same(arrays(target, EVERYTHING), expected)


# -- 3. damage is found, named and mended ---------------------------------------------------------

def _complete_store(tmp_path: Path, spec_path: Path, scheduler: str, name: str = "s.zarr") -> Path:
    target = tmp_path / name
    assert sweep.run(sweep.load(spec_path, store=target), scheduler=scheduler).complete
    return target


def _flip(file: Path, at: int) -> None:
    data = bytearray(file.read_bytes())
    data[at % len(data)] ^= 0x10
    file.write_bytes(bytes(data))


def _swap(a: Path, b: Path) -> None:
    tmp = a.with_name("swap")
    a.rename(tmp)
    b.rename(a)
    tmp.rename(b)


CHUNK_DAMAGE = {
    "a flipped byte inside a counts chunk": (lambda s: _flip(s / "counts/c/1/2/0/0", 40), [(1, 2, "counts chunk damaged")]),
    "a flipped byte inside a status chunk": (lambda s: _flip(s / "status/c/3/0", 20), [(3, 0, "status chunk damaged")]),
    "a flipped header byte": (lambda s: _flip(s / "events/c/0/3", 2), [(0, 3, "events chunk damaged")]),
    "the last byte (the checksum itself)": (lambda s: _flip(s / "counts/c/2/1/0/0", -1), [(2, 1, "counts chunk damaged")]),
    "two chunk files swapped": (lambda s: _swap(s / "counts/c/0/0/0/0", s / "counts/c/0/1/0/0"),
                                [(0, 0, "counts chunk holds other bytes"), (0, 1, "counts chunk holds other bytes")]),
    "a chunk file deleted": (lambda s: (s / "status/c/2/2").unlink(), [(2, 2, "status chunk missing")]),
}


@pytest.mark.parametrize("case", sorted(CHUNK_DAMAGE))
def test_verify_finds_damaged_chunks_and_a_rerun_restores_the_bytes(case, reference, tmp_path, scheduler):
    spec_path, expected = reference
    target = _complete_store(tmp_path, spec_path, scheduler)
    damage, found = CHUNK_DAMAGE[case]
    damage(target)
    result = cli.invoke(app, ["status", str(target), "--verify"])
    assert result.exit_code == 1, result.output
    for point, block, problem in found:
        assert f"point {point} block {block}: {problem}" in result.output, result.output
    assert f"{len(found)} task(s) will be recomputed" in result.output
    result = cli.invoke(app, ["run", str(spec_path), "--store", str(target), "--scheduler", scheduler])
    assert result.exit_code == 0 and f"resuming: {len(found)} of 16 tasks left" in result.output, result.output
    assert_same(arrays(target, EVERYTHING), expected)
    result = cli.invoke(app, ["status", str(target), "--verify"])
    assert result.exit_code == 0 and "matches its checksum" in result.output, result.output


COORDINATE_DAMAGE = {
    "a deleted params chunk": (lambda s: (s / "params/c/0/0").unlink(), "params", "a chunk file is missing"),
    "garbage in the time chunk": (lambda s: (s / "time/c/0").write_bytes(b"\x00garbage" * 9), "time", "unreadable"),
    "a flipped byte in the species chunk": (lambda s: _flip(s / "species/c/0", 5), "species", "unreadable"),
    "the param array deleted": (lambda s: subprocess.run(["rm", "-r", str(s / "param")], check=True), "param",
                                "unreadable"),
}


@pytest.mark.parametrize("via", ["verify", "run"])
@pytest.mark.parametrize("case", sorted(COORDINATE_DAMAGE))
def test_damaged_coordinates_are_found_and_rewritten_from_the_spec(case, via, reference, tmp_path, scheduler):
    spec_path, expected = reference
    target = _complete_store(tmp_path, spec_path, scheduler)
    damage, name, problem = COORDINATE_DAMAGE[case]
    damage(target)
    if via == "verify":
        result = cli.invoke(app, ["status", str(target), "--verify"])
        assert result.exit_code == 1, result.output
        assert f"damaged coordinate {name}: {problem}" in result.output, result.output
    else:
        result = cli.invoke(app, ["run", str(spec_path), "--store", str(target), "--scheduler", scheduler])
        assert result.exit_code == 0 and "nothing to do" in result.output, result.output
    assert f"rewrote the damaged coordinate '{name}' from the spec" in result.output, result.output
    assert_same(arrays(target, EVERYTHING), expected)
    import xarray as xr

    ds = xr.open_zarr(target)  # the user's own way in works again
    assert list(ds["species"].values) == ["A", "B"] and ds["params"].shape == (4, 2)
    assert cli.invoke(app, ["status", str(target), "--verify"]).exit_code == 0


DONE_DAMAGE = {
    "a flipped byte in the done chunk": lambda s: _flip(s / "done/c/0/0", 7),
    "the done array deleted": lambda s: subprocess.run(["rm", "-r", str(s / "done")], check=True),
    "done's zarr.json garbled": lambda s: (s / "done/zarr.json").write_text("{ not json"),
}


@pytest.mark.parametrize("case", sorted(DONE_DAMAGE))
def test_a_damaged_completion_record_is_rebuilt_from_verified_chunks(case, reference, tmp_path, scheduler):
    spec_path, expected = reference
    target = _half_done(tmp_path, spec_path, scheduler)
    # the record said 8 of 16; the chunks of all 16 are there and verify, so all 16 count as done
    DONE_DAMAGE[case](target)
    result = cli.invoke(app, ["status", str(target)])
    assert result.exit_code == 0 and "damaged" in result.output and "Traceback" not in result.output, result.output
    result = cli.invoke(app, ["run", str(spec_path), "--store", str(target), "--scheduler", scheduler])
    assert result.exit_code == 0, result.output
    assert "the completion record was damaged: rebuilt it from the chunks, 16 tasks verified" in result.output
    assert_same(arrays(target, EVERYTHING), expected)
    assert cli.invoke(app, ["status", str(target), "--verify"]).exit_code == 0


def test_a_completion_record_rebuilt_from_chunks_leaves_missing_and_damaged_tasks_to_rerun(reference, tmp_path,
                                                                                             scheduler):
    spec_path, expected = reference
    target = _complete_store(tmp_path, spec_path, scheduler)
    (target / "counts/c/1/1/0/0").unlink()
    _flip(target / "events/c/2/3", 30)
    subprocess.run(["rm", "-r", str(target / "done")], check=True)
    result = cli.invoke(app, ["status", str(target), "--verify"])
    assert result.exit_code == 1 and "14 tasks verified complete" in result.output, result.output
    result = cli.invoke(app, ["run", str(spec_path), "--store", str(target), "--scheduler", scheduler])
    assert result.exit_code == 0 and "resuming: 2 of 16 tasks left" in result.output, result.output
    assert_same(arrays(target, EVERYTHING), expected)


def test_a_garbled_root_zarr_json_is_named_in_status_and_run(reference, tmp_path, scheduler):
    spec_path, _ = reference
    target = _complete_store(tmp_path, spec_path, scheduler)
    (target / "zarr.json").write_bytes(b"\x00\x01 garbage")
    before = _files(target)
    for args in (["status", str(target)], ["status", str(target), "--verify"],
                 ["run", str(spec_path), "--store", str(target), "--scheduler", scheduler]):
        result = cli.invoke(app, args)
        assert result.exit_code == 2, result.output
        assert "zarr.json: damaged" in result.output and "holds the store's spec" in result.output, result.output
        assert "Traceback" not in result.output
    assert _files(target) == before


def test_a_store_from_before_checksums_still_opens_resumes_and_says_what_verify_can_check(reference, tmp_path,
                                                                                           scheduler, monkeypatch):
    spec_path, expected = reference
    monkeypatch.setattr(layout, "_COMPRESSORS", layout._COMPRESSORS[:1])  # compression only, as before
    target = _half_done(tmp_path, spec_path, scheduler)
    monkeypatch.undo()
    g = zarr.open_group(target, mode="r+", use_consolidated=False)
    del g["checksums"]
    for key in ("identity", "identity_sha256"):
        del g.attrs[key]
    store.consolidate(target)
    result = cli.invoke(app, ["run", str(spec_path), "--store", str(target), "--scheduler", scheduler])
    assert result.exit_code == 0 and "resuming: 8 of 16 tasks left" in result.output, result.output
    assert_same(arrays(target, EVERYTHING), expected)
    result = cli.invoke(app, ["status", str(target), "--verify"])
    assert result.exit_code == 0, result.output
    assert "written before chunks carried checksums" in result.output, result.output


# -- 4. a store someone else prepared cannot redirect writes or the terminal ----------------------

def test_a_symlinked_chunk_folder_is_refused_and_nothing_outside_is_written(reference, tmp_path, scheduler):
    spec_path, _ = reference
    target = _half_done(tmp_path, spec_path, scheduler)
    outside = tmp_path / "elsewhere"
    subprocess.run(["cp", "-r", str(target / "counts/c/1"), str(outside)], check=True)
    subprocess.run(["rm", "-r", str(target / "counts/c/1")], check=True)
    (target / "counts/c/1").symlink_to(outside)
    before, outside_before = _files(target), _files(outside)
    result = cli.invoke(app, ["run", str(spec_path), "--store", str(target), "--scheduler", scheduler])
    assert result.exit_code == 2, result.output
    assert "counts/c/1 is a symlink" in result.output, result.output
    assert _files(outside) == outside_before and _files(target) == before
    # and a worker handed such a store anyway refuses to write through the link
    result_block = kernels.KernelResult(np.zeros((10, 5, 2), np.int32), np.zeros(10, np.int8), np.zeros(10, np.int64))
    with pytest.raises(sweep.StoreError, match="leads out of the store through a symlink"):
        store.write_block(target, 1, 0, 10, result_block)
    assert _files(outside) == outside_before


def test_a_symlinked_shard_record_is_refused_and_nothing_outside_is_written(reference, tmp_path, scheduler):
    spec_path, _ = reference
    target = _half_done(tmp_path, spec_path, scheduler)
    (target / "shards").mkdir()
    victim = tmp_path / "victim.txt"
    victim.write_text("keep me\n")
    (target / "shards/done-1-of-2.bin").symlink_to(victim)
    result = cli.invoke(app, ["run", str(spec_path), "--store", str(target), "--shard", "1/2"])
    assert result.exit_code == 2, result.output
    assert "shards/done-1-of-2.bin is a symlink" in result.output, result.output
    assert victim.read_text() == "keep me\n"


def test_stored_text_reaches_the_terminal_escaped(reference, tmp_path, scheduler):
    spec_path, _ = reference
    target = _complete_store(tmp_path, spec_path, scheduler)
    g = zarr.open_group(target, mode="r+", use_consolidated=False)
    g.attrs["spec_path"] = "evil\x1b[2J\x1b]0;owned\x07[bold]x[/bold].toml"
    store.consolidate(target)
    result = cli.invoke(app, ["status", str(target)])
    assert result.exit_code == 0, result.output
    assert "\x1b" not in result.output and "\x07" not in result.output
    assert "evil\\x1b[2J\\x1b]0;owned\\x07[bold]x[/bold].toml" in result.output, result.output


# -- 5. a task whose replicates all fail still writes every chunk ---------------------------------

def test_a_task_whose_replicates_all_fail_writes_every_chunk(tmp_path, scheduler, monkeypatch):
    monkeypatch.setitem(kernels.METHODS, "failing", "failing_kernel")
    path = _write(tmp_path, SPECIES_AB, PARAMETERS, REACTIONS, RUN.replace("seed = 99", 'seed = 99\nmethod = "failing"'),
                  VARY)
    target = tmp_path / "failing.zarr"
    result = cli.invoke(app, ["run", str(path), "--store", str(target), "--scheduler", scheduler])
    assert result.exit_code == 0, result.output
    assert "160 replicates" in result.output  # numerical failures, reported
    g = zarr.open_group(target, mode="r")
    assert g["done"][:].all() and (g["status"][:] == 2).all() and (g["counts"][:] == -1).all()
    for name in DATA:
        assert len([p for p in (target / name / "c").rglob("*") if p.is_file()]) == 16, name
    result = cli.invoke(app, ["status", str(target), "--verify"])
    assert result.exit_code == 0 and "numerical failures" in result.output, result.output


def _start(spec_path: Path, target: Path) -> subprocess.Popen:
    """A real `sweep run` in its own session (so the test can signal its whole process group)."""
    import sys

    return subprocess.Popen([sys.executable, "-m", "sweep.cli", "run", str(spec_path), "--store", str(target),
                             "--workers", "1"], stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                            start_new_session=True, env={**os.environ, "COLUMNS": "250"})


@pytest.mark.parametrize("sig", [signal.SIGKILL, signal.SIGINT])
@pytest.mark.parametrize("trigger", [store.INCOMPLETE, f"{store.BUILDING}/counts", f"{store.BUILDING}/zarr.json",
                                     "zarr.json"])
def test_a_real_run_signalled_as_each_file_of_creation_appears_resumes_identically(trigger, sig, reference,
                                                                                     tmp_path, scheduler):
    spec_path, expected = reference
    target = tmp_path / "s.zarr"
    watched = target / trigger
    proc = _start(spec_path, target)
    while not watched.exists():
        assert proc.poll() is None, proc.communicate()
    os.killpg(proc.pid, sig)
    out, err = proc.communicate(timeout=120)
    if sig == signal.SIGINT:
        assert proc.returncode == 130 and "Traceback" not in err, out + err
        assert "interrupted" in err, err
    result = cli.invoke(app, ["run", str(spec_path), "--store", str(target), "--scheduler", scheduler])
    assert result.exit_code == 0, result.output
    assert_same(arrays(target, EVERYTHING), expected)
