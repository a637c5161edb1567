"""Models from SBML (``sweep.model.sbml``): import, unit conversions, refusals, export.

Every SBML document here is written by the test through libsbml (invented models). External
references: the SBML Level 3 Version 2 Core specification (Hucka et al. 2019) for what a species
symbol means (amount with hasOnlySubstanceUnits, else concentration = amount / compartment size)
and for kinetic laws in extent per time; Gillespie (1977) for deterministic -> stochastic constants
(c = k/(N_A V) for A + B, 2k/(N_A V) for 2A, k N_A V for 0 ->); the 2019 SI value of Avogadro's
number N_A = 6.02214076e23 per mole (BIPM 2019).
"""

from __future__ import annotations

import logging
import textwrap
from pathlib import Path

import libsbml
import numpy as np
import pytest
import zarr
from distributed import LocalCluster
from typer.testing import CliRunner

import sweep
from sweep.model import expr
from sweep.spec import diff as specdiff
from sweep.cli import app
from sweep.errors import SpecError
from sweep.model import compile_network, parse_model, rate_constants
from sweep.model.sbml import read, write
from sweep.model.sbml.math import from_ast, render

runner = CliRunner()
N_A = 6.02214076e23

RUN = """
[run]
replicates = 20
replicates_per_task = 10
seed = 7
[time]
end = 4.0
samples = 9
"""


# ---- building SBML documents with libsbml ------------------------------------------------------

def sbml(species, parameters=(), reactions=(), *, compartments=(("cell", 1.0),), substance="item",
         extent=None, unit_defs=(), functions=(), edit=None) -> str:
    """An SBML L3V2 document. species: dicts (id, amount | conc, only, boundary, compartment, units);
    reactions: dicts (id, law, reactants, products, modifiers, local, reversible)."""
    doc = libsbml.SBMLDocument(3, 2)
    m = doc.createModel()
    m.setId("invented")
    if substance:
        m.setSubstanceUnits(substance)
    if extent:
        m.setExtentUnits(extent)
    for uid, kind, scale in unit_defs:
        ud = m.createUnitDefinition()
        ud.setId(uid)
        u = ud.createUnit()
        u.setKind(kind), u.setExponent(1), u.setScale(scale), u.setMultiplier(1.0)
    for cid, size in compartments:
        c = m.createCompartment()
        c.setId(cid), c.setSpatialDimensions(3), c.setConstant(True)
        if size is not None:
            c.setSize(size)
    for fid, formula in functions:
        f = m.createFunctionDefinition()
        f.setId(fid)
        f.setMath(libsbml.parseL3Formula(formula))
    for s in species:
        sp = m.createSpecies()
        sp.setId(s["id"]), sp.setCompartment(s.get("compartment", compartments[0][0]))
        sp.setHasOnlySubstanceUnits(s.get("only", True)), sp.setBoundaryCondition(s.get("boundary", False))
        sp.setConstant(False)
        if "units" in s:
            sp.setSubstanceUnits(s["units"])
        if "conc" in s:
            sp.setInitialConcentration(s["conc"])
        elif "amount" in s:
            sp.setInitialAmount(s["amount"])
    for pid, value in parameters:
        p = m.createParameter()
        p.setId(pid), p.setValue(value), p.setConstant(True)
    for r in reactions:
        _reaction(m, r)
    if edit is not None:
        edit(m)
    return libsbml.writeSBMLToString(doc)


def _reaction(m, r) -> None:
    re_ = m.createReaction()
    re_.setId(r["id"]), re_.setReversible(r.get("reversible", False))
    for sid, st in r.get("reactants", ()):
        x = re_.createReactant()
        x.setSpecies(sid), x.setStoichiometry(st), x.setConstant(True)
    for sid, st in r.get("products", ()):
        x = re_.createProduct()
        x.setSpecies(sid), x.setStoichiometry(st), x.setConstant(True)
    for sid in r.get("modifiers", ()):
        re_.createModifier().setSpecies(sid)
    law = re_.createKineticLaw()
    for pid, value in r.get("local", ()):
        lp = law.createLocalParameter()
        lp.setId(pid), lp.setValue(value)
    law.setMath(libsbml.parseL3Formula(r["law"]))


