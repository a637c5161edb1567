"""Fuzzing ``sweep check`` with malformed specs, models and SBML files, from a fixed seed.

Each case is a mutation of a valid input (``hostile_cases``): wrong types, missing and unknown
keys, negative, NaN and huge numbers, broken reaction strings and expressions, brackets and
markup-looking text in names and values, broken or deeply nested TOML, truncated and garbled
XML, unsupported or exploding MathML. Every case runs ``sweep check`` in process and must end
within ``SECONDS`` without a traceback; a case built to be invalid must exit with code 2, and one
that may stay valid (replacing a number by another, say) with 0 or 2. Markup-looking text
(``P[/]``) in an error message must print as written (``sweep.cli.common.shown``).
"""

from __future__ import annotations

import json
import random
import re
import tomllib
from pathlib import Path

import pytest

from support.hostile_cases import MODEL, SPEC, check, no_traceback, sbml

SEED = 20261202
CASES_PER_KIND = 25
SECONDS = 20.0  # per case; a typical case takes well under a second

INVALID, EITHER = "invalid", "either"

HOSTILE_VALUES = [
    float("nan"), float("inf"), float("-inf"), -1, -1e-300, 0, 1.5, 1e300, 2**31, 2**63 - 1, -(2**63),
    "", " ", "[species]", "P[/]", "[bold]x[/bold]", "[/]", "A -> ", "0 -> 2 -> 3", "<sbml/>", "x" * 300,
    "k_tx", "exp(", "__import__('os')", "1e309", "\u0000x", "é", [], {}, [1, "a"], True, {"low": 1},
    [[[[1]]]], {"a": {"b": {"c": {}}}},
]
HOSTILE_NAMES = ["[species]", "P[/]", "a b", "1x", "", "é", "x" * 300, "[bold]x[/bold]", "A.B", "A-B", "A\n"]
HOSTILE_EQUATIONS = ["A -> ", "-> ->", "M + -> P", "2.5 M -> P", "M => P", "M <-> P", "M - > P", "[M] -> P",
                     "M -> P[/]", "99999999999999999999 M -> P", "M -> 5000 P", "M -> Q", "", "->", "0 -> 0 -> 0",
                     "M + M + M", "1001 M -> 0", "M -> " + " + ".join(["P"] * 2000)]
HOSTILE_LAWS = ["exp(", "M ** ", "__import__('os')", "M.b", "M[0]", "lambda: 1", "1e309 * M", "min()", "max(M)",
                "hill_up(M)", "-" * 200 + "M", "(" * 250 + "M" + ")" * 250, "M if M else P", "'a'", "M @ P",
                "M // P", "x" * 2000, "f(M)", "P[/]", "[species]", "M and P", "{M}", "M; P", "1" + "0" * 400]
REQUIRED = {"spec": [("model",), ("time",), ("run", "replicates"), ("time", "end")],
            "model": [("species",), ("reactions",), ("reactions", "translate", "reaction"),
                      ("reactions", "translate", "rate")]}
FIXED_SCHEMA = {"spec": [(), ("run",), ("time",)], "model": [(), ("reactions", "translate")]}
TABLES = {"spec": ["run", "time", "design", "parameters", "derived"], "model": ["species", "reactions", "parameters"]}


# ---- a small TOML writer (tomllib reads, nothing in the standard library writes) ----------------

def _key(k: str) -> str:
    return k if re.fullmatch(r"[A-Za-z0-9_-]+", k) else json.dumps(k, ensure_ascii=False)


def _value(v) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, float):
        return "nan" if v != v else "inf" if v == float("inf") else "-inf" if v == float("-inf") else repr(v)
    if isinstance(v, int):
        return str(v)
    if isinstance(v, str):
        return json.dumps(v, ensure_ascii=False)
    if isinstance(v, list):
        return "[" + ", ".join(_value(x) for x in v) + "]"
    return "{ " + ", ".join(f"{_key(k)} = {_value(x)}" for k, x in v.items()) + " }"


def to_toml(doc: dict, prefix: str = "") -> str:
    """A table's scalars, lists and inline tables first, then each sub-table under its [header]."""
    lines = [f"{_key(k)} = {_value(v)}" for k, v in doc.items() if not isinstance(v, dict)]
    for k, v in doc.items():
        if isinstance(v, dict):
            header = f"{prefix}{_key(k)}"
            lines += [f"[{header}]", to_toml(v, header + ".")]
    return "\n".join(line.rstrip("\n") for line in lines if line) + "\n"


# ---- mutations ---------------------------------------------------------------------------------

