"""Custom rate laws (Hill, Michaelis–Menten, free expressions) in every kernel.

Exact references: the stationary distribution of a one-species birth–death chain with any birth
rate lambda(n) and death rate mu(n), pi(n) proportional to prod_{i<n} lambda(i)/mu(i+1) (detailed
balance; Gardiner 2004, Handbook of Stochastic Methods, 3rd ed., Springer, the master equation
chapter, ch. 7 from memory), and finite state projections of
the master equation (Munsky & Khammash 2006) built here from the same formulas written in plain
Python. Goodness of fit: chi-square at ALPHA = 0.001 with fixed seeds.
"""

from __future__ import annotations

import numpy as np
import pytest
from support.kernel_conformance import seeds
from support.exact import fsp, marginal, pooled_chisquare

import kernels
from sweep.model import AVOGADRO, compile_network, initial_counts, parse_model, rate_constants

ALPHA = 0.001
EXACT = ("direct", "nrm")
CAP = 1_000_000


def _model(species, parameters, reactions, units=None):
    table = {"species": species, "parameters": parameters, "reactions": reactions}
    if units:
        table["units"] = units
    return parse_model(table, "<test>")


def _run(method, model, times, n, root):
    values = model.parameter_values
    res = kernels.get(method).simulate(compile_network(model), rate_constants(model, values),
                                       initial_counts(model, values), np.asarray(times, dtype=float),
                                       seeds(n, root=root), CAP)
    assert (res.status == 0).all()
    return res


# --- a self-repressing gene: 0 -> P at hill_down(P, vmax, K, n), P -> 0 at g P -----------------
VMAX, K, N_HILL, G = 30.0, 10.0, 2.0, 1.0


def _self_repressor(propensity):
    return _model({"P": 0}, {"vmax": VMAX, "K": K, "n": N_HILL, "g": G},
                  {"make": {"reaction": "0 -> P", "propensity": propensity},
                   "decay": {"reaction": "P -> 0", "rate": "g"}})


def _hill_down(x):
    return VMAX * K ** N_HILL / (K ** N_HILL + x ** N_HILL)


def _birth_death_stationary(birth, death, n_max):
    """pi(n) ~ prod_{i<n} birth(i) / death(i+1) (detailed balance, Gardiner 2004, 3rd ed.)."""
    log_w = np.zeros(n_max)
    for n in range(1, n_max):
        log_w[n] = log_w[n - 1] + np.log(birth(n - 1)) - np.log(death(n))
    w = np.exp(log_w - log_w.max())
    return w / w.sum()


@pytest.mark.parametrize("method", EXACT)
def test_self_repressing_gene_is_the_exact_birth_death_chain(method):
    """Stationary P (t = 15, relaxation time 1/g = 1) against the detailed-balance distribution."""
    res = _run(method, _self_repressor("hill_down(P, vmax, K, n)"), [0.0, 15.0], 4000, root=61)
    pmf = _birth_death_stationary(_hill_down, lambda n: G * n, 80)
    assert pooled_chisquare(res.counts[:, -1, 0], pmf).pvalue > ALPHA


def test_birth_death_reference_has_power():
    """The same samples reject the stationary law of the activating variant (a wrong law)."""
    res = _run("direct", _self_repressor("hill_down(P, vmax, K, n)"), [0.0, 15.0], 4000, root=61)
    wrong = _birth_death_stationary(lambda x: VMAX * x ** 2 / (K ** 2 + x ** 2) + 1.0, lambda n: G * n, 80)
    assert pooled_chisquare(res.counts[:, -1, 0], wrong).pvalue < 1e-6


# --- a repressor R that is made and degraded, read by P's law as a modifier ---------------------
def _repressed_gene():
    return _model({"R": 0, "P": 0}, {"kr": 2.0, "gr": 1.0, "vmax": 12.0, "K": 1.5, "n": 2.0, "g": 1.0},
                  {"r_make": {"reaction": "0 -> R", "rate": "kr"}, "r_decay": {"reaction": "R -> 0", "rate": "gr"},
                   "p_make": {"reaction": "0 -> P", "propensity": "hill_down(R, vmax, K, n)"},
                   "p_decay": {"reaction": "P -> 0", "rate": "g"}})


