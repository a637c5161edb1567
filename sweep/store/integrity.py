"""Is this store sound, and is it this sweep's? The checks a run, a shard and ``--verify`` make.

- ``check_same_sweep``: a resume must be the sweep that made the store (``sweep.spec.identity``);
  anything that would change a byte is refused with the list of what moved.
- ``refuse_symlinks``: nothing inside a store is followed through a symlink when writing; a
  store someone prepared with symlinks is refused before anything is written.
- ``mend``: under the lock, before tasks run: coordinates that no longer match the store's
  own fingerprint are rewritten from the spec (they follow from it alone), and a missing or
  damaged completion record is rebuilt from the chunks that verify.
- ``verify``: every chunk of every array, coordinates included, against its checksum and
  against the checksum recorded when its task finished (which catches swapped chunk files).
"""

from __future__ import annotations

import os
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np
import zarr

from sweep import store

from sweep.spec import identity, diff as specdiff
from sweep.errors import SpecError, StoreError

if TYPE_CHECKING:
    from sweep.spec import Spec


SYMLINK_DEPTH = 3  # store/<array>/c/<point>: the levels a resume checks; deeper ones, the writer


def refuse_symlinks(path: Path) -> None:
    """Refuse a store that holds a symlink in its top levels (writes would follow it out of the store).

    The check reads directory entries only (their type comes with the listing: no stat per
    entry) down to ``SYMLINK_DEPTH``: the store's files, each array's folder, its ``c`` folder
    and every point's folder under it, and the shards' records. A link deeper down (a replicate
    block's folder) is refused by the writer, which resolves every folder it writes into and
    opens files with ``O_NOFOLLOW`` (``sweep.store.chunks``); so a resume of a store of 100,000
    points need not list its million folders.

    Raises
    ------
    StoreError
        Naming the first symlink found.
    """
    if path.is_symlink():
        return  # the store's own path may be a link the user made; what is inside may not
    level = [(str(path), "")]
    for _ in range(SYMLINK_DEPTH):  # lists the folders above the deepest level checked
        below = []
        for folder, relative in level:
            try:
                entries = list(os.scandir(folder))
            except (FileNotFoundError, NotADirectoryError):
                continue
            for entry in entries:
                name = f"{relative}{entry.name}"
                if entry.is_symlink():
                    raise StoreError(f"{path}: {name} is a symlink; a store must hold only its own files (writes "
                                     "would follow the link out of the store); remove the link, or use another "
                                     "--store")
                if entry.is_dir(follow_symlinks=False):
                    below.append((entry.path, f"{name}/"))
        level = below


def check_same_sweep(spec: Spec, points: np.ndarray) -> None:
    """Refuse to resume a store made by another sweep, listing what would change.

    Raises
    ------
    StoreError
        If anything that decides the bytes differs (``sweep.spec.identity``).
    """
    path = spec.store
    attrs = store.attributes(path)
    new = identity.of(spec, points)
    old = attrs.get("identity")
    legacy = old is None
    if legacy:
        old = _rebuilt_identity(attrs, path)
        if old is None:
            if attrs.get("spec_sha256") == spec.sha256:
                return  # the very same spec and model text
            raise StoreError(f"{path}: written by an earlier version whose spec cannot be rebuilt to compare it "
                             "with this one; resume it with the exact spec file it was made with, or use another "
                             "--store, or start over with --fresh")
    lines = identity.differences(old, new)
    if legacy and (attrs.get("design_file_sha256") or "") != (spec.design.option("file_sha256") or ""):
        lines.append("design file: its contents changed")
    if lines and old.get("points") != new.get("points"):
        lines += _point_moves(path, list(old.get("param", [])), points, list(spec.param_names))
    if legacy and not lines:
        lines = [f"{name}: stored values differ from this spec's" for name in coordinate_problems(path, spec, points)]
    if lines:
        edits = specdiff.changes((attrs.get("spec", ""), attrs.get("model", ""), attrs.get("design_file_sha256", "")),
                                 (spec.text, spec.model_text, spec.design.option("file_sha256") or ""))
        where = ("\nedited in the spec and model files:\n  " + "\n  ".join(edits)) if edits else ""
        raise StoreError(f"{path}: holds a sweep made with a different spec, so it cannot be resumed; changed:\n  "
                         + "\n  ".join(lines) + where
                         + "\nundo the changes, use another --store, or start over with --fresh")


