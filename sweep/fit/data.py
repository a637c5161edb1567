"""Read the observed data: a tidy CSV, one row per cell and measurement::

    time,condition,species,value
    60,low,protein,112
    60,low,protein,87
    ...

``species`` (or ``observable``) names a species of the model or one of its ``[observables]``
(a reporter's intensity, a sum of species), ``condition`` one of the fit spec's
``[fit.conditions]``, ``time`` one of the model's sample times (``[time]``), ``value`` a count
>= 0 for a species, any finite number for an observable. Each bad row is refused with the file,
the row (the file's line number) and the column, and the fix; so is a condition declared in the
spec that has no rows.
"""

from __future__ import annotations

import csv
import hashlib
import io
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from sweep.errors import SpecError
from sweep.fit.distances import Component
from sweep.spec import inputs, limits

COLUMNS = ("time", "condition", "species", "value")


@dataclass(frozen=True)
class Observed:
    components: tuple[Component, ...]  # in (condition, time, species) order
    sha256: str
    rows: int


def read(path: Path, spec_source: str, species: tuple[str, ...], times: tuple[float, ...],
         conditions: tuple[str, ...], observables: tuple[str, ...] = ()) -> Observed:
    """Validate the data file and group its values by (time, condition, species or observable).

    Raises
    ------
    SpecError
        Missing or unreadable file, a missing column, an unknown species or condition, a time off
        the model's grid, a value that is not a number >= 0, a declared condition without rows.
    """
    inputs.check_path(path, spec_source, "fit.data")
    raw = inputs.read_bytes(path, spec_source, "fit.data", limits.MAX_FILE_BYTES)
    src = str(path)
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        raise SpecError(src, "", "not UTF-8 text", fix="save the data as a UTF-8 CSV file") from exc
    lines = [(n, line) for n, line in enumerate(text.splitlines(), 1)
             if line.strip() and not line.lstrip().startswith("#")]
    if len(lines) < 2:
        raise SpecError(src, "", "needs a header row and at least one row of data",
                        fix=f"columns: {', '.join(COLUMNS)}")
    parsed = list(csv.reader(io.StringIO("\n".join(line for _, line in lines))))
    where = _header(parsed[0], lines[0][0], src)
    groups: dict[tuple[str, int, str], list[float]] = {}
    for (number, _), cells in zip(lines[1:], parsed[1:]):
        key, value = _row(cells, number, where, src, species, observables, times, conditions)
        groups.setdefault(key, []).append(value)
    seen = {c for c, _, _ in groups}
    for name in conditions:
        if name not in seen:
            raise SpecError(src, "column condition", f"no rows for condition {name!r} of {spec_source} [fit.conditions]",
                            fix=f"add its cells to {path.name}, or remove {name!r} from [fit.conditions]")
    names = species + observables
    order = sorted(groups, key=lambda k: (conditions.index(k[0]), k[1], names.index(k[2])))
    components = tuple(Component(times[t], c, s, np.sort(np.array(groups[(c, t, s)], dtype=np.float64)))
                       for c, t, s in order)
    return Observed(components, hashlib.sha256(raw).hexdigest(), len(lines) - 1)


def _header(cells: list[str], number: int, src: str) -> dict[str, int]:
    header = [h.strip().lower() for h in cells]
    header = ["species" if h == "observable" else h for h in header]
    for name in COLUMNS:
        if name not in header:
            raise SpecError(src, f"row {number}", f"the header has no column {name!r}", cells,
                            f"the header row must name the columns {', '.join(COLUMNS)}")
    extra = [h for h in header if h not in COLUMNS]
    if extra:
        raise SpecError(src, f"row {number}", f"unknown column {extra[0]!r}", fix=f"keep only {', '.join(COLUMNS)}")
    return {name: header.index(name) for name in COLUMNS}


def _row(cells, number, where, src, species, observables, times, conditions) -> tuple[tuple[str, int, str], float]:
    if len(cells) != len(where):
        raise SpecError(src, f"row {number}", f"has {len(cells)} values, the header {len(where)} columns",
                        fix="every row needs a time, a condition, a species and a value")
    get = {name: cells[i].strip() for name, i in where.items()}
    name = get["species"]
    if name not in species and name not in observables:
        known = f"species of the model: {', '.join(species)}"
        raise SpecError(src, f"row {number}, column species", "unknown species or observable", name,
                        known + (f"; its observables: {', '.join(observables)}" if observables else
                                 "; or define it under the model's [observables]"))
    condition = get["condition"]
    if condition not in conditions:
        raise SpecError(src, f"row {number}, column condition", "not a condition of the fit", condition,
                        f"declare it under [fit.conditions], or use one of: {', '.join(conditions)}")
    t = _number(get["time"], number, "time", src)
    grid = np.asarray(times)
    hit = np.flatnonzero(np.isclose(grid, t, rtol=1e-9, atol=1e-12))
    if hit.size == 0:
        raise SpecError(src, f"row {number}, column time", "not on the model's time grid", get["time"],
                        f"sample times of [time]: {', '.join(f'{x:g}' for x in times[:12])}"
                        f"{' ...' if len(times) > 12 else ''}; add this time to [time] points")
    value = _number(get["value"], number, "value", src)
    if value < 0 and name in species:
        raise SpecError(src, f"row {number}, column value", "a count cannot be negative", get["value"],
                        "values are molecule counts >= 0")
    return (condition, int(hit[0]), name), value


def _number(cell: str, number: int, column: str, src: str) -> float:
    try:
        value = float(cell)
    except ValueError:
        value = float("nan")
    if not np.isfinite(value):
        raise SpecError(src, f"row {number}, column {column}", "not a finite number", cell)
    return value
