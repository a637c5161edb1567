"""The worker's own chunk writer writes exactly the bytes zarr writes, and reads back through zarr.

Reference: zarr itself (``zarr.Array.__setitem__`` with the store's codec chain), the open
implementation of the Zarr v3 format; the writer must be a faster path to the same files.
"""

from __future__ import annotations

import numpy as np
import pytest
import zarr

from kernels.network import KernelResult
from sweep import store
from sweep.store import layout
from sweep.store.chunks import ChunkWriter

DTYPES = {"int32": -1, "float64": -1.0}


def _twin_stores(tmp_path, dtype, n_r=25, rb=10, n_t=7, n_s=3):
    """Two stores of identical layout: one written by zarr, one by ChunkWriter."""
    paths = []
    for name in ("zarr", "ours"):
        g = zarr.open_group(tmp_path / name, mode="w")
        g.attrs["store_id"] = "x"
        layout._array(g, "counts", (2, n_r, n_t, n_s), (1, rb, n_t, n_s), dtype, -1,
                     ("point", "replicate", "time", "species"), layout._WRITE_EMPTY)
        layout._array(g, "status", (2, n_r), (1, rb), "int8", -1, ("point", "replicate"), layout._WRITE_EMPTY)
        layout._array(g, "events", (2, n_r), (1, rb), "int64", -1, ("point", "replicate"), layout._WRITE_EMPTY)
        paths.append(tmp_path / name)
    return paths


@pytest.mark.parametrize("dtype", sorted(DTYPES))
def test_the_same_bytes_as_zarr_full_edge_and_fill_valued_chunks(tmp_path, dtype):
    by_zarr, ours = _twin_stores(tmp_path, dtype)
    rng = np.random.default_rng(3)
    blocks = [(0, 0, 10), (0, 10, 20), (1, 20, 25), (1, 0, 10)]  # (1, 20:25) is the short edge chunk
    for point, start, stop in blocks:
        n = stop - start
        counts = rng.integers(0, 500, size=(n, 7, 3)).astype(dtype)
        if (point, start) == (1, 0):
            counts[:] = -1  # a block equal to the fill value (every replicate failed) is still written
        result = KernelResult(counts, rng.integers(0, 3, size=n).astype(np.int8),
                              rng.integers(0, 10**6, size=n).astype(np.int64))
        g = zarr.open_group(by_zarr, mode="r+")
        for name, values in zip(store.DATA_ARRAYS, result):
            g[name].with_config(layout._WRITE_EMPTY)[point, start:stop] = values
        sums = store.write_block(ours, point, start, stop, result, store_id="x")
        for name, crc in zip(store.DATA_ARRAYS, sums):
            key = f"{name}/c/{point}/{start // 10}" + ("/0/0" if name == "counts" else "")
            assert (ours / key).read_bytes() == (by_zarr / key).read_bytes(), key
            assert crc == store.trailing_checksum(ours / key)
    a, b = zarr.open_group(by_zarr, mode="r"), zarr.open_group(ours, mode="r")
    for name in store.DATA_ARRAYS:
        np.testing.assert_array_equal(a[name][:], b[name][:])
    assert not list(ours.rglob("*.partial"))


def test_a_store_created_again_at_the_same_path_is_opened_afresh(tmp_path):
    by_zarr, ours = _twin_stores(tmp_path, "int32")
    w1 = ChunkWriter.of(ours, "x")
    assert ChunkWriter.of(ours, "x") is w1
    assert ChunkWriter.of(ours, "y") is not w1  # another id: the store was created anew


def test_a_chunk_written_over_is_replaced_whole(tmp_path):
    _, ours = _twin_stores(tmp_path, "int32")
    for value in (5, 7):
        block = KernelResult(np.full((10, 7, 3), value, np.int32), np.zeros(10, np.int8), np.zeros(10, np.int64))
        store.write_block(ours, 0, 0, 10, block, store_id="x")
    assert (zarr.open_group(ours, mode="r")["counts"][0, :10] == 7).all()


def _block(value, n=10):
    return KernelResult(np.full((n, 7, 3), value, np.int32), np.zeros(n, np.int8), np.full(n, value, np.int64))