def _spec(folder: Path, name: str, model_line: str, body: str) -> Path:
    path = folder / name
    path.write_text(model_line + "\n" + textwrap.dedent(body), encoding="utf-8")
    return path


@pytest.fixture(scope="module")
def cluster():
    """A real Dask cluster (threads of this process) shared by the runs of this module."""
    with LocalCluster(n_workers=2, threads_per_worker=1, processes=False, dashboard_address=":0",
                      silence_logs=logging.CRITICAL) as c:
        yield c.scheduler_address


def _run(path: Path, store: Path, cluster: str):
    result = runner.invoke(app, ["run", str(path), "--store", str(store), "--scheduler", cluster])
    assert result.exit_code == 0, result.output
    return zarr.open_group(store, mode="r")


# ---- the same network in SBML and in our format gives the same bytes ---------------------------

MASS_ACTION_SBML = dict(
    species=[{"id": "A", "amount": 50}, {"id": "B", "amount": 40}, {"id": "C", "amount": 0},
             {"id": "D", "amount": 0}, {"id": "S", "amount": 10, "boundary": True}],
    parameters=[("k0", 5.0), ("k1", 0.01), ("k2", 0.005), ("k3", 0.004), ("g", 0.3)],
    reactions=[
        {"id": "feed", "reactants": [("S", 1)], "products": [("A", 1)], "law": "k0 * S"},
        {"id": "bind", "reactants": [("A", 1), ("B", 1)], "products": [("C", 1)], "law": "k1 * A * B"},
        # falling factorial on item amounts: already the number of pairs
        {"id": "pair", "reactants": [("A", 2)], "products": [("D", 1)], "law": "k2 * A * (A - 1) / 2"},
        # deterministic k B^2 / 2: Gillespie (1977) turns B^2 into B (B - 1), so c = k3
        {"id": "pairB", "reactants": [("B", 2)], "products": [("D", 1)], "law": "k3 * B^2 / 2"},
        {"id": "iso", "reversible": True, "reactants": [("C", 1)], "products": [("D", 1)],
         "law": "kf * C - kr * D", "local": [("kf", 0.7), ("kr", 0.2)]},
        {"id": "decay", "reactants": [("C", 1)], "products": [], "law": "cell * g * C"},
    ])

MASS_ACTION_TOML = """
[model.species]
A = 50
B = 40
C = 0
D = 0
S = 10
[model.parameters]
k0 = 5.0
k1 = 0.01
k2 = 0.005
k3 = 0.004
g = 0.3
kf = 0.7
kr = 0.2
[model.reactions]
feed = { reaction = "S -> A + S", rate = "k0" }
bind = { reaction = "A + B -> C", rate = "k1" }
pair = { reaction = "2 A -> D", rate = "k2" }
pairB = { reaction = "2 B -> D", rate = "k3" }
iso_fwd = { reaction = "C -> D", rate = "kf" }
iso_rev = { reaction = "D -> C", rate = "kr" }
decay = { reaction = "C -> 0", rate = "g" }
"""


def test_mass_action_network_runs_bit_identical_to_our_format(tmp_path, cluster):
    (tmp_path / "net.xml").write_text(sbml(**MASS_ACTION_SBML), encoding="utf-8")
    body = RUN + "[design.vary]\nk1 = [0.01, 0.02]\n"
    from_sbml = _spec(tmp_path, "sbml.toml", 'model = "net.xml"', body)
    ours = _spec(tmp_path, "ours.toml", MASS_ACTION_TOML, body)
    spec = sweep.load(from_sbml)
    assert all(r.propensity is None for r in spec.model.reactions), "mass action must use the fast path"
    assert [r.equation for r in spec.model.reactions] == [r.equation for r in sweep.load(ours).model.reactions]
    got = _run(from_sbml, tmp_path / "sbml.zarr", cluster)
    want = _run(ours, tmp_path / "ours.zarr", cluster)
    np.testing.assert_array_equal(got["counts"][:], want["counts"][:])
    np.testing.assert_array_equal(got["events"][:], want["events"][:])
    assert (got["counts"][:, :, :, 4] == 10).all(), "the boundary species S is held fixed"
    assert got["counts"][:, :, -1, 2].max() > 0


