"""Shared fixtures: small spec files written into a temporary folder, and reference runs of them."""

from __future__ import annotations

import textwrap
from pathlib import Path

import pytest

import sweep
from support.stores import DATA, arrays

BIRTH_DEATH = """
[model.species]
A = 0
[model.parameters]
k = 5.0
g = 0.5
[model.reactions]
birth = { reaction = "0 -> A", rate = "k" }
death = { reaction = "A -> 0", rate = "g" }
"""


def write_spec(folder: Path, body: str, name: str = "spec.toml", model: str = BIRTH_DEATH) -> Path:
    """Write a spec made of ``model`` (inline tables) and ``body``; return its path."""
    path = folder / name
    path.write_text(textwrap.dedent(model) + "\n" + textwrap.dedent(body), encoding="utf-8")
    return path


@pytest.fixture(scope="session")
def spec_writer():
    """``write_spec`` as a fixture, for fixtures of wider scope than a test."""
    return write_spec


@pytest.fixture
def spec_file(tmp_path):
    """Factory: ``spec_file(body, **kw)`` writes a spec into tmp_path."""

    def make(body: str, **kwargs) -> Path:
        return write_spec(tmp_path, body, **kwargs)

    return make


@pytest.fixture(scope="session")
def reference_run(tmp_path_factory):
    """Factory: ``reference_run(body, model=BIRTH_DEATH, names=DATA, workers=None)`` -> (spec path,
    arrays) of one undisturbed run of the spec, made once per session for each (body, model,
    workers): in this process (one shard of one, no Dask), or on a local cluster of ``workers``.
    Every route writes the same bytes (tests/support/backend_conformance.py), so the tests that
    disturb a run compare with this one whatever route they disturb."""
    made: dict[tuple, tuple[Path, Path]] = {}

    def make(body: str, model: str = BIRTH_DEATH, names=DATA, workers: int | None = None):
        key = (body, model, workers)
        if key not in made:
            folder = tmp_path_factory.mktemp("reference")
            spec = sweep.load(write_spec(folder, body, model=model), store=folder / "ref.zarr")
            summary = sweep.run_shard(spec, 1, 1) if workers is None else sweep.run(spec, workers=workers)
            assert summary.complete
            made[key] = (spec.path, spec.store)
        path, store = made[key]
        return path, arrays(store, names)

    return make
