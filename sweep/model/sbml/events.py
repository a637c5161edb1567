"""SBML events (L3V2 section 4.14) as our interventions: ``change`` and ``when`` entries of the table.

Accepted, because our semantics are then exactly SBML's:

- a trigger ``time >= t0`` (or ``>``, ``t0 <= time``, ``geq(time, t0)``) with t0 a number, a
  parameter or math over parameters (then a derived parameter ``<event>__at``): a timed change at t0 (time only grows, so it fires once);
- a trigger comparing one species with a number or a parameter (``>= > <= <``): a state-triggered
  change that fires each time the comparison becomes true (SBML fires on every false -> true
  transition; ``repeat = true`` re-arms the same way), the threshold converted to molecules with
  the species' own factor (count = value x beta, no rounding: the comparison is the same);
- assignments of a number or a parameter to a species (converted to a whole count, rounded as an
  initial amount is) or to a parameter (the rates that read it are recomputed, through the
  import's own conversion).

Refused, naming the event: delays (a firing would wait in a queue the kernels do not keep, so it
could not be exact), priorities when the model has more than one event (simultaneous changes apply
in the order listed), ``initialValue = true`` for a trigger already true at t = 0 (SBML would not
fire it, ours would), triggers of any other form, assignments whose math reads the state, and
assignments to a parameter an initial assignment reads (SBML keeps the initial value; recomputing
would not). Without a delay ``persistent`` and ``useValuesFromTriggerTime`` change nothing, so
either value is accepted.
"""

from __future__ import annotations

from typing import Any

from sweep.model import expr as expressions
from sweep.model.sbml import laws, rules
from sweep.model.sbml.math import TIME, from_ast, render

_FLIP = {"ge": "le", "gt": "lt", "le": "ge", "lt": "gt"}
_OPS = {"ge": ">=", "gt": ">", "le": "<=", "lt": "<"}


def convert(ctx, initial: dict[str, Any], initial_derived: set[str]) -> tuple[list[dict], list[dict]]:
    """The model's events as (``change`` entries, ``when`` entries); problems go to ``ctx.problems``."""
    timed, watched = [], []
    events = list(ctx.model.getListOfEvents())
    for i, event in enumerate(events):
        eid = event.getId() or f"#{i + 1}"
        where = f"event {eid}"
        entry = _event(ctx, event, eid, where, len(events), initial, initial_derived)
        if entry is not None:
            (timed if "at" in entry else watched).append(entry)
    return timed, watched


def _event(ctx, event, eid: str, where: str, n_events: int, initial: dict, initial_derived: set) -> dict | None:
    if event.isSetDelay():
        ctx.problems.append(f"{where}: a delay is not supported (the firing would wait in a queue of pending "
                            "assignments, which the simulation does not keep exactly)")
        return None
    if event.isSetPriority() and n_events > 1:
        ctx.problems.append(f"{where}: priorities are not supported (simultaneous changes apply in the order "
                            "the events are listed)")
        return None
    trigger = event.getTrigger()
    if trigger is None or not trigger.isSetMath():
        ctx.problems.append(f"{where}: no trigger math")
        return None
    entry = _trigger(ctx, from_ast(trigger.getMath(), {}, ctx.functions, ctx.problems, f"{where} trigger"),
                     where, eid)
    if entry is None:
        return None
    if trigger.getInitialValue() and _true_at_start(ctx, entry, initial, where):
        return None
    steps = _assignments(ctx, event, eid, where, initial_derived)
    if steps is None:
        return None
    if not steps:
        ctx.notes.append((where, "assigns nothing: dropped"))
        return None
    entry.update(steps)
    what = f"timed change at {entry['at']}" if "at" in entry else f"when {entry['condition']} (each time)"
    ctx.notes.append((where, f"{what}: " + ", ".join(f"{k} {v}" for k, v in steps.items())))
    return entry


def _trigger(ctx, tree, where: str, eid: str) -> dict | None:
    if tree is None:
        return None
    tree = rules.inline(ctx, tree, f"{where} trigger")
    if tree is None:
        return None
    fix = "a trigger compares time, or one species, with a number or a parameter"
    if not (tree[0] == "call" and tree[1] in _OPS and len(tree[2]) == 2):
        ctx.problems.append(f"{where}: trigger is not a single comparison ({fix})")
        return None
    op, (a, b) = tree[1], tree[2]
    if a[0] != "name" or a[1] not in ctx.species and a[1] != TIME:
        op, a, b = _FLIP[op], b, a
    value = _constant(ctx, b, f"{eid}__at" if a == ("name", TIME) else f"{eid}__level")
    if a[0] != "name" or value is None:
        ctx.problems.append(f"{where}: trigger compares more than one time or species symbol ({fix})")
        return None
    if a[1] == TIME:
        if op not in ("ge", "gt"):
            ctx.problems.append(f"{where}: trigger time {_OPS[op]} ... holds from the start and never becomes "
                                "true later; only time >= t0 is supported")
            return None
        return {"at": value}
    if a[1] not in ctx.species:
        ctx.problems.append(f"{where}: trigger reads {a[1]}, which is not a species or the time ({fix})")
        return None
    beta = ctx.species[a[1]].beta
    threshold = _scaled(ctx, value, beta, f"{eid}__threshold", rounded=False)
    return {"condition": f"{a[1]} {_OPS[op]} {threshold}", "repeat": True}