NAMED_SBML = dict(
    species=[{"id": "S", "amount": 300}, {"id": "P", "amount": 0}, {"id": "X", "amount": 0},
             {"id": "Y", "amount": 0}],
    parameters=[("v", 40.0), ("K", 25.0), ("h", 2.0), ("vr", 30.0), ("Kr", 10.0), ("g", 0.5)],
    functions=[("activation", "lambda(x, vmax, K, n, vmax * x^n / (K^n + x^n))")],
    reactions=[
        {"id": "convert", "reactants": [("S", 1)], "products": [("P", 1)], "law": "Vmax * S / (Km + S)",
         "local": [("Vmax", 60.0), ("Km", 80.0)]},
        {"id": "express", "products": [("X", 1)], "modifiers": ["P"], "law": "activation(P, v, K, h)"},
        {"id": "repress", "products": [("Y", 1)], "modifiers": ["X"], "law": "vr * Kr^2 / (Kr^2 + X^2)"},
        {"id": "loss", "reactants": [("X", 1)], "law": "g * X"},
    ])

NAMED_TOML = """
[model.species]
S = 300
P = 0
X = 0
Y = 0
[model.parameters]
v = 40.0
K = 25.0
h = 2.0
vr = 30.0
Kr = 10.0
g = 0.5
Vmax = 60.0
Km = 80.0
[model.reactions]
convert = { reaction = "S -> P", propensity = "michaelis(S, Vmax, Km)" }
express = { reaction = "0 -> X", propensity = "hill_up(P, v, K, h)" }
repress = { reaction = "0 -> Y", propensity = "hill_down(X, vr, Kr, 2)" }
loss = { reaction = "X -> 0", rate = "g" }
"""


def test_michaelis_menten_and_hill_laws_import_as_the_named_laws(tmp_path, cluster):
    # Michaelis & Menten (1913) vmax S/(Km + S); Hill (1910) vmax x^n/(K^n + x^n) and its repressor form
    (tmp_path / "laws.xml").write_text(sbml(**NAMED_SBML), encoding="utf-8")
    from_sbml = _spec(tmp_path, "sbml.toml", 'model = "laws.xml"', RUN)
    ours = _spec(tmp_path, "ours.toml", NAMED_TOML, RUN)
    laws = {r.name: r.propensity.text for r in sweep.load(from_sbml).model.reactions if r.propensity}
    assert laws == {"convert": "michaelis(S, convert__Vmax, convert__Km)",
                    "express": "hill_up(P, v, K, h)",  # function definition inlined, then recognised
                    "repress": "hill_down(X, vr, Kr, 2)"}
    got = _run(from_sbml, tmp_path / "sbml.zarr", cluster)
    want = _run(ours, tmp_path / "ours.zarr", cluster)
    np.testing.assert_array_equal(got["counts"][:], want["counts"][:])
    assert got["counts"][:, :, -1, 1].min() > 0


# ---- amounts and concentrations --------------------------------------------------------------