def _docs() -> dict[str, dict]:
    return {"spec": tomllib.loads(SPEC), "model": tomllib.loads(MODEL)}


def _files(docs: dict[str, dict]) -> dict[str, str]:
    return {"spec.toml": to_toml(docs["spec"]), "model.toml": to_toml(docs["model"])}


def _paths(doc, prefix=()):
    """Every (path to a leaf) in a parsed document."""
    for k, v in doc.items():
        if isinstance(v, dict) and v:
            yield from _paths(v, prefix + (k,))
        else:
            yield prefix + (k,)


def _get(doc, path):
    for k in path:
        doc = doc[k]
    return doc


def replace_value(rng):
    docs = _docs()
    which = rng.choice(["spec", "model"])
    path = rng.choice(list(_paths(docs[which])))
    _get(docs[which], path[:-1])[path[-1]] = rng.choice(HOSTILE_VALUES)
    return _files(docs), EITHER


def delete_required(rng):
    docs = _docs()
    which = rng.choice(["spec", "model"])
    path = rng.choice(REQUIRED[which])
    del _get(docs[which], path[:-1])[path[-1]]
    return _files(docs), INVALID


def add_unknown_key(rng):
    docs = _docs()
    which = rng.choice(["spec", "model"])
    table = _get(docs[which], rng.choice(FIXED_SCHEMA[which]))
    table[rng.choice(["typo", "replicate", "speices", "[species]", "P[/]", "x" * 300])] = rng.choice(HOSTILE_VALUES)
    return _files(docs), INVALID


def wrong_table_type(rng):
    docs = _docs()
    which = rng.choice(["spec", "model"])
    docs[which][rng.choice(TABLES[which])] = rng.choice(["x", 3, [1, 2], True, 1e300])
    return _files(docs), INVALID


def hostile_name(rng):
    docs = _docs()
    table = docs["model"][rng.choice(["species", "parameters", "reactions"])]
    old = rng.choice(list(table))
    table[rng.choice(HOSTILE_NAMES)] = table.pop(old)
    return _files(docs), INVALID


def broken_equation(rng):
    docs = _docs()
    docs["model"]["reactions"][rng.choice(list(docs["model"]["reactions"]))]["reaction"] = rng.choice(HOSTILE_EQUATIONS)
    return _files(docs), INVALID


def broken_law(rng):
    docs = _docs()
    where = rng.choice(["model", "derived"])
    law = rng.choice(HOSTILE_LAWS)
    if where == "model":
        docs["model"]["reactions"]["transcribe"]["propensity"] = law
    else:
        docs["spec"]["derived"] = {"g_p": law}
    return _files(docs), INVALID


def hostile_number(rng):
    docs = _docs()
    field, bad = rng.choice([
        (("spec", "run", "replicates"), [0, -5, 2**63, 10**13, 1.5, float("nan")]),
        (("spec", "run", "replicates_per_task"), [0, 10**12, -1]),
        (("spec", "run", "max_events"), [0, 2**63, 2**62, -1]),
        (("spec", "run", "seed"), [-1, 2**64]),
        (("spec", "time", "samples"), [0, 1, 10**9, -3, float("inf")]),
        (("spec", "time", "end"), [0, -1.0, float("nan"), float("inf")]),
        (("model", "species", "P"), [-1, float("nan"), float("inf"), 1e300, 2**31, 2.5]),
        (("model", "parameters", "A0"), [-1, 2**31, 1e300, 0.5, float("nan")]),
        (("model", "parameters", "k_tl"), [-1.0, float("nan"), float("inf")]),
    ])
    _get(docs[field[0]], field[1:-1])[field[-1]] = rng.choice(bad)
    return _files(docs), INVALID


def broken_design(rng):
    docs = _docs()
    docs["spec"]["design"] = rng.choice([
        {"kind": "lhs", "vary": {"k_tl": {"low": 1, "high": 2}}},
        {"kind": "lhs", "points": 10**12, "vary": {"k_tl": {"low": 1, "high": 2}}},
        {"kind": "sobol", "points": 3, "vary": {"k_tl": {"low": 1, "high": 2}}},
        {"kind": "saltelli", "base_samples": 2**40, "vary": {"k_tl": {"low": 1, "high": 2}}},
        {"kind": "grid", "vary": {"k_tl": {"low": 1, "high": 2, "count": 10**8}}},
        {"kind": "grid", "vary": {"k_tl": {"low": 0, "high": 2, "count": 3, "spacing": "log"}}},
        {"kind": "grid", "vary": {"k_tl": {"low": 2, "high": 1, "count": 3}}},
        {"kind": "grid", "vary": {"A0": [1.5, 2.0]}},
        {"kind": "grid", "vary": {"A0": [1, 3e9]}},
        {"kind": "lhs", "points": 4, "vary": {"k_tl": {"distribution": "weird"}}},
        {"kind": "morris", "trajectories": 1, "vary": {"k_tl": {"low": 1, "high": 2}}},
        {"kind": "table", "file": "/dev/zero"},
        {"kind": "[species]"},
        {"kind": ["grid"]},
        {"kind": "grid", "vary": {"nope": [1, 2]}},
    ])
    return _files(docs), INVALID


