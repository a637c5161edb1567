"""Hostile input (issue 12, "Ctrl-C and bad input", the bad-input half): one test per item.

Each case used to give a traceback, a hang or a misleading error. Now ``sweep check`` answers
with exit code 2 and a message naming the file and the dotted field, without a traceback, within
a time bound (``hang_bound``), and ``sweep run`` refuses the same way before creating a store.
The limits are ``sweep.spec.limits``; the models are invented (``hostile_cases``).
"""

from __future__ import annotations

import os
import random
from pathlib import Path

import numpy as np
import pytest
import zarr

from support.hang_bound import time_bound
from support.hostile_cases import MODEL, RUN, SBML_SPEC, SPEC, check, no_traceback, runner, sbml, write, write_sbml
from sweep.spec import limits
from sweep.cli import app
from sweep.model import compile_network, initial_counts, parse_model
from sweep.model.tables import _net_change


def refused(path: Path, field: str, *fragments: str, extra=(), seconds: float = 20.0) -> str:
    code, out, result = check(path, *extra, seconds=seconds)
    assert code == 2, out
    assert no_traceback(result), repr(result.exception)
    assert "Traceback" not in out
    assert field in out, out
    for fragment in fragments:
        assert fragment in out, out
    return out


def model_with(**changes: str) -> str:
    """MODEL with lines replaced: ``model_with(P="P = nan")``."""
    lines = MODEL.splitlines()
    for key, line in changes.items():
        lines = [line if ln.split("=")[0].strip() == key else ln for ln in lines]
    return "\n".join(lines) + "\n"


# ---- 1. initial counts that are not finite, or do not fit int32 ------------------------------

COUNTS = {
    "species nan": (dict(model=model_with(P="P = nan")), "species.P", "whole number"),
    "species inf": (dict(model=model_with(P="P = inf")), "species.P", "whole number"),
    "species 1e300": (dict(model=model_with(P="P = 1e300")), "species.P", "2,147,483,647"),
    "species 2**31": (dict(model=model_with(P="P = 2147483648")), "species.P", "32-bit"),
    "model parameter": (dict(model=model_with(A0="A0 = 2147483648")), "parameters.A0", "32-bit"),
    "[parameters]": (dict(spec=SPEC + "[parameters]\nA0 = 1e300\n"), "parameters.A0", "32-bit"),
    "[design.vary]": (dict(spec=SPEC.replace("k_tl = [2.0, 4.0]", "A0 = [1, 3e9]")), "design.vary.A0", "32-bit"),
    "[derived]": (dict(spec=SPEC + '[derived]\nA0 = "k_tx * 2e9"\n'), "derived.A0", "32-bit"),
}


@pytest.mark.parametrize("case", list(COUNTS))
def test_1_initial_counts_must_be_finite_and_fit_int32(tmp_path, case):
    kwargs, field, fragment = COUNTS[case]
    out = refused(write(tmp_path, **kwargs), field, fragment)
    where = "spec.toml" if field.startswith(("parameters.", "design.", "derived.")) and "model" not in kwargs \
        else "model.toml"
    assert f"{where}: " in out


def test_1_sbml_initial_counts(tmp_path):
    refused(write_sbml(tmp_path, sbml(species=({"id": "A", "amount": 3e9},))), "species.A", "model.xml", "32-bit")
    refused(write_sbml(tmp_path, sbml(species=({"id": "A", "amount": float("inf")},))), "species A", "finite")


def test_1_real_state_methods_take_any_finite_count(tmp_path):
    # cle and ode keep float64 states (COUNTS_DTYPE): no int32 cap, but still finite and whole
    for method in ("cle", "ode"):
        spec = SPEC.replace('method = "direct"', f'method = "{method}"')
        if method == "ode":
            spec = spec.replace("replicates = 4\nreplicates_per_task = 2", "replicates = 1")
        code, out, _ = check(write(tmp_path, spec=spec, model=model_with(P="P = 1e300")))
        assert code == 0, out
        refused(write(tmp_path, spec=spec, model=model_with(P="P = nan")), "species.P")
    model = parse_model({"species": {"A": 10**300}, "reactions": {"d": {"reaction": "A -> 0", "rate": 1.0}}}, "m")
    assert initial_counts(model, {}).dtype == np.float64  # beyond int64: float64, not OverflowError