def test_concentrations_and_amounts_convert_to_counts(tmp_path):
    mole, nano = libsbml.UNIT_KIND_MOLE, "nanomole"
    v_cell = 1e-15                     # litres (1 fL)
    v_nuc = 1.66053906717385e-16       # litres, so that N_A * 1e-9 * v_nuc = 0.1 molecule per nM
    text = sbml(
        species=[
            {"id": "U", "conc": 50.0, "only": False},                         # 50 nM in cell
            {"id": "B", "conc": 1.0, "only": False},                          # 1 nM in cell
            {"id": "W", "conc": 2e16, "only": False, "units": "item"},        # items per litre
            {"id": "Y", "conc": 600.0, "only": False, "compartment": "nucleus"},
            {"id": "Z", "amount": 1e-21, "units": "mole"},                    # an amount in mole
        ],
        parameters=[("k", 1e6), ("k0", 1e-9), ("d", 0.1), ("vmax", 2.0), ("Km", 40.0)],
        compartments=(("cell", v_cell), ("nucleus", v_nuc)), substance=nano, unit_defs=[(nano, mole, -9)],
        reactions=[
            {"id": "bind", "reactants": [("U", 1), ("B", 1)], "products": [("W", 1)], "law": "cell * k * U * B"},
            {"id": "pair", "reactants": [("U", 2)], "products": [("W", 1)], "law": "cell * k * U^2"},
            {"id": "make", "products": [("U", 1)], "law": "cell * k0"},
            {"id": "decay", "reactants": [("U", 1)], "law": "cell * d * U"},
            {"id": "use", "reactants": [("Y", 1)], "law": "nucleus * vmax * Y / (Km + Y)"},
        ])
    (tmp_path / "conc.xml").write_text(text, encoding="utf-8")
    spec = sweep.load(_spec(tmp_path, "s.toml", 'model = "conc.xml"', RUN))
    counts = dict(zip(spec.model.species, spec.model.initial))
    # U: 50 nM * 1e-9 mol/nmol * 1e-15 L * 6.02214076e23 /mol = 30.1107038 -> rounded to 30
    # B: 1 nM -> 1e-9 * 1e-15 * 6.02214076e23 = 0.602214076 -> rounded to 1
    # W: 2e16 items/L * 1e-15 L = 20 molecules exactly (item: one molecule per unit)
    # Y: 600 nM * 1e-9 * 1.66053906717385e-16 L * 6.02214076e23 = 60.0000000 -> 60
    # Z: an amount, 1e-21 mol * 6.02214076e23 = 602.214076 -> 602
    assert counts == {"U": 30, "B": 1, "W": 20, "Y": 60, "Z": 602}
    notes = dict((e, t) for e, t in spec.model_notes if e.startswith("species"))
    assert "rounded to 30" in notes["species U"] and "rounded to" not in notes["species W"]

    values = spec.values_at(spec.points()[0])
    c = dict(zip([r.name for r in spec.model.reactions], rate_constants(spec.model, values)))
    omega = N_A * 1e-9 * v_cell  # molecules per nM in the cell: 0.602214076
    # Gillespie (1977), with k in per-nM per-s: c = k/(N_A V) for A + B, 2k/(N_A V) for 2A, k0 N_A V for 0 ->
    assert c["bind"] == pytest.approx(1e6 / omega, rel=1e-12)         # 1.66053906717385e6 per s
    assert c["pair"] == pytest.approx(2 * 1e6 / omega, rel=1e-12)
    assert c["make"] == pytest.approx(1e-9 * omega, rel=1e-12)        # 6.02e-10 molecules per s
    assert c["decay"] == pytest.approx(0.1, rel=1e-12)                # first order: no volume factor
    # Michaelis-Menten in concentrations: a = N_A V * vmax * [Y]/(Km + [Y]), [Y] = n / (N_A 1e-9 V_nuc)
    use = next(r for r in spec.model.reactions if r.name == "use")
    assert use.propensity.text.startswith("michaelis(Y, ")
    n = 60.0
    y = n / (N_A * 1e-9 * v_nuc)       # 600 nM
    want = (N_A * 1e-9 * v_nuc) * 2.0 * y / (40.0 + y)   # 0.1 * 2 * 600 / 640 = 0.1875 molecules/s
    assert expr.evaluate(use.propensity, {**values, "Y": n}) == pytest.approx(want, rel=1e-12)
    assert want == pytest.approx(0.1875, rel=1e-9)


# ---- round trip ------------------------------------------------------------------------------