def _rebuilt_identity(attrs: dict, path: Path) -> dict | None:
    """A store from before fingerprints were kept: rebuild its spec from the texts it holds."""
    from sweep.spec import from_text

    try:
        old = from_text(attrs["spec"], attrs.get("spec_path", "spec.toml"), attrs.get("model", ""), store=path)
        return identity.of(old, old.points())
    except (SpecError, OSError, KeyError):
        return None


def _point_moves(path: Path, old_names: list[str], points: np.ndarray, names: list[str]) -> list[str]:
    try:
        stored = zarr.open_array(path, path="params", mode="r")[:]
    except Exception:  # damaged: the fingerprint's difference says enough
        return []
    return ["  " + line for line in identity.point_moves(stored, old_names, points, names)]


def coordinate_problems(path: Path, spec: Spec, points: np.ndarray) -> dict[str, str]:
    """Coordinate arrays that are missing, fail their checksum, or differ from the spec's values."""
    expected = {"time": np.asarray(spec.times, dtype=np.float64), "species": list(spec.model.species),
                "param": list(spec.param_names), "params": np.asarray(points, dtype=np.float64)}
    if spec.observables:  # the observables' names: a coordinate only their stores have
        expected["observable"] = [name for name, _ in spec.observables]
    problems = {}
    for name, want in expected.items():
        try:
            array = zarr.open_array(path, path=name, mode="r")
            if np.asarray(want).size and not _all_chunks_present(path, name, array):
                problems[name] = "a chunk file is missing"
                continue
            got = array[:]
        except Exception as exc:  # a missing array, a damaged zarr.json or a failed checksum
            problems[name] = f"unreadable ({store.brief(exc)})"
            continue
        if isinstance(want, list):
            same = [str(v) for v in got] == want
        else:
            same = got.shape == want.shape and bool(np.all((got == want) | (np.isnan(got) & np.isnan(want))))
        if not same:
            problems[name] = "holds other values than the spec gives"
    return problems


