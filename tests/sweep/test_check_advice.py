"""`sweep check` says when a large network would run much faster with another exact method.

The direct method's reaction search is linear in the number of reactions (Gillespie 1977); the next
reaction method (Gibson & Bruck 2000) and composition-rejection (Slepoy, Thompson & Plimpton 2008)
grow far less, so from ``kernels.ADVISE_FROM`` reactions on the check names them."""

from __future__ import annotations

from typer.testing import CliRunner

import kernels
from sweep.cli import app


def _ring(folder, sites: int, method: str):
    species = "\n".join(f"s{i} = {5 if i == 0 else 0}" for i in range(sites))
    hops = "\n".join(f'h{i} = {{ reaction = "s{i} -> s{(i + 1) % sites}", rate = "k" }}' for i in range(sites))
    (folder / "spec.toml").write_text(
        f'[model.species]\n{species}\n[model.parameters]\nk = 1.0\n[model.reactions]\n{hops}\n'
        f'[run]\nmethod = "{method}"\nreplicates = 2\nstore = "s.zarr"\n[time]\nend = 1.0\nsamples = 2\n'
        '[design.vary]\nk = [1.0, 2.0]\n')
    return folder / "spec.toml"


def test_check_names_faster_methods_for_a_large_network(tmp_path):
    result = CliRunner().invoke(app, ["check", str(_ring(tmp_path, kernels.ADVISE_FROM, "direct"))])
    assert result.exit_code == 0, result.output
    text = " ".join(result.output.split())
    assert f"method 'direct' on {kernels.ADVISE_FROM:,} reactions" in text and "'nrm' or 'cr'" in text


def test_no_note_below_the_threshold_or_for_nrm(tmp_path):
    small = CliRunner().invoke(app, ["check", str(_ring(tmp_path, 20, "direct"))])
    large_nrm = CliRunner().invoke(app, ["check", str(_ring(tmp_path, kernels.ADVISE_FROM, "nrm"))])
    assert small.exit_code == 0 and large_nrm.exit_code == 0
    assert "note:" not in small.output and "note:" not in large_nrm.output