ROUND_TRIP = {
    "species": {"A": 20, "B": "b0", "C": 0, "P": 3},
    "parameters": {"k0": 2.0, "k1": 0.05, "k2": 0.01, "k3": 0.002, "g": 0.4, "b0": 7.0, "vm": 5.0, "K": 8.0},
    "reactions": {
        "make": {"reaction": "0 -> A", "rate": "k0"},
        "bind": {"reaction": "A + B -> C", "rate": "k1"},
        "pair": {"reaction": "2 A -> C", "rate": "k2"},
        "triple": {"reaction": "3 B -> A", "rate": "k3"},
        "fixed": {"reaction": "C -> B", "rate": 0.25},
        "mm": {"reaction": "C -> P", "propensity": "michaelis(C, vm, K)"},
        "hill": {"reaction": "0 -> P", "propensity": "hill_down(A, vm, K, 2) + 0.1 * sqrt(B)"},
        "mixed": {"reaction": "P -> 0", "propensity": "max(g * P - 1, 0) + exp(-K) * log(1 + A) / 3"},
    },
}


def _imported_values(imported) -> dict:
    values = dict(imported.table["parameters"])
    for name, text in imported.derived:
        values[name] = float(expr.evaluate(expr.parse(text, "x", name), values))
    return values


@pytest.mark.parametrize("units", [None, {"constants": "molar", "volume": 2e-15}])
def test_round_trip_gives_the_same_network(units):
    table = dict(ROUND_TRIP, **({"units": units} if units else {}))
    if units:  # concentration laws are not compared bit for bit after conversion: keep mass action
        table["reactions"] = {n: r for n, r in ROUND_TRIP["reactions"].items() if "rate" in r}
    model = parse_model(table, "ours.toml")
    text = write(model)
    doc = libsbml.readSBMLFromString(text)
    doc.checkConsistency()
    errors = [doc.getError(i).getMessage() for i in range(doc.getNumErrors())
              if doc.getError(i).getSeverity() >= libsbml.LIBSBML_SEV_ERROR]
    assert errors == []
    imported = read(text, "ours.xml")
    again = parse_model(imported.table, "ours.xml")
    assert again.species == model.species and again.initial == model.initial
    assert [r.equation for r in again.reactions] == [r.equation for r in model.reactions]
    a, b = compile_network(model), compile_network(again)
    for got, want in zip(b.arrays, a.arrays):
        np.testing.assert_array_equal(got, want)
    assert b.law == a.law  # the generated rate-law source: same trees, same parameter slots
    np.testing.assert_array_equal(rate_constants(again, _imported_values(imported)),
                                  rate_constants(model, model.parameter_values))


# ---- refusals --------------------------------------------------------------------------------

BASE = dict(species=[{"id": "A", "amount": 5}, {"id": "B", "amount": 0}],
            parameters=[("k", 1.0)],
            reactions=[{"id": "r1", "reactants": [("A", 1)], "products": [("B", 1)], "law": "k * A"}])


def _event(m):
    e = m.createEvent()
    e.setId("pulse"), e.setUseValuesFromTriggerTime(True)
    t = e.createTrigger()
    t.setInitialValue(False), t.setPersistent(True), t.setMath(libsbml.parseL3Formula("time > 5"))
    a = e.createEventAssignment()
    a.setVariable("A"), a.setMath(libsbml.parseL3Formula("10"))
    # events are read since issue 16 (tests/sweep/test_interventions_spec.py); a delay is still refused
    e.createDelay().setMath(libsbml.parseL3Formula("1"))


def _variable(m, pid):
    p = m.createParameter()
    p.setId(pid), p.setValue(1.0), p.setConstant(False)


def _rate_rule(m):
    _variable(m, "q")
    m.createRateRule().setVariable("q"), m.getRateRule("q").setMath(libsbml.parseL3Formula("k"))


def _assignment_rule(m):
    _variable(m, "q")
    rule = m.createAssignmentRule()
    rule.setVariable("q"), rule.setMath(libsbml.parseL3Formula("2 * k"))


