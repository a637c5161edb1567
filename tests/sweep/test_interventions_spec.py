"""Interventions, spec and model side: [[change]] / [[when]] parsing and refusals, each point's
Schedule (sweep.model.schedule), the runs that carry it, and SBML events imported as the same thing.

The distributions under interventions are tested on the kernel side (tests/kernels/test_changes.py);
here every number checked is deterministic: a species no reaction touches, set or added to, must
read exactly that value from the change's instant on (the sample at an instant is the state just
after the change: kernels.changes). The conversions are those of docs/models.md (Gillespie 1977 for
c = k / (N_A V)) and the SBML semantics those of SBML L3V2 Core section 4.14 (Hucka et al. 2019).
No randomness is compared against a distribution, so no significance level is needed; seeds are fixed.
"""

from __future__ import annotations

import numpy as np
import pytest
import zarr
from typer.testing import CliRunner

import sweep
from kernels import changes as kc
from sweep.cli import app
from sweep.errors import SpecError, StoreError
from sweep.model import AVOGADRO, sbml
from sweep.model.schedule import build
from sweep.spec import from_text

MODEL = """
[model.species]
A = 0
B = 5
[model.parameters]
k = 1.0
g = 0.1
t_on = 2.0
f = 0.5
[model.reactions]
make = { reaction = "0 -> A", rate = "k" }
decay = { reaction = "A -> 0", rate = "g" }
"""
RUN = """
[run]
method = "direct"
replicates = 4
replicates_per_task = 2
seed = 3
[time]
end = 10.0
samples = 11
"""


def _spec(extra: str, model: str = MODEL, run: str = RUN):
    return from_text(run + model + extra, "s.toml")


def _schedule(spec, point: int = 0):
    return build(spec.model, spec.interventions, spec.derived, spec.values_at(spec.points()[point]), spec.times[-1])


# ---- parsing and refusals -------------------------------------------------------------------

REFUSED = [
    ("[[change]]\nset = { B = 1 }", "change[0].at", "missing"),
    ("[[change]]\nat = -1.0\nset = { B = 1 }", "change[0].at", ">= 0"),
    ("[[change]]\nat = 1.0\nset = { nope = 1 }", "change[0].set.nope", "not a species or a parameter"),
    ("[[change]]\nat = 1.0\nadd = { k = 1 }", "change[0].add.k", "not a species"),
    ("[[change]]\nat = 1.0\nkeep = { A = 1.5 }", "change[0].keep.A", "<= 1"),
    ("[[change]]\nat = 1.0\nkeep = -0.1", "change[0].keep.A", ">= 0"),
    ("[[change]]\nat = 1.0\nadd = { B = 2.5 }", "change[0].add.B", "whole number"),
    ("[[change]]\nat = 1.0\nevery = 0.0\nadd = { B = 1 }", "change[0].every", "> 0"),
    ("[[change]]\nat = 1.0\nevery = 2.0\ncount = 1.5\nadd = { B = 1 }", "change[0].count", "whole"),
    ("[[change]]\nat = 1.0\ncount = 2\nadd = { B = 1 }", "change[0].count", "needs a period"),
    ("[[change]]\nat = \"t_off\"\nadd = { B = 1 }", "change[0].at", "not a parameter"),
    ("[[change]]\nat = 1.0", "change[0]", "changes nothing"),
    ("[[change]]\nat = 1.0\nsoon = 1\nadd = { B = 1 }", "change[0].soon", "unknown key"),
    ("[[change]]\nat = 1.0\nset = { t_on = 3.0 }", "change[0].set.t_on", "changes nothing"),
    ("[[when]]\ncondition = \"A >= 5 and B < 2\"\nset = { k = 0.0 }", "when[0].condition", "single comparison"),
    ("[[when]]\ncondition = \"A + B >= 5\"\nset = { k = 0.0 }", "when[0].condition", "single comparison"),
    ("[[when]]\ncondition = \"A == 5\"\nset = { k = 0.0 }", "when[0].condition", "single comparison"),
    ("[[when]]\ncondition = \"k >= 5\"\nset = { k = 0.0 }", "when[0].condition", "not a species"),
    ("[[when]]\ncondition = \"A >= __import__('os')\"\nset = { k = 0.0 }", "when[0].condition", "threshold"),
    ("[[when]]\ncondition = \"A >= 5\"\nrepeat = 1\nset = { k = 0.0 }", "when[0].repeat", "true or false"),
    # parameter-valued fields are checked at every point of the design
    ("[design.vary]\nt_on = [1.0, -2.0]\n[[change]]\nat = \"t_on\"\nadd = { B = 1 }", "change[0].at", "t_on = -2"),
    ("[design.vary]\nf = [0.5, 2.0]\n[[change]]\nat = 1.0\nkeep = \"f\"", "change[0].keep.A", "f = 2"),
    ("[[change]]\nat = 0.0\nevery = 1e-5\nadd = { B = 1 }", "change[0]", "more than 100,000"),
    ("[[change]]\nat = 0.0\nevery = 1e-320\nadd = { B = 1 }", "change[0]", "more than 100,000"),
    ("[[change]]\nat = 1.0\nset = { k = -1.0 }", "change[0].set.k", ">= 0"),
]