# ---- 2. deep nesting: TOML, expressions, SBML MathML -----------------------------------------

def test_2_deeply_nested_toml(tmp_path):
    refused(write(tmp_path, spec=SPEC + "x = " + "[" * 100_000 + "]" * 100_000 + "\n"), "x", "nested")
    inline = "a = " + "{ b = " * 40 + "1" + " }" * 40 + "\n"
    refused(write(tmp_path, spec=SPEC + "[cluster]\n" + inline), "cluster.a.b.b", "more than 32 levels")
    dotted = "[run.options]\n" + ".".join(["o"] * 40) + " = 1\n"
    refused(write(tmp_path, spec=SPEC.replace("[design.vary]", dotted + "[design.vary]")), "run.options.o.o")


def test_2_deeply_nested_expressions(tmp_path):
    deep = "-" * 150 + "k_tl"
    refused(write(tmp_path, model=MODEL.replace('rate = "k_tl"', f'propensity = "{deep} * M"')),
            "reactions.translate.propensity", "nested more than 100 levels")
    refused(write(tmp_path, spec=SPEC + f'[derived]\ng_p = "{"+".join(["g_m"] * 150)}"\n'), "derived.g_p",
            "nested more than 100 levels")


def test_2_deeply_nested_mathml(tmp_path):
    # libsbml crashes the process (stack overflow) on ~10,000 nested elements: measured first
    text = sbml()
    start, end = text.index("<math"), text.index("</math>") + len("</math>")
    deep = "<apply><minus/>" * 20_000 + "<ci> A </ci>" + "</apply>" * 20_000
    text = text[:start] + '<math xmlns="http://www.w3.org/1998/Math/MathML">' + deep + "</math>" + text[end:]
    refused(write_sbml(tmp_path, text), "line", "model.xml", "nested more than 1000 elements")
    shallow = "<apply><minus/>" * 150 + "<ci> A </ci>" + "</apply>" * 150
    text = sbml()
    text = text[:start] + '<math xmlns="http://www.w3.org/1998/Math/MathML">' + shallow + "</math>" + text[end:]
    refused(write_sbml(tmp_path, text), "reaction decay kinetic law", "nested more than 100 levels")


# ---- 3. not a regular file, or too large ------------------------------------------------------

def test_3_model_that_is_not_a_regular_file(tmp_path):
    refused(write(tmp_path, spec=SPEC.replace('"model.toml"', '"/dev/zero"'), model=None), "model",
            "not a regular file")
    os.mkfifo(tmp_path / "pipe.toml")  # opening it for reading would wait for a writer
    refused(write(tmp_path, spec=SPEC.replace('"model.toml"', '"pipe.toml"'), model=None), "model",
            "not a regular file")
    (tmp_path / "folder.toml").mkdir()
    refused(write(tmp_path, spec=SPEC.replace('"model.toml"', '"folder.toml"'), model=None), "model", "a folder")
    code, out, result = check(Path("/dev/zero"))
    assert code == 2 and no_traceback(result) and "/dev/zero" in out and "not a regular file" in out, out


def test_3_files_beyond_the_size_limit(tmp_path):
    with open(tmp_path / "big.toml", "wb") as f:
        f.truncate(limits.MAX_TOML_BYTES + 1)  # sparse: nothing is written
    refused(write(tmp_path, spec=SPEC.replace('"model.toml"', '"big.toml"'), model=None), "model", "16 MiB")
    with open(tmp_path / "big.xml", "wb") as f:
        f.truncate(limits.MAX_FILE_BYTES + 1)
    refused(write(tmp_path, spec=SPEC.replace('"model.toml"', '"big.xml"'), model=None), "model", "64 MiB")


# ---- 4. SBML function definitions that explode when inlined -----------------------------------

def test_4_function_definitions_that_double(tmp_path):
    functions = [("f1", "lambda(x, x + x)")] + [(f"f{i}", f"lambda(x, f{i - 1}(x) + f{i - 1}(x))")
                                                 for i in range(2, 41)]
    text = sbml(reactions=({"id": "r1", "reactants": (("A", 1),), "law": "k * f40(A)"},), functions=functions)
    refused(write_sbml(tmp_path, text), "reaction r1 kinetic law", "more than 10,000 operations")
    # linear to walk, but a shared tree of 2^40 nodes once written out
    nested = "k * " + "g(" * 40 + "A" + ")" * 40
    text = sbml(reactions=({"id": "r2", "reactants": (("A", 1),), "law": nested},),
                functions=(("g", "lambda(x, x + x)"),))
    refused(write_sbml(tmp_path, text), "reaction r2 kinetic law", "more than 10,000 operations")