def _repressed_gene_fsp(t):
    """FSP with R capped at 25 and P at 70 (stationary mass beyond them < 1e-15)."""
    hill = lambda r: 12.0 * 1.5 ** 2 / (1.5 ** 2 + r ** 2)  # noqa: E731
    reactions = [(lambda x: 2.0 if x[0] < 25 else 0.0, (1, 0)), (lambda x: 1.0 * x[0], (-1, 0)),
                 (lambda x: hill(x[0]) if x[1] < 70 else 0.0, (0, 1)), (lambda x: 1.0 * x[1], (0, -1))]
    return fsp((0, 0), reactions, t, max_states=40_000)


@pytest.mark.parametrize("method", EXACT)
def test_modifier_in_a_law_updates_the_propensity(method):
    """P's production reads R, which only other reactions change: unless the dependency graph
    links R's reactions to P's law, the P distribution at t = 2 is wrong. Against the FSP."""
    res = _run(method, _repressed_gene(), [0.0, 2.0], 4000, root=62)
    pmf = marginal(*_repressed_gene_fsp(2.0), 1)
    assert pooled_chisquare(res.counts[:, -1, 1], pmf).pvalue > ALPHA


# --- Michaelis–Menten conversion S -> P, a closed network -----------------------------------------
@pytest.mark.parametrize("method", EXACT)
def test_michaelis_menten_law_matches_fsp(method):
    """S -> P at michaelis(S, vmax, Km) = vmax S / (Km + S), S0 = 20: distribution of P at t = 2."""
    model = _model({"S": 20, "P": 0}, {"vmax": 6.0, "Km": 8.0},
                   {"convert": {"reaction": "S -> P", "propensity": "michaelis(S, vmax, Km)"}})
    res = _run(method, model, [0.0, 2.0], 4000, root=63)
    states, probs = fsp((20, 0), [(lambda x: 6.0 * x[0] / (8.0 + x[0]), (-1, 1))], 2.0)
    assert pooled_chisquare(res.counts[:, -1, 1], marginal(states, probs, 1)).pvalue > ALPHA


# --- a named law and its spelled-out expression give the same bytes in every method -------------
SPELLED = {
    "hill_down(R, vmax, K, n)": "vmax * K**n / (K**n + R**n)",
    "hill_up(R, vmax, K, n)": "vmax * R**n / (K**n + R**n)",
    "michaelis(R, vmax, K)": "vmax * R / (K + R)",
}


def _gene(propensity):
    return _model({"R": 20, "P": 0}, {"kr": 1.0, "gr": 0.05, "vmax": 10.0, "K": 15.0, "n": 2.0, "g": 0.1},
                  {"r_make": {"reaction": "0 -> R", "rate": "kr"}, "r_decay": {"reaction": "R -> 0", "rate": "gr"},
                   "p_make": {"reaction": "0 -> P", "propensity": propensity},
                   "p_decay": {"reaction": "P -> 0", "rate": "g"}})


@pytest.mark.parametrize("method", sorted(kernels.METHODS))
@pytest.mark.parametrize("named", sorted(SPELLED))
def test_named_law_equals_spelled_out_expression(method, named):
    times = np.linspace(0.0, 40.0, 9)
    a = _run(method, _gene(named), times, 50, root=64)
    b = _run(method, _gene(SPELLED[named]), times, 50, root=64)
    assert a.counts.tobytes() == b.counts.tobytes() and a.events.tobytes() == b.events.tobytes()


def test_mass_action_written_as_a_law_is_the_same_process():
    """k * A * B as a custom law is the mass-action A + B propensity: same bytes from the direct
    method (both read the same random numbers and compute c A B in the same order)."""
    common = {"species": {"A": 30, "B": 20, "C": 0}, "parameters": {"k": 0.01}}
    mass = _model(**common, reactions={"bind": {"reaction": "A + B -> C", "rate": "k"}})
    law = _model(**common, reactions={"bind": {"reaction": "A + B -> C", "propensity": "k * A * B"}})
    times = np.linspace(0.0, 5.0, 6)
    assert _run("direct", mass, times, 100, 65).counts.tobytes() == _run("direct", law, times, 100, 65).counts.tobytes()