@pytest.mark.parametrize("extra, field, problem", REFUSED, ids=[f"{i}:{c[1]}" for i, c in enumerate(REFUSED)])
def test_refusals_name_the_field(extra, field, problem):
    with pytest.raises(SpecError) as err:
        _spec(extra)
    assert f"s.toml: {field}" in str(err.value) and problem in str(err.value)


def test_refusal_exits_2_from_the_cli(tmp_path):
    path = tmp_path / "bad.toml"
    path.write_text(RUN + MODEL + "[[change]]\nat = 1.0\nkeep = { A = 1.5 }\n")
    result = CliRunner().invoke(app, ["check", str(path)])
    assert result.exit_code == 2, result.output
    assert "change[0].keep.A" in result.output


def test_check_notes_a_change_after_the_end(tmp_path):
    path = tmp_path / "late.toml"
    path.write_text(RUN + MODEL + "[[change]]\nat = 60.0\nadd = { B = 1 }\n")
    result = CliRunner().invoke(app, ["check", str(path)])
    assert result.exit_code == 0, result.output
    assert "change[0].at" in result.output and "dropped" in result.output
    assert _schedule(_spec("[[change]]\nat = 60.0\nadd = { B = 1 }")).times.size == 0


def test_a_derived_parameter_cannot_be_set():
    with pytest.raises(SpecError, match=r"change\[0\].set.k.*derived"):
        _spec("[derived]\nk = \"2 * g\"\n[[change]]\nat = 1.0\nset = { k = 0.0 }")


def test_a_rate_read_by_two_parameters_one_set_by_a_trigger_is_refused():
    """The trigger's time is known only during the run, so the entry's value cannot be built."""
    model = MODEL.replace('rate = "k" }', 'rate = "kr" }').replace("t_on = 2.0", "t_on = 2.0\nkr = 1.0")
    extra = ("[derived]\nkr = \"k * g\"\n[[change]]\nat = 1.0\nset = { g = 0.2 }\n"
             "[[when]]\ncondition = \"A >= 3\"\nset = { k = 0.0 }")
    with pytest.raises(SpecError, match=r"when\[0\].set.k.*rate entry 0 reads k and also g"):
        _spec(extra, model=model)


# ---- schedules ------------------------------------------------------------------------------

def test_repeats_parameter_times_and_merged_instants():
    spec = _spec("[design.vary]\nt_on = [1.0, 2.5]\n"
                 "[[change]]\nat = \"t_on\"\nevery = 3.0\nadd = { B = 10 }\n"
                 "[[change]]\nat = 4.0\nevery = 2.0\ncount = 2\nkeep = { A = 0.5 }\n")
    s0, s1 = _schedule(spec, 0), _schedule(spec, 1)
    assert s0.times.tolist() == [1.0, 4.0, 6.0, 7.0, 10.0]           # to the end, inclusive
    assert s1.times.tolist() == [2.5, 4.0, 5.5, 6.0, 8.5]
    at4 = slice(int(s0.ptr[1]), int(s0.ptr[2]))                        # two changes at t = 4, in order
    assert s0.kind[at4].tolist() == [kc.ADD, kc.KEEP] and s0.value[at4].tolist() == [10.0, 0.5]