# ---- 5. sizes check used to expand: replicates, samples, grid counts, sampled designs ---------

SIZES = {
    "replicates": (SPEC.replace("replicates = 4", "replicates = 10000000000000"), "run.replicates", "2,000,000"),
    "samples": (SPEC.replace("samples = 5", "samples = 1000000000"), "time.samples", "1,000,000"),
    "grid count": (SPEC.replace("k_tl = [2.0, 4.0]", "k_tl = { low = 1, high = 2, count = 100000000 }"),
                   "design.vary.k_tl.count", "1,000,000"),
    "grid product": (SPEC.replace("k_tl = [2.0, 4.0]", "\n".join(
        f"{p} = {{ low = 1, high = 2, count = 1000 }}" for p in ("k_tl", "g_m", "g_p"))), "design", "1,000,000,000 points"),
    "lhs points": (SPEC.replace("[design.vary]\nk_tl = [2.0, 4.0]", '[design]\nkind = "lhs"\npoints = 1000000000000\n'
                                '[design.vary]\nk_tl = { low = 1, high = 2 }'), "design.points", "1,000,000"),
    "saltelli rows": (SPEC.replace("[design.vary]\nk_tl = [2.0, 4.0]", '[design]\nkind = "saltelli"\n'
                                   'base_samples = 524288\n[design.vary]\nk_tl = { low = 1, high = 2 }\n'
                                   'g_m = { low = 0.1, high = 1 }'), "design", "3,145,728 points"),
    "adaptive": (SPEC.replace("[design.vary]", '[run.adaptive]\nspecies = "P"\nmax_replicates = 10000000000000\n'
                              '[design.vary]'), "run.adaptive.max_replicates", "tasks"),
}


@pytest.mark.parametrize("case", list(SIZES))
def test_5_sizes_are_bounded_before_anything_expands(tmp_path, case):
    spec, field, fragment = SIZES[case]
    refused(write(tmp_path, spec=spec), field, fragment, seconds=10)


def test_5_sample_time_list(tmp_path, monkeypatch):
    # a list of 1,000,001 times takes tomllib ~8 s to read: the limit is lowered to test the check
    monkeypatch.setattr(limits, "MAX_SAMPLES", 10)
    spec = SPEC.replace("end = 2.0\nsamples = 5", f"points = [{', '.join(['1'] * 11)}]")
    refused(write(tmp_path, spec=spec), "time.points", "11 sample times, more than 10")


def test_5_design_table_rows(tmp_path, monkeypatch):
    # rows are counted before the CSV is parsed into numbers; the limit is lowered to keep it quick
    monkeypatch.setattr(limits, "MAX_POINTS", 5)
    (tmp_path / "points.csv").write_text("k_tl\n" + "1.0\n" * 6)
    spec = SPEC.replace("[design.vary]\nk_tl = [2.0, 4.0]", '[design]\nkind = "table"\nfile = "points.csv"')
    refused(write(tmp_path, spec=spec), "design.file", "6 rows, more than the 5 points")


# ---- 6. store paths beyond the operating system's limits -------------------------------------

def test_6_store_name_too_long(tmp_path):
    spec = SPEC.replace("seed = 11", 'seed = 11\nstore = "' + "s" * 1_000_000 + '"')
    refused(write(tmp_path, spec=spec), "run.store", "255")
    refused(write(tmp_path), "--store", "255", extra=("--store", "x" * 1_000_000))
    refused(write(tmp_path), "--store", "the path is", extra=("--store", "d/" * 3000 + "out.zarr"))


# ---- 7. numbers that are not finite in rate laws and derived expressions ----------------------

def test_7_non_finite_literals(tmp_path):
    refused(write(tmp_path, model=MODEL.replace('rate = "k_tl"', 'propensity = "1e309 * M"')),
            "reactions.translate.propensity", "1e309")
    refused(write(tmp_path, spec=SPEC + '[derived]\ng_p = "1e309 * g_m"\n'), "derived.g_p", "1e309")
    refused(write(tmp_path, spec=SPEC + f'[derived]\ng_p = "{"9" * 400} * g_m"\n'), "derived.g_p", "400 digits")