def _algebraic_rule(m):
    _variable(m, "q")
    m.createAlgebraicRule().setMath(libsbml.parseL3Formula("q - 2"))


def _law(formula):
    return lambda m: m.getReaction("r1").getKineticLaw().setMath(libsbml.parseL3Formula(formula))


def _compartment_assignment(m):
    a = m.createInitialAssignment()
    a.setSymbol("cell"), a.setMath(libsbml.parseL3Formula("2"))


def _constraint(m):
    c = m.createConstraint()
    c.setId("cap"), c.setMath(libsbml.parseL3Formula("A < 1000"))


def _half_stoichiometry(m):
    m.getReaction("r1").getProduct(0).setStoichiometry(0.5)


def _reversible_net(m):
    r = m.getReaction("r1")
    r.setReversible(True)
    # the backward part reads A, a reactant only: not a difference of a forward and a backward law
    r.getKineticLaw().setMath(libsbml.parseL3Formula("k * A / (1 + A) - k * B * A"))


def _conversion_factor(m):
    m.setConversionFactor("k")


def _no_size(m):
    m.getCompartment("cell").unsetSize()
    m.getSpecies("A").setHasOnlySubstanceUnits(False)  # a concentration needs the size


def _no_units(m):
    m.unsetSubstanceUnits()


def _grams(m):
    m.setSubstanceUnits("gram")


def _no_initial(m):
    m.getSpecies("A").unsetInitialAmount()


def _keyword(m):
    p = m.createParameter()
    p.setId("lambda"), p.setValue(1.0), p.setConstant(True)


REFUSED = {
    "event with a delay": (_event, "event pulse: a delay is not supported"),
    "rate rule (direct method)": (_rate_rule, "rate rule for q: a rate rule changes its variable"),
    "algebraic rule": (_algebraic_rule, "algebraic rule"),
    "initial assignment to a compartment": (_compartment_assignment, "initial assignment to cell"),
    "constraint": (_constraint, "constraint cap"),
    "delay": (_law("k * delay(A, 1)"), "reaction r1 kinetic law: delay"),
    # SBML L3V2 section 3.4.9: without <otherwise> the value is undefined when no piece holds
    "piecewise without otherwise": (_law("piecewise(k * A, A > 2)"), "reaction r1 kinetic law: piecewise without"),
    "time (direct method)": (_law("k * A * time"), "reaction r1: its law reads the time csymbol"),
    "arcsin": (_law("k * arcsin(A)"), "reaction r1 kinetic law: the function 'arcsin'"),
    "non-integer stoichiometry": (_half_stoichiometry, "reaction r1: product B has stoichiometry 0.5"),
    "reversible net law": (_reversible_net, "reaction r1: reversible"),
    "conversion factor": (_conversion_factor, "model conversionFactor k"),
    "compartment without size": (_no_size, "compartment cell: no size, and species A in it is a concentration"),
    "undeclared substance units": (_no_units, "species A: substance units not declared"),
    "grams": (_grams, "'gram' is not a substance unit"),
    "reserved word": (_keyword, "id 'lambda': a reserved word"),
    "species without an initial value": (_no_initial, "species A: no initialAmount, initialConcentration"),
}


@pytest.mark.parametrize("case", sorted(REFUSED))
def test_unsupported_elements_are_refused_by_id(tmp_path, case):
    edit, fragment = REFUSED[case]
    (tmp_path / "m.xml").write_text(sbml(**BASE, edit=edit), encoding="utf-8")
    path = _spec(tmp_path, "s.toml", 'model = "m.xml"', RUN)
    result = runner.invoke(app, ["check", str(path)])
    assert result.exit_code == 2, result.output
    assert fragment in " ".join(result.output.split()), result.output
    assert "m.xml" in result.output


def test_every_unsupported_element_is_listed_at_once(tmp_path):
    def many(m):
        _event(m), _algebraic_rule(m), _law("k * delay(A, 1)")(m)

    with pytest.raises(SpecError) as info:
        read(sbml(**BASE, edit=many), "m.xml")
    message = str(info.value)
    assert "3 unsupported element(s)" in message
    for fragment in ("event pulse", "algebraic rule", "delay"):
        assert fragment in message


