"""Write one task's data chunks fast and durably, on a worker, with handles opened once per process.

A task writes three chunks (``counts``, ``status``, ``events``; four with ``observables``) that no other
writer touches.
Going through zarr for each costs an open of the group, its metadata and three round trips
through zarr's event loop (about 10 ms a task here); this writer reads the three arrays'
metadata once per worker process and store, encodes each chunk with the array's own codec
chain (little-endian bytes, Blosc, CRC-32C: the same bytes zarr writes, checked by a test),
and writes it once: to a temporary file beside its final name, fsynced, renamed into place.

Durability, and which fsyncs remain (each needed for the chunk to survive a machine crash
before ``done`` marks its task):

- the chunk's own file, once written, before the rename (its data);
- the chunk's folder after the rename (the new directory entry);
- a folder's parent, only when that folder was created by this write (its entry is new).

A task of several blocks commits them as a group (``group_commit``): every chunk file is
written first, then all are fsynced at once from a few threads (the file system folds
concurrent fsyncs into one journal commit), renamed, and each folder touched is fsynced once.
The worker returns, and the client marks the blocks done, only after the commit.

Handles are cached per (store path, store id): the id is a random value written at the
store's creation, so a store deleted and created again at the same path (``--fresh``) is
opened afresh. A store whose arrays use another codec chain is written through zarr.
"""

from __future__ import annotations

import contextlib
import math
import os
import threading
import uuid
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from pathlib import Path
from typing import ClassVar, Iterator

import numpy as np

from sweep.store import durable
from sweep.errors import StoreError

_FLAGS = os.O_WRONLY | os.O_CREAT | os.O_EXCL | os.O_NOFOLLOW
FSYNC_THREADS = 8
_fsyncs: ThreadPoolExecutor | None = None


def _fsync_all(paths) -> None:
    """fsync every path, concurrently (a file's dirty pages are its inode's: any descriptor flushes them)."""
    global _fsyncs
    paths = list(paths)
    if len(paths) <= 1:
        for path in paths:
            durable.fsync(path)
        return
    if _fsyncs is None:
        _fsyncs = ThreadPoolExecutor(FSYNC_THREADS, thread_name_prefix="sweep:fsync")
    for _ in _fsyncs.map(durable.fsync, paths):
        pass  # re-raises the first OSError


def thread_lock_for_blosc() -> None:
    """Let numcodecs guard Blosc's global state with a thread lock instead of a multiprocessing one.

    Its default is a named POSIX semaphore, which multiprocessing's resource tracker must remove
    if this process is killed, and warns about at the client's exit. A local run ends its workers
    with SIGKILL (``sweep.execute.local._close``), and Slurm may too. Blosc's state belongs to
    this process alone and its tasks run in threads, so a thread lock is the guard it needs.
    Called by every task (``sweep.execute.worker.run_task``), before any chunk is encoded,
    through this writer or zarr's.
    """
    import threading

    from numcodecs import blosc

    if not getattr(blosc, "_MUTEX_IS_INIT", True):
        blosc._MUTEX, blosc._MUTEX_IS_INIT = threading.Lock(), True


@dataclass
class _Array:
    """What encoding one array's chunk needs: chunk shape, dtype, fill value, codecs, key layout."""

    name: str
    chunks: tuple[int, ...]
    dtype: np.dtype
    fill: object
    blosc: object | None  # numcodecs.Blosc matching the array's BloscCodec
    crc: bool
    separator: str

    def key(self, point: int, block: int) -> str:
        coords = (point, block) + (0,) * (len(self.chunks) - 2)
        return "c" + self.separator + self.separator.join(map(str, coords))

    def encode(self, values: np.ndarray) -> tuple[bytes, int]:
        """The chunk file's bytes and its trailing CRC-32C (0 when the array keeps none)."""
        import google_crc32c

        block = np.full(self.chunks, self.fill, dtype=self.dtype)
        block.reshape((self.chunks[1], -1))[:values.shape[0]] = values.reshape((values.shape[0], -1))
        data = np.ascontiguousarray(block.astype(self.dtype.newbyteorder("<"), copy=False))
        payload = bytes(self.blosc.encode(data)) if self.blosc is not None else data.tobytes()
        if not self.crc:
            return payload, 0
        crc = google_crc32c.value(payload)
        return payload + crc.to_bytes(4, "little"), crc

    def decode(self, data: bytes, where: str) -> np.ndarray:
        """One chunk file's values, in the chunk's shape (the inverse of ``encode``).

        Raises
        ------
        StoreError
            If the trailing CRC-32C does not match, or the chunk does not decode to its shape.
        """
        import google_crc32c

        from numcodecs import blosc

        if self.crc:
            data, stored = data[:-4], int.from_bytes(data[-4:], "little")
            if google_crc32c.value(data) != stored:
                raise StoreError(f"{where}: checksum mismatch (the chunk file is damaged)")
        raw = blosc.decompress(data) if self.blosc is not None else data  # Blosc frames say their own settings
        values = np.frombuffer(raw, dtype=self.dtype.newbyteorder("<"))
        size = math.prod(self.chunks)
        if values.size != size:
            raise StoreError(f"{where}: decodes to {values.size} values, not the chunk's {size}")
        return values.reshape(self.chunks).astype(self.dtype, copy=False)