# ---- 8. integers that overflow int64 downstream -----------------------------------------------

def test_8_event_cap_and_64_bit_integers(tmp_path):
    refused(write(tmp_path, spec=SPEC.replace("max_events = 100000", f"max_events = {2**63}")), "run.max_events",
            "64-bit")
    refused(write(tmp_path, spec=SPEC.replace("max_events = 100000", f"max_events = {2**62}")), "run.max_events",
            "at most 1,000,000,000,000,000")
    refused(write(tmp_path, spec=SPEC.replace("seed = 11", f"seed = {2**64}")), "run.seed", "64-bit")
    refused(write(tmp_path, spec=SPEC.replace("seed = 11", "seed = " + "9" * 5000)), "", "cannot read a number")


# ---- 9. replicates per task ---------------------------------------------------------------------

def test_9_replicates_per_task(tmp_path):
    spec = SPEC.replace("replicates_per_task = 2", "replicates_per_task = 1000000000000")
    refused(write(tmp_path, spec=spec), "run.replicates_per_task", "at most 4")
    big = SPEC.replace("replicates = 4\nreplicates_per_task = 2", "replicates = 100000\nreplicates_per_task = 100000")
    refused(write(tmp_path, spec=big.replace("samples = 5", "samples = 1000")), "run.replicates_per_task",
            "256 MiB", "at most 33,554")


# ---- 10. infinite propensities at run time (every kernel: tests/support/kernel_conformance.py) --------

INFINITE = 'model = "model.toml"\n' + RUN.replace("replicates = 4", "replicates = 6").replace(
    "replicates_per_task = 2", "replicates_per_task = 6")


def _run_shard(tmp_path, model: str):
    path = write(tmp_path, spec=INFINITE, model=model)
    with time_bound(120, "sweep run of an infinite propensity"):
        result = runner.invoke(app, ["run", str(path), "--shard", "1/1", "--store", str(tmp_path / "out.zarr")])
    assert no_traceback(result), repr(result.exception)
    return result, tmp_path / "out.zarr"


def test_10_infinite_propensity_is_status_2_in_the_store(tmp_path):
    # k / (A - 3) is infinite when A reaches 3: immigration at rate 1 gets there within t = 2 for
    # some replicates of these seeds and not for others, so the task's chunk holds both kinds
    model = ('[species]\nA = 0\n[parameters]\nk = 1.0\n[reactions]\nin = { reaction = "0 -> A", rate = 2.0 }\n'
             'out = { reaction = "A -> 0", propensity = "k / (A - 3)" }\n')
    result, store = _run_shard(tmp_path, model)
    assert result.exit_code == 0, result.output
    g = zarr.open_group(store, mode="r")
    status, counts = g["status"][0], g["counts"][0]
    assert set(status.tolist()) == {0, 2}, status
    assert (counts[status == 2] == -1).all() and (counts[status == 0] >= 0).all()


def test_10_task_whose_every_replicate_fails_is_recorded(tmp_path):
    model = ('[species]\nA = 5\n[parameters]\nk = 1.0\n[reactions]\n'
             'out = { reaction = "A -> 0", propensity = "k / (A - A)" }\n')
    result, store = _run_shard(tmp_path, model)
    assert result.exit_code == 0, result.output
    assert (zarr.open_group(store, mode="r")["status"][:] == 2).all()


# ---- 11. large networks: a linear dependency graph, and a stated limit --------------------------

def _old_dependency_graph(model) -> tuple[list[int], list[int]]:
    """The O(R^2) construction compile_network used before: test every (fired, dependent) pair."""
    index = {name: i for i, name in enumerate(model.species)}
    changes = [_net_change(r, index) for r in model.reactions]
    depends_on = [{index[sp] for sp, _ in r.reactants}
                  | ({index[n] for n in r.propensity.names if n in index} if r.propensity else set())
                  for r in model.reactions]
    ptr, idx = [0], []
    for j in range(len(model.reactions)):
        touched = set(changes[j])
        idx.extend(r for r in range(len(model.reactions)) if depends_on[r] & touched)
        ptr.append(len(idx))
    return ptr, idx


