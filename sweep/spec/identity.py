"""What decides a sweep's bytes, as a JSON-ready fingerprint, and how two fingerprints differ.

A store may be resumed only by the sweep that made it. Two specs are the same sweep when
everything that decides which number lands where is equal: the method and its options, the
seed, the replicates and blocks, the event cap, the time grid, the species in order, the
reactions in order (what they consume and make, their rate or law), the varied parameters in
order, the expanded points in order, and the value of every parameter the network reads at
every point. Key order in the spec or model file matters only where it changes one of these:
the order of ``[species]`` decides the columns of ``counts``, the order of ``[reactions]``
decides which reaction a random number picks, the order of ``[design.vary]`` decides the
``param`` coordinate and the order of the points. Comments, spacing, the order of
``[parameters]`` or of the keys inside a table, ``run.store`` and ``[cluster]`` change none of
them, so they are safe to edit.

Large parts (the time grid, the points, the parameter values at every point) enter as
SHA-256 digests, so the fingerprint stays small for any sweep.
"""

from __future__ import annotations

import hashlib
import json
from typing import TYPE_CHECKING, Any

import numpy as np

from sweep.model import changes

if TYPE_CHECKING:
    from sweep.spec import Spec

FORMAT = 1
_SHOWN = 8  # list items shown in a difference before "..."


def of(spec: Spec, points: np.ndarray) -> dict[str, Any]:
    """The fingerprint of ``spec`` with its expanded ``points`` (pure; no I/O).

    Example
    -------
    >>> spec = load("configs/reporter.toml")
    >>> of(spec, spec.points())["species"]
    ['gene_off', 'gene_on', 'mRNA', 'protein']
    """
    model = spec.model
    index = {name: i for i, name in enumerate(model.species)}
    times = np.ascontiguousarray(spec.times, dtype=np.float64)
    points = np.ascontiguousarray(points, dtype=np.float64)
    found = {
        "format": FORMAT,
        "method": spec.method,
        "options": {k: v for k, v in sorted(spec.options)},
        "seed": int(spec.seed),
        "replicates": int(spec.store_replicates),
        "replicates_per_task": int(spec.replicates_per_task),
        "max_events": int(spec.max_events),
        "adaptive": _adaptive(spec),
        "times": {"count": int(times.size), "first": float(times[0]), "last": float(times[-1]),
                  "sha256": _sha(times)},
        "species": list(model.species),
        "initial": [v if isinstance(v, str) else int(v) for v in model.initial],
        "units": {"constants": model.constants, "volume": model.volume},
        "reactions": [_reaction(r, index) for r in model.reactions],
        "param": list(spec.param_names),
        "points": {"count": int(points.shape[0]), "sha256": _sha(points)},
        "values": _values(spec, points),
        # only when there are some, so a store without observables keeps the fingerprint it always had
        **({"observables": _observables(model)} if model.observables else {}),
    }
    if spec.interventions:  # only when there are any: the fingerprints of older stores stay as they were
        found["interventions"] = changes.describe(spec.interventions)
    return found


def digest(identity: dict[str, Any]) -> str:
    """SHA-256 of a fingerprint (equal digests: the same sweep)."""
    return hashlib.sha256(json.dumps(identity, sort_keys=True).encode()).hexdigest()


