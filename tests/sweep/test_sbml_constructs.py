"""SBML constructs the import reads since issue 16, each with an import test.

Every document is invented and built here through libsbml. External references, named beside
each check: the SBML Level 3 Version 2 Core specification (Hucka et al. 2019, "L3V2" below) for
what each construct means; Gillespie (1977) for c = k/(N_A V)-type conversions; the 2019 SI value
of Avogadro's number (BIPM 2019); scipy's solve_ivp (Virtanen et al. 2020) for the ODE; closed-form
solutions of the rate equations written beside the tests that use them.
"""

from __future__ import annotations

import textwrap

import libsbml
import numpy as np
import pytest
import zarr
from typer.testing import CliRunner

import kernels
import sweep
from kernels import ode
from sweep.cli import app
from sweep.errors import SpecError
from sweep.model import compile_network, initial_counts, rate_constants
from sweep.model import expr
from sweep.model.sbml import read

runner = CliRunner()
N_A = 6.02214076e23  # BIPM 2019


def doc(species, parameters=(), reactions=(), *, compartments=(("cell", 1.0),), substance="item",
        edit=None) -> str:
    """An SBML L3V2 document; species dicts (id, amount | conc, only), reactions dicts (id, law, ...)."""
    d = libsbml.SBMLDocument(3, 2)
    m = d.createModel()
    m.setId("invented")
    if substance:
        m.setSubstanceUnits(substance)
        m.setExtentUnits(substance)
    for cid, size in compartments:
        c = m.createCompartment()
        c.setId(cid), c.setSpatialDimensions(3), c.setConstant(True)
        if size is not None:
            c.setSize(size)
    for s in species:
        sp = m.createSpecies()
        sp.setId(s["id"]), sp.setCompartment(compartments[0][0]), sp.setConstant(False)
        sp.setHasOnlySubstanceUnits(s.get("only", True)), sp.setBoundaryCondition(s.get("boundary", False))
        if "conc" in s:
            sp.setInitialConcentration(s["conc"])
        elif "amount" in s:
            sp.setInitialAmount(s["amount"])
    for pid, value in parameters:
        p = m.createParameter()
        p.setId(pid), p.setConstant(False)
        if value is not None:
            p.setValue(value)
    for r in reactions:
        x = m.createReaction()
        x.setId(r["id"]), x.setReversible(r.get("reversible", False))
        for sid, st in r.get("reactants", ()):
            ref = x.createReactant()
            ref.setSpecies(sid), ref.setStoichiometry(st), ref.setConstant(True)
        for sid, st in r.get("products", ()):
            ref = x.createProduct()
            ref.setSpecies(sid), ref.setStoichiometry(st), ref.setConstant(True)
        x.createKineticLaw().setMath(libsbml.parseL3Formula(r["law"]))
    if edit is not None:
        edit(m)
    return libsbml.writeSBMLToString(d)


def rule(m, target, formula, kind="assignment"):
    r = m.createAssignmentRule() if kind == "assignment" else m.createRateRule()
    r.setVariable(target), r.setMath(libsbml.parseL3Formula(formula))


def spec_file(tmp_path, xml: str, method="direct", body="", name="s.toml", top=""):
    (tmp_path / "m.xml").write_text(xml, encoding="utf-8")
    replicates = 1 if method == "ode" else 20
    text = (f'model = "m.xml"\n{top}[run]\nmethod = "{method}"\nreplicates = {replicates}\nseed = 11\n'
            f"[time]\nend = 4.0\nsamples = 9\n" + textwrap.dedent(body))
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    return path


def solve(spec):
    values = spec.values_at(spec.points()[0])
    res = kernels.get(spec.method).simulate(compile_network(spec.model), rate_constants(spec.model, values),
                                            initial_counts(spec.model, values), np.asarray(spec.times),
                                            [np.random.SeedSequence(1)], spec.max_events)
    return res


# ---- assignment rules (L3V2 section 4.11.3: the rule holds at every instant) ----------------

RULED = dict(species=[{"id": "A", "amount": 40}, {"id": "B", "amount": 0}],
             parameters=[("k", 0.2), ("T", None)],
             reactions=[{"id": "r1", "reactants": [("A", 1)], "products": [("B", 1)], "law": "T"}])


