"""Every demo spec in configs/ is valid: `sweep check` accepts each sweep spec, and the fit specs load.

A demo that no longer loads is what a new user meets first (common practice: examples are tested)."""

from __future__ import annotations

from pathlib import Path

import pytest
from typer.testing import CliRunner

from sweep.cli import app

CONFIGS = Path(__file__).resolve().parents[2] / "configs"
PROFILES = {"slurm_site_example.toml"}  # a site profile for --profile, not a spec
MODELS = {"reporter_model.toml"}  # a model file that specs name


def _specs(fit: bool) -> list[str]:
    names = sorted(p.name for p in CONFIGS.glob("*.toml") if p.name not in PROFILES | MODELS)
    return [n for n in names if ("[fit]" in (CONFIGS / n).read_text()) == fit]


@pytest.mark.parametrize("name", _specs(fit=False))
def test_sweep_check_accepts_the_demo(name):
    result = CliRunner().invoke(app, ["check", str(CONFIGS / name)])
    assert result.exit_code == 0, result.output


@pytest.mark.parametrize("name", _specs(fit=True))
def test_the_demo_fit_spec_loads(name):
    from sweep.fit import spec as fitspec

    loaded = fitspec.load(CONFIGS / name)
    assert loaded.prior.names and loaded.observed is not None
