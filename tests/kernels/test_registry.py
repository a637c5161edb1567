"""The method registry (``kernels.METHODS``) and the shared wrapper (``kernels.blocks``).

Plain contract checks: what the rest of the program reads from a record without importing the
kernel agrees with the kernel itself.
"""

from __future__ import annotations

import sys

import numpy as np
import pytest
from support.kernel_conformance import immigration_death, mixed_network, seeds

import kernels
from kernels import blocks


def test_registry_does_not_import_numba():
    """``import kernels`` (``sweep --help``, ``sweep check``) reads records without numba."""
    import subprocess

    code = "import kernels, sys; kernels.record('direct').counts_dtype; print('numba' in sys.modules)"
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "False"


@pytest.mark.parametrize("name", sorted(kernels.METHODS))
def test_record_matches_its_module(name):
    rec = kernels.METHODS[name]
    module = kernels.get(name)
    assert module.__name__ == rec.module
    assert hasattr(module, "simulate")
    assert hasattr(module, "trace") == rec.trace
    assert rec.events in ("events", "steps", "evaluations")
    assert rec.summary
    case = immigration_death()
    res = module.simulate(case.net, case.rates, case.x0, np.linspace(0.0, 2.0, 3), seeds(2), 10_000)
    assert res.counts.dtype == rec.counts_dtype
    if rec.exact:
        assert not rec.deterministic and rec.counts_dtype == np.int32


def test_derived_views():
    assert kernels.OPTIONS == {n: dict(m.options) for n, m in kernels.METHODS.items() if m.options}
    assert kernels.OPTIONS["tau_leap"] == {"epsilon": "fraction"}
    assert kernels.DETERMINISTIC == frozenset({"ode"})
    assert kernels.get("direct") is sys.modules["kernels.direct"]


def test_a_module_name_registered_as_a_string_reads_as_defaults(monkeypatch):
    """Tests register stand-in kernels by module name alone; they read as int32, events, no options."""
    monkeypatch.setitem(kernels.METHODS, "standin", "kernels.direct")
    rec = kernels.record("standin")
    assert rec.module == "kernels.direct" and rec.counts_dtype == np.int32 and rec.events == "events"
    assert kernels.get("standin") is sys.modules["kernels.direct"]
    with pytest.raises(KeyError):
        kernels.record("nothing")


def test_suggest_by_network_size():
    assert kernels.suggest(4) == "direct"
    assert kernels.suggest(kernels.SUGGEST_NRM_FROM) == "nrm"
    assert kernels.suggest(kernels.SUGGEST_CR_FROM - 1) == "nrm"
    assert kernels.suggest(kernels.SUGGEST_CR_FROM) == "cr"
    assert all(kernels.suggest(n) in kernels.METHODS for n in (1, 100, 10**6))


@pytest.mark.parametrize("name", [n for n, m in kernels.METHODS.items() if not m.deterministic])
def test_blocks_run_equals_simulate_and_fills_aux(name):
    """``blocks.run`` is what every module's ``simulate`` calls; ``aux`` is zero unless the method
    uses it (the Langevin kernel's clips)."""
    case = mixed_network()
    times = np.linspace(0.0, 5.0, 6)
    res, aux = blocks.run(name, case.net, case.rates, case.x0, times, seeds(4), 10_000)
    again = kernels.get(name).simulate(case.net, case.rates, case.x0, times, seeds(4), 10_000)
    for a, b in zip(res, again):
        np.testing.assert_array_equal(a, b)
    assert aux.shape == (4,) and aux.dtype == np.int64
    if name != "cle":
        assert (aux == 0).all()


def test_bad_option_is_a_value_error():
    case = immigration_death()
    with pytest.raises(ValueError, match="epsilon"):
        blocks.simulate("tau_leap", case.net, case.rates, case.x0, [0.0, 1.0], seeds(1), 10, epsilon=-1.0)
    with pytest.raises(ValueError, match="dt"):
        blocks.simulate("cle", case.net, case.rates, case.x0, [0.0, 1.0], seeds(1), 10, dt=0.0)