def test_assignment_rule_is_inlined_into_the_law_that_reads_it():
    imported = read(doc(**RULED, edit=lambda m: rule(m, "T", "k * A")), "m.xml")
    # T = k A is inlined: the law is mass action k A (its dependency graph follows A)
    assert imported.table["reactions"]["r1"] == {"reaction": "A -> B", "rate": "k"}
    assert "T" not in imported.table["parameters"]
    assert dict(imported.observables) == {"T": "k * A"}


def test_assignment_rule_model_gives_the_same_bytes_as_our_toml(tmp_path):
    """The same experiment written in SBML with a rule and in our TOML stores the same bytes."""
    xml = doc(**RULED, edit=lambda m: rule(m, "T", "k * A / (1 + B)"))
    from_sbml = sweep.load(spec_file(tmp_path, xml), store=tmp_path / "a.zarr")
    ours_path = tmp_path / "ours.toml"
    ours_path.write_text(textwrap.dedent("""
        [model.species]
        A = 40
        B = 0
        [model.parameters]
        k = 0.2
        [model.reactions]
        r1 = { reaction = "A -> B", propensity = "k * A / (1 + B)" }
        [run]
        method = "direct"
        replicates = 20
        seed = 11
        [time]
        end = 4.0
        samples = 9
        """), encoding="utf-8")
    ours = sweep.load(ours_path, store=tmp_path / "b.zarr")
    sweep.run_shard(from_sbml, 1, 1)
    sweep.run_shard(ours, 1, 1)
    a, b = zarr.open_group(tmp_path / "a.zarr", mode="r"), zarr.open_group(tmp_path / "b.zarr", mode="r")
    assert a["counts"][:].tobytes() == b["counts"][:].tobytes()
    assert a["events"][:].tobytes() == b["events"][:].tobytes()
    assert a["counts"][0, :, -1, 1].max() > 0


def test_a_law_reading_a_refused_rule_names_the_rule():
    with pytest.raises(SpecError) as info:
        read(doc(**RULED, edit=lambda m: rule(m, "T", "k * delay(A, 1)")), "m.xml")
    assert "reads T, which is set by the assignment rule for T" in str(info.value)
    assert "not a species, parameter or compartment" not in str(info.value)


def test_rule_set_species_is_not_a_state_variable():
    def edit(m):
        s = m.createSpecies()
        s.setId("total"), s.setCompartment("cell"), s.setHasOnlySubstanceUnits(True), s.setConstant(False)
        s.setBoundaryCondition(False)
        rule(m, "total", "A + 2 * B")
    imported = read(doc(**RULED, edit=lambda m: (edit(m), rule(m, "T", "k * A"))), "m.xml")
    assert "total" not in imported.table["species"]
    assert dict(imported.observables)["total"] == "A + 2 * B"


# ---- initial assignments over species (L3V2 section 4.12) -------------------------------------

def test_initial_assignment_reads_another_species_initial_value():
    def edit(m):
        a = m.createInitialAssignment()
        a.setSymbol("B"), a.setMath(libsbml.parseL3Formula("2 * A + k"))
    imported = read(doc(**dict(RULED, parameters=[("k", 0.2)], reactions=[
        {"id": "r1", "reactants": [("A", 1)], "products": [("B", 1)], "law": "k * A"}]), edit=edit), "m.xml")
    assert imported.table["species"]["B"] == "B__initial"
    values = dict(imported.table["parameters"])
    text = dict(imported.derived)["B__initial"]
    # 2 * 40 + 0.2 = 80.2 molecules, rounded to a whole count as a literal amount is
    assert expr.evaluate(expr.parse(text, "x", "B__initial"), values) == 80.0


# ---- reversible laws: F * (forward - backward) --------------------------------------------------

REV = dict(species=[{"id": "A", "amount": 30}, {"id": "B", "amount": 5}],
           parameters=[("kf", 0.3), ("kr", 0.1), ("Vf", 2.0), ("Vr", 1.0), ("Ka", 4.0), ("Kb", 6.0)],
           compartments=(("comp", 2.0),))


@pytest.mark.parametrize("law", ["comp * (kf * A - kr * B)", "(kf * A - kr * B) * comp", "comp * kf * A - comp * kr * B",
                                 "-(comp * kr * B) + comp * kf * A"])
