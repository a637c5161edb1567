"""Reading a store's arrays and comparing two stores, as the resume, shard, packing and Slurm tests do."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import zarr

DATA = ("counts", "status", "events")  # what a task writes; the bytes a resume must reproduce
EVERYTHING = (*DATA, "done", "time", "params", "species", "param")  # and what creation writes


def arrays(path: Path, names=DATA) -> dict[str, np.ndarray]:
    """The named arrays of the store at ``path``, read whole."""
    g = zarr.open_group(path, mode="r")
    return {name: g[name][:] for name in names}


def assert_same(got: dict[str, np.ndarray], want: dict[str, np.ndarray]) -> None:
    """Two reads of ``arrays`` hold the same names and equal arrays, bit for bit."""
    assert got.keys() == want.keys()
    for name in want:
        np.testing.assert_array_equal(got[name], want[name], err_msg=name)


def assert_identical(path: Path, expected: dict[str, np.ndarray], names=DATA) -> None:
    """The store's ``names`` arrays equal ``expected``'s, bit for bit, and every task is marked done."""
    got = arrays(path, names)
    for name in names:
        np.testing.assert_array_equal(got[name], expected[name], err_msg=name)
    assert zarr.open_group(path, mode="r")["done"][:].all()