def test_parameter_sets_become_rate_operations_through_the_molar_conversion():
    """c = k / (N_A V) for A + B -> (Gillespie 1977; docs/models.md): a set of k writes that c."""
    model = """
[model]
units = { constants = "molar", volume = 1e-15 }
[model.species]
A = 10
B = 10
[model.parameters]
kb = 1e6
u = 0.2
[model.reactions]
bind = { reaction = "A + B -> B", rate = "kb" }
leave = { reaction = "A -> 0", rate = "u" }
"""
    spec = _spec("[[change]]\nat = 5.0\nset = { kb = 2e6 }\n[[when]]\ncondition = \"A < 3\"\nset = { u = 0.0 }",
                 model=model)
    s = _schedule(spec)
    assert s.kind.tolist() == [kc.RATE, kc.RATE] and s.target.tolist() == [0, 1]
    assert s.value[0] == pytest.approx(2e6 / (AVOGADRO * 1e-15), rel=1e-15) and s.value[1] == 0.0
    assert s.w_species.tolist() == [0] and s.w_op.tolist() == [kc.LT] and s.w_value.tolist() == [3.0]
    assert s.w_repeat.tolist() == [0]


def test_timed_sets_of_two_parameters_of_one_rate_are_carried_forward():
    """Entry c = k * g: g set at 1, k at 2; the second write must use the new g (timed, so exact)."""
    model = MODEL.replace('rate = "k" }', 'rate = "kr" }').replace("t_on = 2.0", "t_on = 2.0\nkr = 1.0")
    spec = _spec("[derived]\nkr = \"k * g\"\n[[change]]\nat = 1.0\nset = { g = 0.2 }\n"
                 "[[change]]\nat = 2.0\nset = { k = 3.0 }", model=model)
    s = _schedule(spec)
    first = dict(zip(s.target[s.ptr[0]:s.ptr[1]].tolist(), s.value[s.ptr[0]:s.ptr[1]].tolist()))
    second = dict(zip(s.target[s.ptr[1]:s.ptr[2]].tolist(), s.value[s.ptr[1]:s.ptr[2]].tolist()))
    assert first == {0: 1.0 * 0.2, 1: 0.2} and second == {0: 3.0 * 0.2}


def test_no_interventions_no_schedule():
    assert _schedule(_spec("")) is None


# ---- runs -----------------------------------------------------------------------------------

CHANGED = """
[[model.change]]
at = 4.0
set = { B = 1000, k = 0.0 }
[[change]]
at = 7.0
add = { B = 1 }
"""


def test_run_samples_the_state_just_after_each_change_and_refuses_an_edited_resume(tmp_path):
    """B is touched by no reaction: it is 5 before t = 4, 1000 from the sample at 4 on, 1001 from 7.
    After k = 0 at t = 4 nothing makes A. A real local Dask run and sweep trace agree with the store."""
    path = tmp_path / "iv.toml"
    path.write_text(RUN + MODEL + CHANGED)
    spec = sweep.load(path)
    sweep.run(spec, workers=1)
    counts = zarr.open_group(spec.store, mode="r")["counts"][:]
    b = counts[..., 1]
    assert (b[..., :4] == 5).all() and (b[..., 4:7] == 1000).all() and (b[..., 7:] == 1001).all()
    a = counts[..., 0]
    assert (a[..., 4:] <= a[..., 4:5]).all()  # no making after k = 0, only decay
    traced = sweep.trace(spec.store, 0, 1)
    assert traced.matches_store
    path.write_text(RUN + MODEL + CHANGED.replace("at = 7.0", "at = 8.0"))
    with pytest.raises(StoreError, match=r"intervention 1 \(\[\[change\]\]\) at: 7.0 -> 8.0"):
        sweep.run_shard(sweep.load(path), 1, 1)  # the same check on every route


# ---- SBML events ----------------------------------------------------------------------------