def test_factored_reversible_mass_action_law_splits_in_any_arrangement(law):
    """A bug before issue 16: the factored form was refused while the expanded one was split."""
    imported = read(doc(**REV, reactions=[{"id": "iso", "reactants": [("A", 1)], "products": [("B", 1)],
                                           "law": law, "reversible": True}]), "m.xml")
    reactions = imported.table["reactions"]
    assert reactions["iso_fwd"]["reaction"] == "A -> B" and reactions["iso_rev"]["reaction"] == "B -> A"
    values = dict(imported.table["parameters"])
    for name, text in imported.derived:
        values[name] = expr.evaluate(expr.parse(text, "x", name), values)
    # items in a compartment of size 2: c = comp * k (Gillespie 1977 with beta = 1)
    assert values[reactions["iso_fwd"]["rate"]] == pytest.approx(0.6)
    assert values[reactions["iso_rev"]["rate"]] == pytest.approx(0.2)


def test_reversible_non_mass_action_law_splits_into_two_laws():
    """(f - g) / D with f over the reactants and g over the products: two channels f/D and g/D."""
    law = "comp * (Vf * A / Ka - Vr * B / Kb) / (1 + A / Ka + B / Kb)"
    imported = read(doc(**REV, reactions=[{"id": "enz", "reactants": [("A", 1)], "products": [("B", 1)],
                                           "law": law, "reversible": True}]), "m.xml")
    reactions = imported.table["reactions"]
    fwd, rev = reactions["enz_fwd"], reactions["enz_rev"]
    assert fwd["reaction"] == "A -> B" and rev["reaction"] == "B -> A"
    values = dict(imported.table["parameters"], A=30.0, B=5.0)
    net = (expr.evaluate(expr.parse(fwd["propensity"], "x", "f"), values)
           - expr.evaluate(expr.parse(rev["propensity"], "x", "g"), values))
    want = 2.0 * (2.0 * 30 / 4 - 1.0 * 5 / 6) / (1 + 30 / 4 + 5 / 6)  # the law itself at A = 30, B = 5
    assert net == pytest.approx(want, rel=1e-12)


# ---- units and compartments ---------------------------------------------------------------------

def test_compartment_without_size_is_read_when_only_amounts_are_used():
    imported = read(doc(**dict(RULED, parameters=[("k", 0.2)], reactions=[
        {"id": "r1", "reactants": [("A", 1)], "products": [("B", 1)], "law": "k * A"}]),
        compartments=(("cell", None),)), "m.xml")
    assert imported.table["species"] == {"A": 40, "B": 0}


def test_dimensionless_substance_is_read_as_items(tmp_path):
    def edit(m):
        ud = m.createUnitDefinition()
        ud.setId("substance")
        u = ud.createUnit()
        u.setKind(libsbml.UNIT_KIND_DIMENSIONLESS), u.setExponent(1), u.setScale(0), u.setMultiplier(1.0)
        m.setSubstanceUnits("substance"), m.setExtentUnits("substance")
    xml = doc(**dict(RULED, parameters=[("k", 0.2)], reactions=[
        {"id": "r1", "reactants": [("A", 1)], "products": [("B", 1)], "law": "k * A"}]), edit=edit)
    result = runner.invoke(app, ["check", str(spec_file(tmp_path, xml))])
    assert result.exit_code == 0, result.output
    assert "read as items" in " ".join(result.output.split())


def test_annotation_errors_are_warnings_not_refusals():
    xml = doc(**dict(RULED, parameters=[("k", 0.2)], reactions=[
        {"id": "r1", "reactants": [("A", 1)], "products": [("B", 1)], "law": "k * A"}]))
    # two annotation elements in one namespace: libsbml error 10402 (L3V2 section 3.2.4), no math
    xml = xml.replace('<species id="A"', '<species metaid="m1" id="A"').replace(
        'constant="false"/>', 'constant="false"><annotation><x:a xmlns:x="http://invented.example/a"/>'
        '<y:b xmlns:y="http://invented.example/a"/></annotation></species>', 1)
    imported = read(xml, "m.xml")
    assert any(element == "warning" and "10402" in text for element, text in imported.notes)