def test_negative_or_nan_law_means_the_reaction_cannot_fire():
    """k * (A - 5) is negative below A = 5: clamped to 0, so A never drops below 4 there."""
    model = _model({"A": 10}, {"k": 1.0}, {"decay": {"reaction": "A -> 0", "propensity": "k * (A - 5)"}})
    res = _run("direct", model, [0.0, 100.0], 200, root=66)
    assert (res.counts[:, -1, 0] == 5).all()


# --- units: deterministic constants in mol/L with a volume ----------------------------------------
def test_molar_constants_convert_as_gillespie_1977():
    """Gillespie (1977), J. Phys. Chem. 81:2340: c = k/(N_A V) for A + B, c = 2k/(N_A V) for 2A,
    c = k for first order, and c = k N_A V for 0 -> (k in M/s). Worked by hand for V = 1 fl:
    N_A V = 6.02214076e23 * 1e-15 = 602214076; A + B with k = 1e6 /M/s gives 1.66054e-3 /s."""
    omega = AVOGADRO * 1e-15
    assert omega == pytest.approx(602_214_076.0)
    model = _model({"A": 0, "B": 0, "C": 0}, {"kab": 1e6, "kaa": 1e6, "kd": 0.5, "ks": 1e-9},
                   {"bind": {"reaction": "A + B -> C", "rate": "kab"},
                    "dimer": {"reaction": "2 A -> C", "rate": "kaa"},
                    "decay": {"reaction": "C -> 0", "rate": "kd"},
                    "source": {"reaction": "0 -> A", "rate": "ks"}},
                   units={"constants": "molar", "volume": 1e-15})
    c = rate_constants(model, model.parameter_values)
    np.testing.assert_allclose(c, [1e6 / omega, 2e6 / omega, 0.5, 1e-9 * omega], rtol=1e-15)
    assert c[0] == pytest.approx(1.66054e-3, rel=1e-5)
    assert c[3] == pytest.approx(0.602214076, rel=1e-12)


def test_molar_law_reads_concentrations():
    """In molar units a law is a rate in M/s of concentrations: a(S) = N_A V f(S / (N_A V)).
    michaelis with vmax = 1e-9 M/s and Km = 1e-6 M in 1 fl: S = 602 molecules is
    602/602214076 = 0.99964e-6 M, so a = 602214076 * 1e-9 * 0.99964e-6 / (1e-6 + 0.99964e-6)
    = 0.602214 * 0.49991 = 0.30105 /s. The
    direct method's first waiting time is then exponential with that rate (Gillespie 1976)."""
    model = _model({"S": 602, "P": 0}, {"vmax": 1e-9, "Km": 1e-6},
                   {"convert": {"reaction": "S -> P", "propensity": "michaelis(S, vmax, Km)"}},
                   units={"constants": "molar", "volume": 1e-15})
    omega = AVOGADRO * 1e-15
    a = omega * 1e-9 * (602 / omega) / (1e-6 + 602 / omega)
    assert a == pytest.approx(0.30105, rel=1e-4)
    res = _run("direct", model, [0.0, 1.0], 4000, root=67)
    fired = (res.counts[:, -1, 1] > 0).mean()
    # P(at least one event by t = 1) = 1 - exp(-a): 0.2599; binomial SE 0.0069, 4.5 SE tolerance
    assert abs(fired - (1 - np.exp(-a))) < 4.5 * np.sqrt(0.26 * 0.74 / 4000)


# --- laws compiled into the event loop (kernels.ratelaw.specialised) -------------------------------

@pytest.mark.parametrize("method", ["direct", "nrm", "tau_leap", "cle"])
def test_inline_laws_give_the_callbacks_bytes(method):
    """The laws compiled into the event loop (hoisted constants, spelled-out named laws, integer
    powers by multiplication) give the same bytes as the C callbacks they replace, on a model with
    every construct. Reproducibility against the earlier code, not science: that is the rest of
    this file."""
    import test_recorded_outputs as rec
    from kernels.ratelaw import RateLaw

    for n in (2.0, 1.7, 3.0):
        net, rates, x0 = rec._laws(n)
        callbacks = net._replace(law=RateLaw(net.law.source))  # no inline form: the address path
        times = np.linspace(0.0, 30.0, 7)
        kernel = kernels.get(method)
        a = kernel.simulate(net, rates, x0, times, seeds(20, root=68), CAP)
        b = kernel.simulate(callbacks, rates, x0, times, seeds(20, root=68), CAP)
        for got, want in zip(a, b):
            assert got.tobytes() == want.tobytes(), (method, n)