def test_a_group_commit_renames_at_its_end_and_a_failed_one_leaves_nothing(tmp_path):
    from sweep.store.chunks import group_commit

    _, ours = _twin_stores(tmp_path, "int32")
    with group_commit(ours, "x"):
        store.write_block(ours, 0, 0, 10, _block(4), store_id="x")
        assert not (ours / "status" / "c" / "0" / "0").exists()  # not in place before the commit
        assert list(ours.rglob("*.partial"))
    assert (zarr.open_group(ours, mode="r")["counts"][0, :10] == 4).all()
    with pytest.raises(RuntimeError):
        with group_commit(ours, "x"):
            store.write_block(ours, 1, 0, 10, _block(6), store_id="x")
            raise RuntimeError("the kernel failed mid-task")
    assert not list(ours.rglob("*.partial"))
    assert not (ours / "status" / "c" / "1" / "0").exists()


def test_group_commits_in_threads_of_one_worker_stay_apart(tmp_path):
    """A Dask worker may run tasks in several threads: each thread's group is its own."""
    import threading

    from sweep.store.chunks import group_commit

    by_zarr, ours = _twin_stores(tmp_path, "int32", n_r=40)
    barrier = threading.Barrier(2)

    def task(point):
        with group_commit(ours, "x"):
            for b in range(4):
                store.write_block(ours, point, 10 * b, 10 * b + 10, _block(point * 10 + b), store_id="x")
                if b == 1:
                    barrier.wait()  # both groups are open at once
    threads = [threading.Thread(target=task, args=(p,)) for p in (0, 1)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    counts = zarr.open_group(ours, mode="r")["counts"][:]
    for point in (0, 1):
        for b in range(4):
            assert (counts[point, 10 * b:10 * b + 10] == point * 10 + b).all()
    assert not list(ours.rglob("*.partial"))


def test_a_dead_writers_partial_goes_when_its_chunk_is_written_again(tmp_path):
    """A resume lists no folder of the store's data: the next writer of a chunk tidies its leftovers."""
    _, ours = _twin_stores(tmp_path, "int32")
    folder = ours / "status" / "c" / "0"
    folder.mkdir(parents=True)
    (folder / "0.0123abcd.partial").write_bytes(b"torn")  # a writer killed before its rename
    (folder / "1.0123abcd.partial").write_bytes(b"torn")  # another chunk's: left for its own writer
    store.write_block(ours, 0, 0, 10, _block(3), store_id="x")
    assert sorted(p.name for p in folder.iterdir()) == ["0", "1.0123abcd.partial"]


def test_a_whole_array_read_file_by_file_equals_zarrs_read_and_refuses_a_damaged_chunk(tmp_path):
    """``read_whole`` (`sweep status`, a fit's read-back) gives zarr's values: full, edge and never-written chunks."""
    from sweep.errors import StoreError
    from sweep.store.chunks import read_whole

    _, ours = _twin_stores(tmp_path, "int32")
    rng = np.random.default_rng(5)
    for point, start, stop in [(0, 0, 10), (0, 20, 25), (1, 10, 20)]:  # (0, 10:20) and (1, 0:10) never written
        n = stop - start
        store.write_block(ours, point, start, stop,
                          KernelResult(rng.integers(0, 9, size=(n, 7, 3)).astype(np.int32),
                                       rng.integers(0, 3, size=n).astype(np.int8),
                                       rng.integers(0, 10**6, size=n).astype(np.int64)), store_id="x")
    g = zarr.open_group(ours, mode="r")
    for name in ("counts", "status", "events"):
        direct = read_whole(ours, name)
        np.testing.assert_array_equal(direct, g[name][:])
        assert direct.dtype == g[name].dtype and (direct[1, :10] == -1).all() and direct[0, 10:20].min() == -1
    chunk = ours / "status/c/1/1"
    raw = bytearray(chunk.read_bytes())
    raw[len(raw) // 2] ^= 0xFF
    chunk.write_bytes(bytes(raw))
    with pytest.raises(StoreError, match="status/c/1/1: checksum mismatch"):
        read_whole(ours, "status")