def _constant(ctx, node, name: str) -> float | str | None:
    """A number, a parameter id, or math over parameters and numbers only (then the derived
    parameter ``name``, computed at every point); None for math that reads the state or the time."""
    if node[0] == "num":
        return float(node[1])
    if node[0] == "neg" and node[1][0] == "num":
        return -float(node[1][1])
    read = laws.names(node)
    if not read:  # numbers only
        return float(expressions.evaluate(expressions.parse(render(node), ctx.source, name), {}))
    if any(n not in ctx.values or n == TIME or n in ctx.species for n in read):
        return None
    if node[0] == "name":
        return node[1]
    fresh = ctx.fresh(name)
    ctx.derived[fresh] = text = render(node)
    ctx.values[fresh] = float(expressions.evaluate(expressions.parse(text, ctx.source, fresh), ctx.values))
    return fresh


def _scaled(ctx, value: float | str, beta: float, name: str, rounded: bool) -> float | str:
    """``value`` in molecules (x beta); a parameter with beta != 1 becomes a derived parameter."""
    if isinstance(value, float):
        count = value * beta
        return float(int(count + 0.5)) if rounded and count >= 0 else count
    if beta == 1.0 and not rounded:
        return value
    fresh = ctx.fresh(name)
    scaled = f"{beta!r} * {value}" if beta != 1.0 else value
    ctx.derived[fresh] = text = f"floor({scaled} + 0.5)" if rounded else scaled
    # its value at the model's own values (a spec recomputes it at every point, like every derived one)
    ctx.values[fresh] = float(expressions.evaluate(expressions.parse(text, ctx.source, fresh), ctx.values))
    return fresh


def _assignments(ctx, event, eid: str, where: str, initial_derived: set) -> dict | None:
    """The event's assignments as ``set`` tables (species counts, parameters)."""
    out: dict[str, dict] = {}
    ok = True
    for a in event.getListOfEventAssignments():
        v = a.getVariable()
        tree = from_ast(a.getMath(), {}, ctx.functions, ctx.problems, f"{where} assignment to {v}")
        tree = rules.inline(ctx, tree, f"{where} assignment to {v}") if tree is not None else None
        value = _constant(ctx, tree, f"{eid}__{v}__value") if tree is not None else None
        if value is None:
            ctx.problems.append(f"{where}: assignment to {v} is not a number or a parameter (math that reads "
                                "the state or the time is not supported)")
            ok = False
        elif v in ctx.species:
            out.setdefault("set", {})[v] = _scaled(ctx, value, ctx.species[v].beta, f"{eid}__{v}", rounded=True)
        elif v in ctx.values and v not in ctx.assigned_targets and v not in ctx.rated:
            readers = [n for n in initial_derived if _reads(ctx.derived.get(n, ""), v)]
            if readers:
                ctx.problems.append(f"{where}: assigns {v}, which the initial assignment of {readers[0]} reads "
                                    "(SBML keeps that initial value; assign the parameters themselves)")
                ok = False
            else:
                out.setdefault("set", {})[v] = value
        else:
            ctx.problems.append(f"{where}: assignment to {v}: only species and parameters with a value can be "
                                "assigned (not compartments, rule targets or stoichiometries)")
            ok = False
    return out if ok else None


def _reads(text: str, name: str) -> bool:
    import re

    return re.search(rf"\b{re.escape(name)}\b", text) is not None


def _true_at_start(ctx, entry: dict, initial: dict, where: str) -> bool:
    """initialValue = true: SBML does not fire a trigger already true at t = 0; refuse that case."""
    if "at" in entry:
        at = entry["at"]
        start = ctx.values.get(at) if isinstance(at, str) else at
        if start is not None and start > 0:
            return False
        ctx.problems.append(f"{where}: initialValue=true and the trigger time >= {at} holds at t = 0 (SBML would "
                            "not fire it; give it a later time or initialValue=false)")
        return True
    species, op, threshold = entry["condition"].split()
    x0, t = initial.get(species), ctx.values.get(threshold, None) if not _is_number(threshold) else float(threshold)
    if isinstance(x0, (int, float)) and t is not None and not _holds(float(x0), op, float(t)):
        return False
    ctx.problems.append(f"{where}: initialValue=true and the trigger {entry['condition']} holds (or may hold) at "
                        "t = 0, where SBML would not fire it; set initialValue=false if it should fire at the start")
    return True


def _is_number(text: str) -> bool:
    try:
        float(text)
    except ValueError:
        return False
    return True


def _holds(x: float, op: str, t: float) -> bool:
    return {">=": x >= t, ">": x > t, "<=": x <= t, "<": x < t}[op]