def test_reserved_word_gives_the_reserved_word_message_only():
    xml = doc(species=[{"id": "A", "conc": 1.0, "only": False}], parameters=[("lambda", 0.5)],
              compartments=(("cell", 0.9),),
              reactions=[{"id": "r1", "reactants": [("A", 1)], "law": "cell * lambda * A"}])
    with pytest.raises(SpecError) as info:
        read(xml, "m.xml")
    assert "id 'lambda': a reserved word" in str(info.value)
    assert "cannot read the expression" not in str(info.value)


def test_a_factor_that_cancels_prints_as_the_parameter():
    """c = alpha_e * V * k / (alpha * V) is k: 0.9999999999999999 * k is rounding, shown as k."""
    xml = doc(species=[{"id": "A", "conc": 1e-9, "only": False}], parameters=[("k", 0.5)],
              compartments=(("cell", 3e-15),), substance="mole",
              reactions=[{"id": "r1", "reactants": [("A", 1)], "law": "cell * k * A"}])
    assert read(xml, "m.xml").table["reactions"]["r1"]["rate"] == "k"


def test_model_volume_rescales_the_counts(tmp_path):
    """1 uM in a 1 L compartment, simulated in 1 fL: 1e-6 * N_A * 1e-15 = 602.2 molecules (BIPM 2019)."""
    xml = doc(species=[{"id": "A", "conc": 1e-6, "only": False}], parameters=[("k", 0.5)],
              compartments=(("cell", 1.0),), substance="mole",
              reactions=[{"id": "r1", "reactants": [("A", 1)], "law": "cell * k * A"}])
    assert read(xml, "m.xml").table["species"]["A"] == round(1e-6 * N_A)
    path = spec_file(tmp_path, xml, top="model_volume = 1e-15\n")
    spec = sweep.load(path)
    assert spec.model.initial == (602,)
    result = runner.invoke(app, ["check", str(path)])
    assert result.exit_code == 0, result.output
    assert "initial counts from 602 to 602 molecules" in " ".join(result.output.split())
    bad = spec_file(tmp_path, xml, top="model_volume = -1\n", name="bad.toml")
    result = runner.invoke(app, ["check", str(bad)])
    assert result.exit_code == 2 and "model_volume" in result.output


def test_time_units_become_the_time_unit(tmp_path):
    def edit(m):
        ud = m.createUnitDefinition()
        ud.setId("minute")
        u = ud.createUnit()
        u.setKind(libsbml.UNIT_KIND_SECOND), u.setExponent(1), u.setScale(0), u.setMultiplier(60.0)
        m.setTimeUnits("minute")
    xml = doc(**dict(RULED, parameters=[("k", 0.2)], reactions=[
        {"id": "r1", "reactants": [("A", 1)], "products": [("B", 1)], "law": "k * A"}]), edit=edit)
    assert sweep.load(spec_file(tmp_path, xml)).time_unit == "min"
    (tmp_path / "h.toml").write_text((tmp_path / "s.toml").read_text() + 'unit = "h"\n', encoding="utf-8")
    assert sweep.load(tmp_path / "h.toml").time_unit == "h"  # [time] unit wins over timeUnits


# ---- constructs only the ODE honours --------------------------------------------------------------

def test_rate_rule_runs_with_the_ode(tmp_path):
    """dq/dt = k, q(0) = 1: q(t) = 1 + k t (closed form); A -> with k A: A(t) = 40 exp(-k t)."""
    xml = doc(species=[{"id": "A", "amount": 40}], parameters=[("k", 0.2), ("q", 1.0)],
              reactions=[{"id": "r1", "reactants": [("A", 1)], "law": "k * A"}],
              edit=lambda m: rule(m, "q", "k", kind="rate"))
    spec = sweep.load(spec_file(tmp_path, xml, method="ode"))
    res = solve(spec)
    t = np.asarray(spec.times)
    q = list(spec.model.species).index("q")
    np.testing.assert_allclose(res.counts[0, :, q], 1 + 0.2 * t, rtol=1e-6)
    np.testing.assert_allclose(res.counts[0, :, 0], 40 * np.exp(-0.2 * t), rtol=1e-6)
    result = runner.invoke(app, ["check", str(spec_file(tmp_path, xml, name="d.toml"))])
    assert result.exit_code == 2 and "rate rule for q" in result.output and "m.xml" in result.output