# ---- text-level mutations of the TOML files ------------------------------------------------------

GARBAGE = ["[", "]", "{", "}", '"', "=", "\\", "'''", '"""', "\n[species]\n", "P[/]", "\n[run]\n", "\x00", "#",
           "\n= 1\n", "[[run]]", "\ud7ff", "\n" * 3]


def truncate_text(rng):
    files = {"spec.toml": SPEC, "model.toml": MODEL}
    name = rng.choice(list(files))
    files[name] = files[name][:rng.randrange(len(files[name]))]
    return files, EITHER


def insert_garbage(rng):
    files = {"spec.toml": SPEC, "model.toml": MODEL}
    name = rng.choice(list(files))
    text = files[name]
    at = rng.randrange(len(text) + 1)
    files[name] = text[:at] + rng.choice(GARBAGE) + text[at:]
    return files, EITHER


def broken_toml(rng):
    files = {"spec.toml": SPEC, "model.toml": MODEL}
    name = rng.choice(list(files))
    n = rng.choice([33, 500, 100_000])
    files[name] = rng.choice([
        files[name] + "[run]\nreplicates = 3\n",                       # a table defined twice
        files[name] + "x = " + "[" * n + "]" * n + "\n",              # deep arrays
        files[name] + "x = " + "{ a = " * min(n, 2000) + "1" + " }" * min(n, 2000) + "\n",  # deep inline tables
        files[name] + ".".join(["o"] * min(n, 3000)) + " = 1\n",        # deep dotted keys
        files[name] + "x = " + "1" * 5000 + "\n",                        # a 5,000-digit integer
        files[name] + "x = \"unterminated\n",
        files[name].replace("=", "==", 1),
        b"\xff\xfe" + files[name].encode(),                              # not UTF-8
    ])
    return files, INVALID


# ---- SBML ----------------------------------------------------------------------------------------

SBML_SPEC = 'model = "model.xml"\n' + SPEC.split("\n", 1)[1].split("[design.vary]")[0]
VALID_SBML = sbml(species=({"id": "A", "amount": 20}, {"id": "B", "amount": 0}),
                  parameters=(("k", 0.5), ("g", 0.1)),
                  reactions=({"id": "convert", "reactants": (("A", 1),), "products": (("B", 1),), "law": "k * A"},
                             {"id": "decay", "reactants": (("B", 1),), "law": "g * B"}))


def _with_math(text: str, mathml: str) -> str:
    start = text.index("<math")
    end = text.index("</math>") + len("</math>")
    return text[:start] + '<math xmlns="http://www.w3.org/1998/Math/MathML">' + mathml + "</math>" + text[end:]


def sbml_truncated(rng):
    return {"spec.toml": SBML_SPEC, "model.xml": VALID_SBML[:rng.randrange(len(VALID_SBML) - 20)]}, INVALID


def sbml_garbled(rng):
    text = list(VALID_SBML)
    for _ in range(rng.randint(1, 5)):
        text[rng.randrange(len(text))] = rng.choice(["<", ">", "&", '"', "\x00", "]", "/", "x", "é"])
    return {"spec.toml": SBML_SPEC, "model.xml": "".join(text)}, EITHER


def sbml_unsupported_math(rng):
    math = rng.choice([
        "<piecewise><piece><cn>1</cn><apply><gt/><ci>A</ci><cn>1</cn></apply></piece></piecewise>",
        '<apply><times/><ci>k</ci><csymbol encoding="text" definitionURL="http://www.sbml.org/sbml/symbols/time">t'
        "</csymbol></apply>",
        "<apply><arcsin/><ci>A</ci></apply>",  # sin, eq and piecewise with otherwise are read since issue 16
        "<apply><xor/><apply><gt/><ci>A</ci><cn>1</cn></apply><apply><lt/><ci>A</ci><cn>5</cn></apply></apply>",
        "<apply><ci>undefined_function</ci><ci>A</ci></apply>",
        "<apply><times/><ci>k</ci><ci>nobody</ci></apply>",
        "<apply><divide/><ci>k</ci></apply>",
        "<cn>INF</cn>",
        "<cn>NaN</cn>",
        "<apply><minus/>" * 150 + "<ci>A</ci>" + "</apply>" * 150,
        "<apply><minus/>" * 20_000 + "<ci>A</ci>" + "</apply>" * 20_000,
        "",
    ])
    return {"spec.toml": SBML_SPEC, "model.xml": _with_math(VALID_SBML, math)}, INVALID