def _random_model(rng: random.Random):
    n_s = rng.randint(1, 12)
    names = [f"S{i}" for i in range(n_s)]
    reactions = {}
    for j in range(rng.randint(1, 40)):
        def side():
            picks = rng.sample(names, rng.randint(0, min(3, n_s)))
            return " + ".join(f"{rng.randint(1, 3)} {s}" for s in picks) or "0"
        entry = {"reaction": f"{side()} -> {side()}"}
        if rng.random() < 0.3:  # a custom law reading modifiers too
            read = rng.sample(names, rng.randint(1, min(3, n_s)))
            entry["propensity"] = " * ".join(["k"] + read)
        else:
            entry["rate"] = "k"
        reactions[f"r{j}"] = entry
    return parse_model({"species": {s: 1 for s in names}, "parameters": {"k": 1.0}, "reactions": reactions}, "m")


def test_11_dependency_graph_is_the_same_as_the_quadratic_one():
    rng = random.Random(20261202)
    for _ in range(300):
        model = _random_model(rng)
        net = compile_network(model)
        ptr, idx = _old_dependency_graph(model)
        assert net.dep_ptr.tolist() == ptr and net.dep_idx.tolist() == idx


def test_11_too_many_reactions(tmp_path):
    lines = ["[species]", "A = 1", "B = 0", "[reactions]"]
    lines += [f'r{j} = {{ reaction = "A -> B", rate = 1.0 }}' for j in range(limits.MAX_REACTIONS + 1)]
    refused(write(tmp_path, model="\n".join(lines) + "\n"), "reactions", "100,001 reactions", "model.toml",
            seconds=30)


def test_11_dependency_graph_beyond_the_limit(tmp_path):
    # 4,000 reactions that all read and change A: 16 million dependency entries
    lines = ["[species]", "A = 1", "B = 0", "[reactions]"]
    lines += [f'r{j} = {{ reaction = "A -> B", rate = 1.0 }}' for j in range(4000)]
    refused(write(tmp_path, model="\n".join(lines) + "\n"), "reactions", "dependency graph", "species 'A'",
            seconds=30)


# ---- sweep run refuses the same way, before any store exists -----------------------------------

RUN_CASES = {
    "1": (dict(model=model_with(P="P = 2147483648")), "species.P"),
    "2": (dict(spec=SPEC + "x = " + "[" * 5000 + "]" * 5000 + "\n"), "x"),
    "3": (dict(spec=SPEC.replace('"model.toml"', '"/dev/zero"'), model=None), "model"),
    "5": (dict(spec=SIZES["samples"][0]), "time.samples"),
    "6": (dict(spec=SPEC.replace("seed = 11", 'seed = 11\nstore = "' + "s" * 100_000 + '"')), "run.store"),
    "7": (dict(spec=SPEC + '[derived]\ng_p = "1e309"\n'), "derived.g_p"),
    "8": (dict(spec=SPEC.replace("max_events = 100000", f"max_events = {2**63}")), "run.max_events"),
    "9": (dict(spec=SPEC.replace("replicates_per_task = 2", "replicates_per_task = 1000000000000")),
          "run.replicates_per_task"),
}


@pytest.mark.parametrize("item", list(RUN_CASES))
def test_run_refuses_before_creating_a_store(tmp_path, monkeypatch, item):
    kwargs, field = RUN_CASES[item]
    path = write(tmp_path, **kwargs)
    monkeypatch.chdir(tmp_path)
    with time_bound(20, f"sweep run (item {item})"):
        result = runner.invoke(app, ["run", str(path), "--workers", "1"])
    out = " ".join(result.output.split())
    assert result.exit_code == 2 and no_traceback(result) and field in out, out
    assert not list(tmp_path.glob("*.zarr"))


def test_markup_in_a_name_is_printed_verbatim(tmp_path):
    out = refused(write(tmp_path, model=MODEL.replace("P = 5", '"P[/]" = 5')), "species.P[/]", "identifiers")
    out = refused(write(tmp_path, model=MODEL.replace("P = 5", '"[species]" = 5')), "species.[species]")


def test_sbml_spec_base_is_valid(tmp_path):
    # the SBML cases above break this document one way each
    code, out, _ = check(write_sbml(tmp_path, sbml(), SBML_SPEC))
    assert code == 0, out