def test_required_package_is_refused():
    doc = libsbml.readSBMLFromString(sbml(**BASE))
    doc.enablePackage(libsbml.CompExtension.getXmlnsL3V1V1(), "comp", True)
    doc.setPackageRequired("comp", True)
    with pytest.raises(SpecError, match="package 'comp'"):
        read(libsbml.writeSBMLToString(doc), "m.xml")


def test_fast_reactions_are_refused():
    doc = libsbml.readSBMLFromString(sbml(**BASE))
    doc.setLevelAndVersion(3, 1, False)      # fast= exists up to Level 3 Version 1
    doc.getModel().getReaction("r1").setFast(True)
    with pytest.raises(SpecError, match="reaction r1: fast=true"):
        read(libsbml.writeSBMLToString(doc), "m.xml")


def test_initial_assignments_become_derived_parameters(tmp_path):
    def assign(m):
        for symbol, formula in (("A", "n0"), ("k", "2 * k_half"), ("B", "n0 / 5")):
            a = m.createInitialAssignment()
            a.setSymbol(symbol), a.setMath(libsbml.parseL3Formula(formula))

    text = sbml(species=[{"id": "A"}, {"id": "B", "conc": 0.0, "only": False}],
                parameters=[("n0", 10.0), ("k_half", 0.25), ("k", 0.0)],
                compartments=(("cell", 2.0),), edit=assign,
                reactions=[{"id": "r1", "reactants": [("A", 1)], "products": [("B", 1)], "law": "k * A"}])
    (tmp_path / "m.xml").write_text(text, encoding="utf-8")
    spec = sweep.load(_spec(tmp_path, "s.toml", 'model = "m.xml"', RUN + "[design.vary]\nn0 = [10.0, 20.0]\n"))
    assert spec.model.initial == ("n0", "B__initial")
    values = spec.values_at(spec.points()[1])
    # A = n0 items; k = 2 k_half; B is a concentration (items per size 2): count = 2 * n0 / 5
    assert values["n0"] == 20.0 and values["k"] == 0.5 and values["B__initial"] == 8.0


def test_modifiers_of_mass_action_laws_become_catalysts():
    text = sbml(species=[{"id": "S", "amount": 9}, {"id": "E", "amount": 2}, {"id": "P", "amount": 0}],
                parameters=[("k", 0.3)],
                reactions=[{"id": "cat", "reactants": [("S", 1)], "products": [("P", 1)], "modifiers": ["E"],
                            "law": "k * E * S", "reversible": True}])
    imported = read(text, "m.xml")
    assert imported.table["reactions"]["cat"] == {"reaction": "S + E -> P + E", "rate": "k"}
    assert any("runs forward only" in note for _, note in imported.notes)


# ---- names in a spec -------------------------------------------------------------------------

LOCAL = dict(species=[{"id": "A", "amount": 0}],
             parameters=[("k", 4.0)],
             reactions=[{"id": "make", "products": [("A", 1)], "law": "k"},
                        {"id": "decay", "reactants": [("A", 1)], "law": "g * A", "local": [("g", 0.5)]},
                        {"id": "pair", "reactants": [("A", 2)], "law": "g * A^2", "local": [("g", 0.01)]}])