def test_time_in_a_law_runs_with_the_ode(tmp_path):
    """0 -> A at rate k t: A(t) = k t^2 / 2 (closed form)."""
    xml = doc(species=[{"id": "A", "amount": 0}], parameters=[("k", 3.0)],
              reactions=[{"id": "r1", "products": [("A", 1)], "law": "k * time"}])
    spec = sweep.load(spec_file(tmp_path, xml, method="ode"))
    t = np.asarray(spec.times)
    np.testing.assert_allclose(solve(spec).counts[0, :, 0], 3.0 * t ** 2 / 2, rtol=1e-6, atol=1e-6)


def test_piecewise_law(tmp_path):
    """0 -> A at k while A < 5, else 0 (L3V2 section 3.4.9): A(t) = min(k t, 5) for the ODE."""
    xml = doc(species=[{"id": "A", "amount": 0}], parameters=[("k", 2.0)],
              reactions=[{"id": "r1", "products": [("A", 1)], "law": "piecewise(k, A < 5, 0)"}])
    spec = sweep.load(spec_file(tmp_path, xml, method="ode"))
    t = np.asarray(spec.times)
    np.testing.assert_allclose(solve(spec).counts[0, :, 0], np.minimum(2.0 * t, 5.0), atol=1e-3)
    direct = sweep.load(spec_file(tmp_path, xml, name="d.toml"))
    counts = solve(direct).counts
    assert counts.max() == 5  # the exact method stops making A at 5


def test_ode_falls_back_to_bdf_past_its_lsoda_budget(monkeypatch):
    """Past the work bound the solve restarts with BDF; both are scipy's solvers (Virtanen et al. 2020)."""
    from sweep.model import parse_model

    model = parse_model({"species": {"A": 100, "B": 0}, "parameters": {"k": 1.0, "g": 0.5},
                         "reactions": {"a": {"reaction": "A -> B", "rate": "k"},
                                       "b": {"reaction": "B -> 0", "rate": "g"}}}, "m.toml")
    net, rates, x0 = compile_network(model), rate_constants(model, model.parameter_values), np.array([100, 0])
    times = np.linspace(0, 5, 6)
    bdf = ode.solve(net, rates, x0, times, 10_000, ode_method="BDF")
    monkeypatch.setattr(ode, "LSODA_BUDGET", 5)
    row, status, calls = ode.solve(net, rates, x0, times, 10_000)
    assert status == 0 and calls > 5
    np.testing.assert_allclose(row, bdf[0], rtol=1e-6)
    # B(t) = 100 k/(g - k) (e^{-k t} - e^{-g t}) for A -> B -> 0 (closed form, first-order chain)
    want = 100 * 1.0 / (0.5 - 1.0) * (np.exp(-times) - np.exp(-0.5 * times))
    np.testing.assert_allclose(row[:, 1], want, rtol=1e-5)


def test_fractional_initial_amount_is_for_real_valued_methods_only(tmp_path):
    xml = doc(species=[{"id": "A", "amount": 0.5}], parameters=[("k", 0.2)],
              reactions=[{"id": "r1", "reactants": [("A", 1)], "law": "k * A"}])
    # rounded to a whole count by the import (as before), so every method takes it
    assert read(xml, "m.xml").table["species"]["A"] == 1
    toml = tmp_path / "f.toml"
    toml.write_text('[model.species]\nA = 0.5\n[model.parameters]\nk = 0.2\n[model.reactions]\n'
                    'r = { reaction = "A -> 0", rate = "k" }\n[run]\nmethod = "direct"\nreplicates = 2\n'
                    '[time]\nend = 1.0\nsamples = 2\n', encoding="utf-8")
    result = runner.invoke(app, ["check", str(toml)])
    assert result.exit_code == 2 and "species.A" in result.output and "not a whole number" in result.output
    toml.write_text(toml.read_text().replace('"direct"\nreplicates = 2', '"ode"\nreplicates = 1'), encoding="utf-8")
    assert runner.invoke(app, ["check", str(toml)]).exit_code == 0