def _sbml(events: str, species_attrs: str = 'hasOnlySubstanceUnits="true"', extra_params: str = "",
          rules: str = "") -> str:
    return f"""<?xml version="1.0" encoding="UTF-8"?>
<sbml xmlns="http://www.sbml.org/sbml/level3/version2/core" level="3" version="2">
  <model id="m" substanceUnits="item" extentUnits="item" timeUnits="second">
    <listOfCompartments><compartment id="cell" size="2" constant="true" spatialDimensions="3"/></listOfCompartments>
    <listOfSpecies>
      <species id="A" compartment="cell" initialAmount="0" {species_attrs} boundaryCondition="false" constant="false"/>
      <species id="B" compartment="cell" initialAmount="5" hasOnlySubstanceUnits="true" boundaryCondition="false" constant="false"/>
    </listOfSpecies>
    <listOfParameters>
      <parameter id="k" value="1" constant="false"/>
      <parameter id="g" value="0.1" constant="false"/>
      <parameter id="t_on" value="4" constant="true"/>
      {extra_params}
    </listOfParameters>
    {rules}
    <listOfReactions>
      <reaction id="make" reversible="false">
        <listOfProducts><speciesReference species="A" stoichiometry="1" constant="true"/></listOfProducts>
        <kineticLaw><math xmlns="{MML}"><ci>{'kk' if 'kk' in rules else 'k'}</ci></math></kineticLaw>
      </reaction>
      <reaction id="decay" reversible="false">
        <listOfReactants><speciesReference species="A" stoichiometry="1" constant="true"/></listOfReactants>
        <kineticLaw><math xmlns="{MML}"><apply><times/><ci>g</ci><ci>A</ci></apply></math></kineticLaw>
      </reaction>
    </listOfReactions>
    <listOfEvents>{events}</listOfEvents>
  </model>
</sbml>"""


MML = "http://www.w3.org/1998/Math/MathML"
TIME = '<csymbol encoding="text" definitionURL="http://www.sbml.org/sbml/symbols/time">t</csymbol>'


def _event(eid: str, trigger: str, assignments: dict[str, str], extra: str = "", initial: str = "false") -> str:
    body = "".join(f'<eventAssignment variable="{v}"><math xmlns="{MML}">{m}</math></eventAssignment>'
                   for v, m in assignments.items())
    return (f'<event id="{eid}" useValuesFromTriggerTime="true"><trigger initialValue="{initial}" persistent="true">'
            f'<math xmlns="{MML}">{trigger}</math></trigger>{extra}<listOfEventAssignments>{body}'
            "</listOfEventAssignments></event>")


def _imported(events: str, **kw):
    return sbml.read(_sbml(events, **kw), "ev.xml").table


def test_sbml_time_trigger_is_a_timed_change_with_a_parameter_time():
    t = _imported(_event("wash", f"<apply><geq/>{TIME}<ci>t_on</ci></apply>",
                         {"B": "<cn>1000</cn>", "k": "<cn>0</cn>"}, initial="true"))
    assert t["change"] == [{"at": "t_on", "set": {"B": 1000.0, "k": 0.0}}] and "when" not in t


def test_sbml_reversed_time_trigger_and_gt():
    t = _imported(_event("e", f"<apply><leq/><cn>3</cn>{TIME}</apply>", {"g": "<ci>k</ci>"}) +
                  _event("f", f"<apply><gt/>{TIME}<cn>6</cn></apply>", {"B": "<cn>2</cn>"}))
    assert t["change"] == [{"at": 3.0, "set": {"g": "k"}}, {"at": 6.0, "set": {"B": 2.0}}]


def test_sbml_state_trigger_in_counts_of_a_concentration():
    """A is a concentration in a compartment of size 2 (items): count = 2 x value (docs/sbml.md);
    SBML fires on each false -> true transition, which is repeat = true."""
    t = _imported(_event("hi", "<apply><geq/><ci>A</ci><cn>3</cn></apply>", {"A": "<cn>1.3</cn>"}),
                  species_attrs='hasOnlySubstanceUnits="false"')
    assert t["when"] == [{"condition": "A >= 6.0", "repeat": True, "set": {"A": 3.0}}]  # 2.6 rounded to 3