def _all_chunks_present(path: Path, name: str, array: zarr.Array) -> bool:
    grid = [-(-n // c) for n, c in zip(array.shape, array.chunks)]
    for coords in np.ndindex(*grid):
        if not (path / name / array.metadata.encode_chunk_key(coords)).is_file():
            return False
    return True


@dataclass
class Mended:
    """What ``mend`` repaired before a run."""

    coordinates: tuple[str, ...] = ()
    done_rebuilt: int | None = None  # tasks found complete when ``done`` was rebuilt

    def describe(self) -> list[str]:
        out = [f"rewrote the damaged coordinate {name!r} from the spec" for name in self.coordinates]
        if self.done_rebuilt is not None:
            out.append(f"the completion record was damaged: rebuilt it from the chunks, {self.done_rebuilt:,} "
                       "tasks verified complete")
        return out


def mend(spec: Spec, points: np.ndarray) -> Mended:
    """Repair what follows from the spec and the chunks; the caller holds the lock and has checked
    that the store is this spec's (``check_same_sweep``)."""
    path = spec.store
    out = Mended()
    attrs = store.attributes(path)
    if attrs.get("identity") is not None:  # without a fingerprint damage cannot be told from a change
        bad = tuple(coordinate_problems(path, spec, points))
        if bad:
            g = zarr.open_group(path, mode="r+", use_consolidated=False)
            for name in bad:
                _drop(g, path, name)
            store.write_coordinates(g, spec, points, bad, create=True)
            store.consolidate(path)
            out.coordinates = bad
    try:
        store.read_done_array(path)
    except store.DamagedDone:
        out.done_rebuilt = rebuild_done(path)
    return out


def _drop(g: zarr.Group, path: Path, name: str) -> None:
    import shutil

    if (path / name).exists():
        shutil.rmtree(path / name)


def rebuild_done(path: Path) -> int:
    """Rebuild ``done`` (and the recorded checksums) from the data chunks that exist and verify.

    A task is done when its three chunks exist and decode: zarr renames a chunk into place
    only once it is written whole, and a task's bytes do not depend on when it ran.
    Returns the number of tasks found complete.
    """
    g = zarr.open_group(path, mode="r", use_consolidated=False)
    status = g["status"]
    rpt = status.chunks[1]
    n_p, n_b = status.shape[0], -(-status.shape[1] // rpt)
    done = np.zeros((n_p, n_b), dtype=bool)
    names = store.data_arrays(g)  # with observables, when the store has them: a task owns one chunk of each
    sums = np.zeros((n_p, n_b, len(names)), dtype=np.uint32)
    arrays = [g[name] for name in names]
    for p in range(n_p):
        for b in range(n_b):
            found = [_chunk_checksum(path, name, a, p, b * rpt) for name, a in zip(names, arrays)]
            if all(s is not None for s in found):
                done[p, b] = True
                sums[p, b] = found
    store.recreate_done(path, done)
    store.write_checksums(path, sums)
    store.consolidate(path)
    return int(done.sum())


def _chunk_checksum(path: Path, name: str, array: zarr.Array, point: int, start: int) -> int | None:
    """The recorded-form checksum of a data chunk that exists and decodes, else None."""
    file = store.chunk_file(path, name, array, point, start)
    if not file.is_file():
        return None
    try:
        array[point, start:start + array.chunks[1]]
    except Exception:
        return None
    return store.trailing_checksum(file) if store.has_checksums(array) else 0


@dataclass
class Verification:
    """What ``verify`` found: bad tasks (point, block, problem), damaged coordinates and notes."""

    tasks: list[tuple[int, int, str]] = field(default_factory=list)
    coordinates: dict[str, str] = field(default_factory=dict)
    done_damaged: str | None = None
    checked: int = 0
    checksums: bool = True
    positions: bool = True
    repaired: Mended | None = None

    @property
    def sound(self) -> bool:
        return not (self.tasks or self.coordinates or self.done_damaged)


def verify(path: str | Path, repair: bool = True) -> Verification:
    """Re-read every chunk of the store; with ``repair``, unmark bad tasks and rebuild what follows
    from the spec (coordinates) and from the chunks (``done``).

    Raises
    ------
    StoreError
        No store, a damaged root ``zarr.json``, or (with ``repair``) another run holds its lock.
    """
    from sweep.store import claims, lock
    from sweep.spec import from_text

    path = Path(path)
    attrs = store.attributes(path)
    spec = from_text(attrs["spec"], attrs.get("spec_path", "spec.toml"), attrs.get("model", ""), store=path)
    points = spec.points()
    out = Verification(coordinates=coordinate_problems(path, spec, points))
    try:
        done = store.read_done(path)
    except store.DamagedDone as exc:
        out.done_damaged = str(exc)
        done = None
    g = zarr.open_group(path, mode="r", use_consolidated=False)
    arrays = {name: g[name] for name in store.data_arrays(g)}
    out.checksums = all(store.has_checksums(a) for a in arrays.values())
    sums = store.read_checksums(path)
    out.positions = sums is not None
    if done is not None:
        out.tasks, out.checked = _verify_tasks(path, arrays, done, sums)
    if repair and not out.sound:
        refuse_symlinks(path)
        me = lock.acquire(path)
        try:
            claims.settle(path)  # refuses while shards run; afterwards `done` alone is the record
            out.repaired = mend(spec, points) if attrs.get("identity") is not None or out.done_damaged else Mended()
            if out.tasks:
                done = store.read_done(path)
                for point, block, _ in out.tasks:
                    done[point, block] = False
                store.write_done(path, done)
            store.consolidate(path)
        finally:
            lock.release(path, me)
    return out


def _verify_tasks(path: Path, arrays: dict, done: np.ndarray, sums: np.ndarray | None):
    problems = []
    rpt = arrays["status"].chunks[1]
    for point, block in zip(*np.nonzero(done)):
        p, b = int(point), int(block)
        for k, (name, array) in enumerate(arrays.items()):
            problem = _chunk_problem(path, name, array, p, b * rpt, 0 if sums is None else int(sums[p, b, k]))
            if problem:
                problems.append((p, b, problem))
                break
    return problems, int(done.sum())


def _chunk_problem(path: Path, name: str, array: zarr.Array, point: int, start: int, recorded: int) -> str | None:
    file = store.chunk_file(path, name, array, point, start)
    if not file.is_file():
        return f"{name} chunk missing ({file.relative_to(path)})"
    try:
        array[point, start:start + array.chunks[1]]
    except Exception as exc:  # a failed checksum or any decode failure: the chunk is unusable
        return f"{name} chunk damaged ({file.relative_to(path)}: {store.brief(exc)})"
    if recorded and store.has_checksums(array) and store.trailing_checksum(file) != recorded:
        return (f"{name} chunk holds other bytes than its task wrote ({file.relative_to(path)}: moved, swapped "
                "or rewritten)")
    return None
