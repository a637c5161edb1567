"""Shared fixtures: small spec files written into a temporary folder."""

from __future__ import annotations

import textwrap
from pathlib import Path

import pytest

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