def test_sbml_parameter_threshold_of_a_concentration_is_derived():
    imported = sbml.read(_sbml(_event("hi", "<apply><lt/><ci>A</ci><ci>t_on</ci></apply>", {"k": "<cn>0</cn>"}),
                               species_attrs='hasOnlySubstanceUnits="false"'), "ev.xml")
    assert imported.table["when"][0]["condition"] == "A < hi__threshold"
    assert dict(imported.derived)["hi__threshold"] == "2.0 * t_on"


REFUSED_EVENTS = [
    (_event("late", f"<apply><geq/>{TIME}<cn>5</cn></apply>", {"B": "<cn>1</cn>"},
            extra=f'<delay><math xmlns="{MML}"><cn>1</cn></math></delay>'), "event late: a delay"),
    (_event("two", "<apply><geq/><apply><plus/><ci>A</ci><ci>B</ci></apply><cn>5</cn></apply>",
            {"k": "<cn>0</cn>"}), "event two: trigger compares more than one"),
    (_event("both", f"<apply><and/><apply><geq/>{TIME}<cn>5</cn></apply><apply><geq/><ci>A</ci><cn>1</cn>"
            "</apply></apply>", {"k": "<cn>0</cn>"}), "event both: trigger is not a single comparison"),
    (_event("early", f"<apply><leq/>{TIME}<cn>5</cn></apply>", {"k": "<cn>0</cn>"}), "event early: trigger time <="),
    (_event("state", f"<apply><geq/>{TIME}<cn>5</cn></apply>", {"B": "<apply><plus/><ci>B</ci><cn>1</cn></apply>"}),
     "event state: assignment to B is not a number or a parameter"),
    (_event("start", "<apply><geq/><ci>B</ci><cn>1</cn></apply>", {"k": "<cn>0</cn>"}, initial="true"),
     "event start: initialValue=true"),
    (_event("p1", f"<apply><geq/>{TIME}<cn>5</cn></apply>", {"k": "<cn>0</cn>"},
            extra=f'<priority><math xmlns="{MML}"><cn>1</cn></math></priority>') +
     _event("p2", f"<apply><geq/>{TIME}<cn>5</cn></apply>", {"g": "<cn>0</cn>"}), "event p1: priorities"),
    (_event("init", f"<apply><geq/>{TIME}<cn>5</cn></apply>", {"g": "<cn>3</cn>"}),
     "event init: assigns g, which the initial assignment of k2 reads"),
]
INITIAL = (f'<listOfInitialAssignments><initialAssignment symbol="k2"><math xmlns="{MML}"><apply><times/>'
           "<cn>2</cn><ci>g</ci></apply></math></initialAssignment></listOfInitialAssignments>")


@pytest.mark.parametrize("events, message", REFUSED_EVENTS, ids=[m.split(":")[0] for _, m in REFUSED_EVENTS])
def test_sbml_event_refusals_name_the_event(events, message):
    with pytest.raises(SpecError, match="unsupported element") as err:
        sbml.read(_sbml(events, extra_params='<parameter id="k2" constant="true"/>', rules=INITIAL), "ev.xml")
    assert message in str(err.value)


def test_sbml_refusal_exits_2_from_the_cli(tmp_path):
    (tmp_path / "m.xml").write_text(_sbml(REFUSED_EVENTS[0][0]))
    (tmp_path / "s.toml").write_text('model = "m.xml"\n' + RUN)
    result = CliRunner().invoke(app, ["check", str(tmp_path / "s.toml")])
    assert result.exit_code == 2 and "event late" in result.output


TOML_TWIN = """
[species]
A = 0
B = 5
[parameters]
k = 1.0
g = 0.1
t_on = 4.0
make__c = 2.0
[reactions]
make = { reaction = "0 -> A", rate = "make__c" }
decay = { reaction = "A -> 0", rate = "g" }
[[change]]
at = "t_on"
set = { B = 1000, k = 0.0 }
[[when]]
condition = "A >= 3"
repeat = true
set = { g = 0.5 }
"""