class ChunkWriter:
    """One store's data arrays, opened once per process (``ChunkWriter.of``)."""

    _open: ClassVar[dict[tuple[str, str], "ChunkWriter | None"]] = {}
    NAMES = ("counts", "status", "events")

    def __init__(self, root: Path, arrays: dict[str, _Array]):
        self.root = root
        self.real_root = os.path.realpath(root)
        self.arrays = arrays
        self._known_dirs: set[str] = set()  # chunk folders already checked (inside the store) or made
        self._group = threading.local()  # a thread's group commit: workers may run tasks in threads

    @property
    def _pending(self) -> list[tuple[Path, Path]] | None:
        """The (temporary, final) files of this thread's group commit; None outside one."""
        return getattr(self._group, "pending", None)

    @property
    def _made_in(self) -> set[Path]:
        """Parents of the folders made during this thread's group commit."""
        return self._group.made_in

    @classmethod
    def of(cls, root: str | Path, store_id: str) -> "ChunkWriter | None":
        """The cached writer of the store at ``root`` with id ``store_id``; None if its arrays
        need zarr's own path (an unknown codec chain)."""
        key = (str(root), store_id)
        if key not in cls._open:
            cls._open[key] = cls._load(Path(root))
        return cls._open[key]

    @classmethod
    def _load(cls, root: Path) -> "ChunkWriter | None":
        import zarr
        from numcodecs import Blosc
        from zarr.codecs import BloscCodec, BytesCodec, Crc32cCodec

        g = zarr.open_group(root, mode="r")
        arrays = {}
        # the observables array only exists in a store whose model has observables (sweep.store.layout)
        for name in cls.NAMES + (("observables",) if "observables" in g else ()):
            meta = g[name].metadata
            codecs = list(meta.codecs)
            if not codecs or not isinstance(codecs[0], BytesCodec) or (codecs[0].endian is not None
                                                                        and codecs[0].endian.value != "little"):
                return None
            rest = codecs[1:]
            crc = bool(rest) and isinstance(rest[-1], Crc32cCodec)
            rest = rest[:-1] if crc else rest
            blosc = None
            if rest:
                if len(rest) != 1 or not isinstance(rest[0], BloscCodec):
                    return None
                b = rest[0]
                shuffle = {"noshuffle": Blosc.NOSHUFFLE, "shuffle": Blosc.SHUFFLE,
                           "bitshuffle": Blosc.BITSHUFFLE}[b.shuffle.value]
                blosc = Blosc(cname=b.cname.value, clevel=b.clevel, shuffle=shuffle, blocksize=b.blocksize)
            encoding = meta.chunk_key_encoding
            separator = getattr(encoding, "separator", "/")
            if getattr(encoding, "name", "default") != "default":
                return None
            arrays[name] = _Array(name, tuple(meta.chunks), np.dtype(meta.dtype.to_native_dtype()),
                                  meta.fill_value, blosc, crc, separator)
        return cls(root, arrays)

    def write(self, name: str, point: int, block: int, values: np.ndarray) -> int:
        """Write one chunk durably; return its CRC-32C (0 if the array keeps none).

        Raises
        ------
        StoreError
            If the chunk's folder leads out of the store through a symlink.
        """
        array = self.arrays[name]
        data, crc = array.encode(values)
        relative = f"{name}/{array.key(point, block)}"
        target = self.root / relative
        self._folder(target.parent)
        remove_stale(target)
        tmp = target.with_name(f"{target.name}.{uuid.uuid4().hex}.partial")  # as zarr names its own
        fd = os.open(tmp, _FLAGS, 0o644)
        try:
            os.write(fd, data)
            if self._pending is None:
                os.fsync(fd)
        finally:
            os.close(fd)
        if self._pending is not None:
            self._pending.append((tmp, target))
            return crc
        os.replace(tmp, target)
        durable.fsync(target.parent)
        return crc

    @contextlib.contextmanager
    def group(self) -> Iterator[None]:
        """Commit the chunks written inside as one group, durably, when the block ends without error."""
        if self._pending is not None:  # already in a group: the outer one commits
            yield
            return
        self._group.pending, self._group.made_in = [], set()
        try:
            yield
            pending, made_in = self._pending, self._made_in
            _fsync_all(tmp for tmp, _ in pending)
            for tmp, target in pending:
                os.replace(tmp, target)
            _fsync_all({target.parent for _, target in pending} | made_in)
        finally:
            for tmp, _ in self._pending or ():
                with contextlib.suppress(OSError):
                    os.unlink(tmp)  # only files not renamed: a failed group leaves no partials
            self._group.pending, self._group.made_in = None, set()

    def _folder(self, folder: Path) -> None:
        """Make sure the chunk's folder exists inside the store; fsync the parents of folders made."""
        key = str(folder)
        if key in self._known_dirs:
            return
        missing = []
        node = folder
        while not node.is_dir():
            missing.append(node)
            node = node.parent
        for made in reversed(missing):
            try:
                os.mkdir(made)
            except FileExistsError:
                pass
            if self._pending is not None:
                self._made_in.add(made.parent)
            else:
                durable.fsync(made.parent)
        real = os.path.realpath(folder)
        if not (real == self.real_root or real.startswith(self.real_root + os.sep)):
            raise StoreError(f"{self.root}: {folder.relative_to(self.root)} leads out of the store through a "
                             "symlink; refusing to write there")
        self._known_dirs.add(key)