def differences(old: dict[str, Any], new: dict[str, Any]) -> list[str]:
    """What moved from ``old`` to ``new``, one readable line per difference (empty: same sweep).

    Example
    -------
    >>> differences({"seed": 1}, {"seed": 2})
    ['run.seed: 1 -> 2']
    """
    out: list[str] = []
    for key, label in _SCALARS:
        if old.get(key) != new.get(key):
            out.append(f"{label}: {_show(old.get(key))} -> {_show(new.get(key))}")
    if old.get("times") != new.get("times"):
        out.append(f"time grid: {_grid(old.get('times'))} -> {_grid(new.get('times'))}")
    out += _order_or_content("species", old.get("species", []), new.get("species", []),
                             "the order of [species] decides the columns of counts")
    if old.get("species") == new.get("species") and old.get("initial") != new.get("initial"):
        out.append(f"initial counts: {_show(old.get('initial'))} -> {_show(new.get('initial'))}")
    out += _reactions(old.get("reactions", []), new.get("reactions", []))
    out += _observables_moved(old.get("observables", []), new.get("observables", []))
    out += _order_or_content("varied parameters ([design.vary])", old.get("param", []), new.get("param", []),
                             "their order decides the param coordinate and the order of the points")
    if old.get("points") != new.get("points"):
        out.append(f"design points: {_count(old.get('points'))} -> {_count(new.get('points'))} points"
                   if _count(old.get("points")) != _count(new.get("points"))
                   else "design points: the same number of points, at other parameter values or in another order")
    if old.get("interventions") != new.get("interventions"):
        out += _interventions(old.get("interventions") or [], new.get("interventions") or [])
    old_values, new_values = old.get("values", {}), new.get("values", {})
    for name in sorted(set(old_values) | set(new_values)):
        a, b = old_values.get(name), new_values.get(name)
        if a != b:
            out.append(f"parameter {name}: {_value(a)} -> {_value(b)}")
    return out


def point_moves(old_params: np.ndarray, old_names: list[str], new_points: np.ndarray, new_names: list[str],
                shown: int = 3) -> list[str]:
    """Lines naming points whose values differ between the store and the new design, compared
    parameter by parameter (by name), each side shown in its own order."""
    if old_params.shape != new_points.shape or sorted(old_names) != sorted(new_names) or not old_params.size:
        return []
    aligned = new_points[:, [new_names.index(n) for n in old_names]]
    moved = np.flatnonzero(np.any(~_same(old_params, aligned), axis=1))
    lines = [f"{moved.size} of {old_params.shape[0]} points now have other parameter values"] if moved.size else []
    for p in moved[:shown]:
        was = ", ".join(f"{n} = {v:g}" for n, v in zip(old_names, old_params[p]))
        now = ", ".join(f"{n} = {v:g}" for n, v in zip(new_names, new_points[p]))
        lines.append(f"point {p}: {was} -> {now}")
    return lines