def test_sbml_with_events_and_an_assignment_rule_gives_the_bytes_of_the_same_toml(tmp_path):
    """kk = 2 k (an assignment rule the law reads) becomes c = make__c = 2 * k: the timed change's
    set of k must reach the rate through that derived parameter, in both files alike."""
    rules = (f'<listOfRules><assignmentRule variable="kk"><math xmlns="{MML}"><apply><times/><cn>2</cn><ci>k</ci>'
             "</apply></math></assignmentRule></listOfRules>")
    events = (_event("wash", f"<apply><geq/>{TIME}<ci>t_on</ci></apply>", {"B": "<cn>1000</cn>", "k": "<cn>0</cn>"})
              + _event("high", "<apply><geq/><ci>A</ci><cn>3</cn></apply>", {"g": "<cn>0.5</cn>"}))
    (tmp_path / "m.xml").write_text(_sbml(events, extra_params='<parameter id="kk" constant="false"/>', rules=rules))
    (tmp_path / "m.toml").write_text(TOML_TWIN)
    run = RUN.replace("replicates = 4", "replicates = 6")
    (tmp_path / "x.toml").write_text('model = "m.xml"\n' + run + '[design.vary]\nk = [1.0, 3.0]\n')
    (tmp_path / "t.toml").write_text('model = "m.toml"\n' + run + '[design.vary]\nk = [1.0, 3.0]\n'
                                     '[derived]\nmake__c = "2 * k"\n')
    stores = []
    for name in ("x", "t"):
        spec = sweep.load(tmp_path / f"{name}.toml")
        sweep.run_shard(spec, 1, 1)  # the in-process route
        stores.append(zarr.open_group(spec.store, mode="r"))
    for array in ("counts", "status", "events"):
        np.testing.assert_array_equal(stores[0][array][:], stores[1][array][:], err_msg=array)
    counts = stores[0]["counts"][:]
    assert (counts[:, :, 4:, 1] == 1000).all() and (counts[:, :, :4, 1] == 5).all()


def test_export_of_a_model_with_interventions_is_refused():
    spec = _spec(CHANGED)
    with pytest.raises(SpecError, match=r"change\[0\].*cannot be exported"):
        sbml.write(spec.model)


def test_sbml_times_and_values_computed_from_parameters_become_derived_parameters():
    imported = sbml.read(_sbml(_event("later", f"<apply><geq/>{TIME}<apply><plus/><ci>t_on</ci><ci>g</ci></apply>"
                                      "</apply>", {"k": "<apply><times/><cn>3</cn><ci>g</ci></apply>"})), "ev.xml")
    derived = dict(imported.derived)
    assert imported.table["change"] == [{"at": "later__at", "set": {"k": "later__k__value"}}]
    assert derived["later__at"] == "t_on + g" and derived["later__k__value"] == "3 * g"


def test_values_are_read_as_they_were_just_before_the_change():
    """SBML L3V2 4.14: every assignment is computed before any is made; ours reads the same way."""
    model = MODEL.replace("f = 0.5", "f = 0.5\nthree_g = 0.3")
    spec = _spec('[derived]\nthree_g = "3 * g"\n[[change]]\nat = 1.0\nset = { g = 5.0, k = "three_g" }',
                 model=model)
    s = _schedule(spec)
    assert dict(zip(s.target.tolist(), s.value.tolist())) == {1: 5.0, 0: pytest.approx(0.3)}


def test_a_triggered_value_that_depends_on_a_set_parameter_is_refused():
    with pytest.raises(SpecError, match=r"when\[0\].set.k.*depends on g"):
        _spec('[[change]]\nat = 1.0\nset = { g = 0.5 }\n[[when]]\ncondition = "A >= 3"\nset = { k = "g" }')


def test_sbml_persistent_and_use_values_from_trigger_time_either_way_without_a_delay():
    """Without a delay both attributes change nothing (L3V2 4.14.2, 4.14.4): each value is accepted."""
    event = _event("e", f"<apply><geq/>{TIME}<cn>2</cn></apply>", {"B": "<cn>7</cn>"})
    event = event.replace('persistent="true"', 'persistent="false"').replace(
        'useValuesFromTriggerTime="true"', 'useValuesFromTriggerTime="false"')
    assert _imported(event)["change"] == [{"at": 2.0, "set": {"B": 7.0}}]