def read_whole(root: str | Path, name: str) -> np.ndarray | None:
    """Every value of a data array, read chunk by chunk without zarr.

    zarr spends about 0.5 ms on each chunk: reading the ``status`` of a 100,000-task store took
    about a minute, and a fit's read-back of each batch a quarter of a second. Reading the files
    directly takes a tenth of that. Chunks never written read as the fill value, as through
    zarr. Returns None when the array's codec chain is not the one this module writes, or its
    chunks split more than the point and replicate axes (the caller reads through zarr).

    Raises
    ------
    StoreError
        If a chunk fails its checksum or does not decode.
    """
    import zarr

    root = Path(root)
    writer = ChunkWriter._load(root)
    if writer is None or name not in writer.arrays:
        return None
    array = writer.arrays[name]
    shape = tuple(zarr.open_array(root / name, mode="r").shape)
    if len(shape) < 2 or tuple(array.chunks[2:]) != shape[2:]:
        return None
    rows, per = array.chunks[0], array.chunks[1]
    n_p, n_b = -(-shape[0] // rows), -(-shape[1] // per)
    out = np.full((n_p * rows, n_b * per) + shape[2:], array.fill, dtype=array.dtype)
    folder = os.path.join(root, name)
    for p in range(n_p):
        for b in range(n_b):
            key = array.key(p, b)
            try:
                with open(os.path.join(folder, key), "rb", buffering=0) as fh:
                    data = fh.readall()
            except FileNotFoundError:
                continue
            out[p * rows:(p + 1) * rows, b * per:(b + 1) * per] = array.decode(data, f"{name}/{key}")
    return out[:shape[0], :shape[1]]


def remove_stale(target: Path) -> int:
    """Delete the temporary files a killed writer left for this chunk (``<name>.<uuid>.partial``).

    A chunk has one writer at a time (its task), and a task writes each chunk once, so any such
    file beside it is a dead writer's; it is removed before the chunk is written again.
    """
    removed = 0
    prefix = target.name + "."
    try:
        entries = list(os.scandir(target.parent))
    except FileNotFoundError:
        return 0
    for entry in entries:
        if entry.name.startswith(prefix) and entry.name.endswith(".partial"):
            with contextlib.suppress(FileNotFoundError):
                os.unlink(entry.path)
                removed += 1
    return removed


@contextlib.contextmanager
def group_commit(root: str | Path, store_id: str) -> Iterator[None]:
    """Inside, ``write_block`` to this store defers its fsyncs to one group commit at the end
    (``ChunkWriter.group``); a store written through zarr commits each chunk as before."""
    writer = ChunkWriter.of(root, store_id) if store_id else None
    if writer is None:
        yield
        return
    with writer.group():
        yield
