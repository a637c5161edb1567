"""Valid inputs for the hostile-input tests to break, and the checks they share.

``test_hostile_input`` (one test per item of issue 12's bad-input list) and ``test_fuzz_input``
(seeded mutations) start from these invented models. ``check`` runs ``sweep check`` in process
under a time bound and returns what a user would see.
"""

from __future__ import annotations

import textwrap
from pathlib import Path

import libsbml
from typer.testing import CliRunner

from support.hang_bound import time_bound
from sweep.cli import app

runner = CliRunner()

# a repressed gene and its protein; A0 sets the initial mRNA count, so parameters can be counts
MODEL = """\
[species]
M = "A0"
P = 5
[parameters]
A0 = 10
k_tx = 2.0
k_tl = 4.0
g_m = 0.5
g_p = 0.1
K = 20.0
[reactions]
transcribe = { reaction = "0 -> M", propensity = "hill_down(P, k_tx, K, 2)" }
translate = { reaction = "M -> M + P", rate = "k_tl" }
mrna_decay = { reaction = "M -> 0", rate = "g_m" }
protein_decay = { reaction = "P -> 0", rate = "g_p" }
"""

RUN = """\
[run]
method = "direct"
replicates = 4
replicates_per_task = 2
seed = 11
max_events = 100000
[time]
end = 2.0
samples = 5
"""

SPEC = 'model = "model.toml"\n' + RUN + "[design.vary]\nk_tl = [2.0, 4.0]\n"


def write(folder: Path, spec: str = SPEC, model: str | None = MODEL, model_name: str = "model.toml",
          name: str = "spec.toml") -> Path:
    """Write a spec (and its model file, unless ``model`` is None); return the spec's path."""
    if model is not None:
        (folder / model_name).write_text(model, encoding="utf-8")
    path = folder / name
    path.write_text(spec, encoding="utf-8")
    return path


def check(path: Path, *extra: str, seconds: float = 20.0):
    """``sweep check PATH`` in process: (exit code, output on one line, the result)."""
    with time_bound(seconds, f"sweep check {path}"):
        result = runner.invoke(app, ["check", str(path), *extra])
    return result.exit_code, " ".join(result.output.split()), result


def no_traceback(result) -> bool:
    """Nothing escaped as an exception (SystemExit is how typer ends with an exit code)."""
    return result.exception is None or isinstance(result.exception, SystemExit)


# ---- SBML documents, written with libsbml (after tests/sweep/test_sbml.py) ---------------------

def sbml(species=({"id": "A", "amount": 20},), parameters=(("k", 0.5),),
         reactions=({"id": "decay", "reactants": (("A", 1),), "law": "k * A"},), functions=()) -> str:
    """An SBML L3V2 document: one 1 fL compartment, item amounts. species: dicts (id, amount);
    reactions: dicts (id, law, reactants, products); functions: (id, "lambda(...)") pairs."""
    doc = libsbml.SBMLDocument(3, 2)
    m = doc.createModel()
    m.setId("invented")
    m.setSubstanceUnits("item")
    m.setExtentUnits("item")
    c = m.createCompartment()
    c.setId("cell"), c.setSpatialDimensions(3), c.setConstant(True), c.setSize(1e-15)
    for fid, formula in functions:
        f = m.createFunctionDefinition()
        f.setId(fid)
        f.setMath(libsbml.parseL3Formula(formula))
    for s in species:
        sp = m.createSpecies()
        sp.setId(s["id"]), sp.setCompartment("cell"), sp.setHasOnlySubstanceUnits(True)
        sp.setBoundaryCondition(False), sp.setConstant(False), sp.setInitialAmount(s["amount"])
    for pid, value in parameters:
        p = m.createParameter()
        p.setId(pid), p.setValue(value), p.setConstant(True)
    for r in reactions:
        re_ = m.createReaction()
        re_.setId(r["id"]), re_.setReversible(False)
        for sid, st in r.get("reactants", ()):
            x = re_.createReactant()
            x.setSpecies(sid), x.setStoichiometry(st), x.setConstant(True)
        for sid, st in r.get("products", ()):
            x = re_.createProduct()
            x.setSpecies(sid), x.setStoichiometry(st), x.setConstant(True)
        re_.createKineticLaw().setMath(libsbml.parseL3Formula(r["law"]))
    return libsbml.writeSBMLToString(doc)


SBML_SPEC = 'model = "model.xml"\n' + RUN


def write_sbml(folder: Path, document: str, spec: str = SBML_SPEC) -> Path:
    (folder / "model.xml").write_text(document, encoding="utf-8")
    path = folder / "spec.toml"
    path.write_text(textwrap.dedent(spec), encoding="utf-8")
    return path