def test_local_parameters_are_named_reaction_dot_id(tmp_path):
    (tmp_path / "m.xml").write_text(sbml(**LOCAL), encoding="utf-8")
    body = RUN + '[parameters]\n"pair.g" = 0.02\n[design.vary]\n"decay.g" = [0.25, 0.5]\n'
    spec = sweep.load(_spec(tmp_path, "s.toml", 'model = "m.xml"', body))
    assert spec.param_names == ("decay__g",)
    values = spec.values_at(spec.points()[1])
    assert values["decay__g"] == 0.5 and values["pair__g"] == 0.02
    # 2A with a deterministic law g A^2: c = 2 g (Gillespie 1977), derived at every point
    assert values["pair__c"] == pytest.approx(0.04)
    # unquoted TOML (a nested table) and [derived] with dotted names work too
    body = RUN + '[parameters]\npair.g = 0.03\n[derived]\n"decay.g" = "2 * pair.g"\n'
    spec = sweep.load(_spec(tmp_path, "t.toml", 'model = "m.xml"', body))
    values = spec.values_at(spec.points()[0])
    assert values["decay__g"] == pytest.approx(0.06) and values["pair__c"] == pytest.approx(0.06)


def test_a_constant_the_import_derives_cannot_be_set(tmp_path):
    (tmp_path / "m.xml").write_text(sbml(**LOCAL), encoding="utf-8")
    path = _spec(tmp_path, "s.toml", 'model = "m.xml"', RUN + "[parameters]\npair__c = 1.0\n")
    result = runner.invoke(app, ["check", str(path)])
    assert result.exit_code == 2
    assert "parameters.pair__c" in result.output and "computed by the SBML import" in result.output


# ---- pieces ----------------------------------------------------------------------------------

@pytest.mark.parametrize("formula, value", [
    ("log(2, 8)", 3.0), ("root(3, 27)", 3.0), ("sqrt(16)", 4.0), ("abs(-2.5)", 2.5), ("exp(0) + ln(1)", 1.0),
    ("min(3, 1, 2) * max(4, 5)", 5.0), ("2^3^2", 512.0), ("-(1 - 4) / 2", 1.5), ("10 - 4 - 3", 3.0),
    ("12 / 3 / 2", 2.0), ("avogadro / 6.02214076e23", 1.0),
])
def test_math_walk_and_text_read_back_to_the_same_value(formula, value):
    problems: list[str] = []
    tree = from_ast(libsbml.parseL3Formula(formula), {}, {}, problems, "law")
    assert problems == []
    text = render(tree)
    assert expr.evaluate(expr.parse(text, "x", "f"), {}) == pytest.approx(value, rel=1e-12), text


def test_level_2_documents_are_converted(tmp_path):
    doc = libsbml.readSBMLFromString(sbml(**BASE))
    doc.setLevelAndVersion(2, 4, False)
    model = parse_model(read(libsbml.writeSBMLToString(doc), "l2.xml").table, "l2.xml")
    assert model.reactions[0].rate == "k" and model.initial == (5, 0)


def test_sbml_model_text_enters_the_resume_digest():
    text = sbml(**BASE)
    assert "model file SHA-256" in specdiff.content('model = "m.xml"', text)
    assert specdiff.digest("", text) != specdiff.digest("", text.replace('value="1"', 'value="2"'))


def test_example_config_passes_check():
    result = runner.invoke(app, ["check", "configs/toggle_sbml.toml"])
    assert result.exit_code == 0, result.output
    assert "Imported from SBML" in result.output and "hill_down(V" in result.output


def test_export_model_command_writes_consistent_sbml(tmp_path):
    for source in ("configs/reporter.toml", "configs/toggle_sbml.toml"):
        out = tmp_path / (Path(source).stem + ".xml")
        result = runner.invoke(app, ["export-model", source, "--out", str(out)])
        assert result.exit_code == 0, result.output
        doc = libsbml.readSBMLFromString(out.read_text(encoding="utf-8"))
        assert doc.getLevel() == 3 and doc.getVersion() == 2
        doc.checkConsistency()
        assert doc.getNumErrors(libsbml.LIBSBML_SEV_ERROR) == 0
        assert all(s.getHasOnlySubstanceUnits() for s in doc.getModel().getListOfSpecies())
    before = out.read_text(encoding="utf-8")
    again = runner.invoke(app, ["export-model", "configs/reporter.toml", "--out", str(out)])
    assert again.exit_code == 2 and "already exists" in again.output
    assert out.read_text(encoding="utf-8") == before, "nothing already written is lost"