def _same(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    return (a == b) | (np.isnan(a) & np.isnan(b))


_SCALARS = (("format", "fingerprint format"), ("method", "run.method"), ("options", "run.options"),
            ("seed", "run.seed"), ("replicates", "replicates per point"),
            ("replicates_per_task", "run.replicates_per_task"), ("max_events", "run.max_events"),
            ("adaptive", "run.adaptive"), ("units", "model units"))


def _adaptive(spec: Spec) -> dict[str, Any] | None:
    a = spec.adaptive
    if a is None:
        return None
    return {"statistic": a.statistic, "species": a.species, "time": a.time, "precision": a.precision,
            "relative": a.relative, "max_replicates": a.max_replicates}


def _reaction(r, index: dict[str, int]) -> dict[str, Any]:
    """A reaction as the kernels see it: species by position, its rate or its law's tree."""
    return {
        "name": r.name,  # shown in differences, never compared (a rename changes no byte)
        "reactants": [[index[s], m] for s, m in r.reactants],
        "products": [[index[s], m] for s, m in r.products],
        "rate": r.rate,
        "law": repr(r.propensity.tree) if r.propensity is not None else None,
    }


def _values(spec: Spec, points: np.ndarray) -> dict[str, Any]:
    """Every parameter the network reads, at every point: a number if it is the same everywhere,
    else the SHA-256 of its column."""
    model = spec.model
    used = {r.rate for r in model.reactions if isinstance(r.rate, str)}
    used |= {v for v in model.initial if isinstance(v, str)}
    used |= set(model.law_parameters)
    used |= {n for _, e in model.observables for n in e.names if n not in model.species}
    used |= changes.referenced(spec.interventions)
    columns = spec.columns(points)
    out: dict[str, Any] = {}
    for name in sorted(used):
        column = np.ascontiguousarray(np.broadcast_to(np.asarray(columns[name], dtype=np.float64),
                                                      (points.shape[0],)))
        if column.size and np.all(column == column[0]):
            out[name] = float(column[0])
        else:
            out[name] = {"sha256": _sha(column)}
    return out


def _observables(model) -> list[list[str]]:
    """Each observable as its name and checked tree, in order (they are the columns of ``observables``)."""
    return [[name, repr(e.tree)] for name, e in model.observables]


def _observables_moved(old: list, new: list) -> list[str]:
    """Observables added, removed, reordered or edited: each changes the stored ``observables``."""
    if old == new:
        return []
    a, b = dict(map(tuple, old)), dict(map(tuple, new))
    if a == b:
        return [f"observable order: {_list(list(a))} -> {_list(list(b))} (the order of [observables] decides "
                "the columns of observables)"]
    lines = [f"observable {name}: " + ("added" if name not in a else "removed" if name not in b else "edited")
             for name in list(a) + [n for n in b if n not in a] if a.get(name) != b.get(name)]
    return lines[:_SHOWN]


def _interventions(old: list[dict], new: list[dict]) -> list[str]:
    """Each [[change]]/[[when]] (model's first, then the spec's) that was added, removed or edited."""
    if len(old) != len(new):
        return [f"interventions ([[change]], [[when]]): {len(old)} -> {len(new)}"]
    out = []
    for i, (a, b) in enumerate(zip(old, new)):
        kind = "change" if "at" in b else "when"
        for key in sorted(set(a) | set(b)):
            if a.get(key) != b.get(key):
                out.append(f"intervention {i} ([[{kind}]]) {key}: {_show(a.get(key))} -> {_show(b.get(key))}")
    return out[:_SHOWN]


def _sha(array: np.ndarray) -> str:
    return hashlib.sha256(array.tobytes()).hexdigest()


def _strip(reaction: dict[str, Any]) -> dict[str, Any]:
    return {k: v for k, v in reaction.items() if k != "name"}


def _reactions(old: list[dict], new: list[dict]) -> list[str]:
    a, b = [_strip(r) for r in old], [_strip(r) for r in new]
    if a == b:
        return []
    names_a, names_b = [r["name"] for r in old], [r["name"] for r in new]
    key = lambda r: json.dumps(r, sort_keys=True)  # noqa: E731
    if sorted(map(key, a)) == sorted(map(key, b)):
        return [f"reaction order: {_list(names_a)} -> {_list(names_b)} "
                "(the order of [reactions] decides which reaction a random number picks)"]
    if len(a) != len(b):
        return [f"reactions: {len(a)} -> {len(b)} ({_list(names_a)} -> {_list(names_b)})"]
    return [f"reaction {j} ({names_b[j]}): {_reaction_text(ra)} -> {_reaction_text(rb)}"
            for j, (ra, rb) in enumerate(zip(a, b)) if ra != rb][:_SHOWN]


def _reaction_text(r: dict[str, Any]) -> str:
    side = lambda terms: " + ".join(f"{m}*#{i}" if m > 1 else f"#{i}" for i, m in terms) or "0"  # noqa: E731
    how = f"law {r['law']}" if r.get("law") else f"rate {r.get('rate')}"
    return f"{side(r['reactants'])} -> {side(r['products'])}, {how}"


def _order_or_content(what: str, old: list, new: list, why: str) -> list[str]:
    if old == new:
        return []
    if sorted(old) == sorted(new):
        return [f"{what} order: {_list(old)} -> {_list(new)} ({why})"]
    return [f"{what}: {_list(old)} -> {_list(new)}"]


def _list(items: list) -> str:
    shown = ", ".join(map(str, items[:_SHOWN]))
    return f"[{shown}{', ...' if len(items) > _SHOWN else ''}]"


def _grid(times: dict | None) -> str:
    if not times:
        return "(none)"
    return f"{times['count']} samples {times['first']:g}..{times['last']:g}"


def _count(part: dict | None) -> int | None:
    return None if not part else part.get("count")


def _value(v: Any) -> str:
    if v is None:
        return "(not read)"
    if isinstance(v, dict):
        return "(other values at the points)"
    return f"{v:g}"


def _show(value: Any) -> str:
    text = json.dumps(value, default=str)
    return text if len(text) <= 60 else text[:57] + "..."