def sbml_exploding_functions(rng):
    n = rng.randint(14, 40)
    functions = [("f1", "lambda(x, x + x)")] + [(f"f{i}", f"lambda(x, f{i - 1}(x) + f{i - 1}(x))")
                                                 for i in range(2, n + 1)]
    law = rng.choice([f"k * f{n}(A)", "k * " + "f1(" * n + "A" + ")" * n])
    text = sbml(reactions=({"id": "r1", "reactants": (("A", 1),), "law": law},), functions=functions)
    return {"spec.toml": SBML_SPEC, "model.xml": text}, INVALID


def sbml_bad_values(rng):
    amount = rng.choice([float("nan"), float("inf"), -1.0, 3e9, 1e300])
    text = sbml(species=({"id": "A", "amount": amount},))
    attr = rng.choice(['stoichiometry="1"', None])
    if attr and rng.random() < 0.5:
        text = text.replace(attr, f'stoichiometry="{rng.choice(["2.5", "1e10", "-1", "NaN"])}"', 1)
    return {"spec.toml": SBML_SPEC, "model.xml": text}, INVALID


def sbml_not_sbml(rng):
    text = rng.choice([
        "", "not xml at all", "<sbml/>", "<?xml version='1.0'?><root/>", "\x00\x01\x02",
        '<?xml version="1.0"?><!DOCTYPE lolz [<!ENTITY lol "lol"><!ENTITY lol2 "&lol;&lol;&lol;">]>'
        "<sbml>&lol2;</sbml>",
        VALID_SBML.replace('substanceUnits="item"', ""),
        # no size and concentrations (a sizeless compartment of amounts is read since issue 16)
        VALID_SBML.replace('size="1e-15"', "").replace('hasOnlySubstanceUnits="true"', 'hasOnlySubstanceUnits="false"'),
        VALID_SBML.replace("<kineticLaw>", "", 1),
        VALID_SBML.replace("<listOfReactions>", '<listOfEvents><event id="e"/></listOfEvents><listOfReactions>'),
    ])
    return {"spec.toml": SBML_SPEC, "model.xml": text}, INVALID


def sbml_hostile_ids(rng):
    name = rng.choice(["lambda", "in", "P_x", "A__initial"])
    text = VALID_SBML.replace('id="k"', f'id="{name}"').replace("> k <", f"> {name} <")
    return {"spec.toml": SBML_SPEC, "model.xml": text}, EITHER


KINDS = [replace_value, delete_required, add_unknown_key, wrong_table_type, hostile_name, broken_equation,
         broken_law, hostile_number, broken_design, truncate_text, insert_garbage, broken_toml,
         sbml_truncated, sbml_garbled, sbml_unsupported_math, sbml_exploding_functions, sbml_bad_values,
         sbml_not_sbml, sbml_hostile_ids]


def _cases() -> list[tuple[str, dict, str]]:
    rng = random.Random(SEED)
    cases = []
    for kind in KINDS:
        for i in range(CASES_PER_KIND if not kind.__name__.startswith("sbml_exploding") else 6):
            files, expect = kind(rng)
            cases.append((f"{kind.__name__}-{i}", files, expect))
    return cases


CASES = _cases()


def test_there_are_enough_cases():
    assert len(CASES) >= 200
    assert sum(expect == INVALID for _, _, expect in CASES) >= 150


@pytest.mark.parametrize("name, files, expect", CASES, ids=[c[0] for c in CASES])
def test_check_refuses_cleanly(tmp_path, name, files, expect):
    for file, content in files.items():
        target = tmp_path / file
        if isinstance(content, bytes):
            target.write_bytes(content)
        else:
            target.write_text(content, encoding="utf-8", errors="surrogatepass")
    code, out, result = check(tmp_path / "spec.toml", seconds=SECONDS)
    assert no_traceback(result), f"{name}: {result.exception!r}\n{out}"
    allowed = (2,) if expect == INVALID else (0, 2)
    assert code in allowed, f"{name}: exit {code}\n{out}"
    if code == 2:
        assert out.startswith("error: ") and ("spec.toml" in out or "model." in out), out