def test_specialised_kernel_is_used_and_keyed_by_the_laws():
    """A law model runs a generated module holding its laws; another model gets another module."""
    from kernels import blocks

    one = _self_repressor("hill_down(P, vmax, K, n)")
    two = _self_repressor("hill_up(P, vmax, K, n) + 1")
    run1, law1 = blocks.loop("direct", compile_network(one), rate_constants(one, one.parameter_values))
    run2, _ = blocks.loop("direct", compile_network(two), rate_constants(two, two.parameter_values))
    assert run1.py_func.__module__.startswith("stochsweep_direct_")
    assert run1.py_func.__module__ != run2.py_func.__module__
    # K ** n and vmax * K ** n computed once per block: 30 * 10**2 and 10**2, plus the parameter n
    assert law1 == (3000.0, 100.0, 2.0)


def test_rate_law_pickles_as_its_two_texts():
    import pickle

    net = compile_network(_self_repressor("hill_down(P, vmax, K, n)"))
    data = pickle.dumps(net.law)
    assert len(data) < 4 * (len(net.law.source) + len(net.law.inline))
    back = pickle.loads(data)
    assert back == net.law and back.inline == net.law.inline


def test_compiled_reports_the_disk_cache(tmp_path, monkeypatch):
    """``kernels.compiled`` is False for a law model never compiled here and True once it ran: what
    ``sweep plan`` counts as a compile. Mass action is always compiled (the package's kernels)."""
    monkeypatch.setenv("SWEEP_CACHE_DIR", str(tmp_path))
    monkeypatch.delenv("NUMBA_CACHE_DIR", raising=False)
    model = _self_repressor("hill_down(P, vmax, K, n) + 0.125")  # a law no other test compiles
    net = compile_network(model)
    assert not kernels.compiled("direct", net)
    _run("direct", model, [0.0, 1.0], 2, root=69)
    assert kernels.compiled("direct", net)
    assert kernels.compiled("direct", compile_network(_model({"A": 1}, {}, {"d": {"reaction": "A -> 0", "rate": 1.0}})))


# --- integer powers by multiplication: the same bits as pow ---------------------------------------

def test_integer_powers_of_counts_equal_pow():
    """``kernels.ratelaw.ipow`` multiplies for exponents 1 to 4 when the result is below 2**53; that
    is only the same bits as ``pow`` if pow returns the exact result whenever it is a double. Checked
    here, with the pow the kernels call (numba's, i.e. the C library's): every count below 2**20,
    200 000 random counts up to the 2**53 bound per exponent, the powers of two and their neighbours,
    and the fallback above the bound. (IEEE 754 requires pow to be exact only in special cases; the
    C library's is accurate to well under one unit in the last place, which makes exact results exact.)
    """
    import numba

    from kernels.ratelaw import ipow

    @numba.njit(error_model="numpy")
    def mismatches(bases, e):
        bad = 0
        for b in bases:
            if ipow(b, e) != b ** e:
                bad += 1
        return bad

    rng = np.random.default_rng(2026)
    for e in (1.0, 2.0, 3.0, 4.0):
        bound = 2.0 ** (53.0 / e)
        edges = np.array([2.0**k + d for k in range(int(53 / e) + 1) for d in (-1.0, 0.0, 1.0)])
        bases = np.concatenate([np.arange(2.0**20), np.floor(rng.uniform(0, bound, 200_000)), edges,
                                np.floor(rng.uniform(bound, 4 * bound, 1000)), -np.arange(1000.0)])
        assert mismatches(bases, e) == 0, e
    assert mismatches(np.arange(100.0), 2.5) == 0  # not whole: pow itself
