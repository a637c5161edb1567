"""An explicit table of points from a CSV file::

    [design]
    kind = "table"
    file = "points.csv"                # relative to the spec file
    [design.vary]                      # optional: which columns, and under which parameter
    k_tx = {}                          # the column named k_tx
    k_off = { column = "koff_per_min" }

``points.csv`` has a header row naming the columns, then one row per point; blank lines
and lines starting with ``#`` are skipped. Without ``[design.vary]`` every column is used
and each header must be a model parameter.

Designs are pure functions, so the file is read here, in ``parse``, once: the values and
the file's SHA-256 (which joins the spec hash, so a changed table is a different sweep)
live in the frozen ``Design``.
"""

from __future__ import annotations

import csv
import hashlib
import io
from pathlib import Path
from typing import Any, Mapping

import numpy as np

from sweep.spec import inputs, limits
from sweep.design import Design, levels
from sweep.errors import SpecError

#: the sensitivity method a sweep of this design gets (points spread over the space: partial rank correlation (Marino et al. 2008))
SENSITIVITY = "prcc"

_KEYS = ("kind", "file", "vary")


def parse(table: Mapping[str, Any], known: Mapping[str, float], source: str) -> Design:
    """Read and validate the CSV file named by ``design.file``.

    Raises
    ------
    SpecError
        Missing or unreadable file, no rows, a missing or repeated column, a short row,
        a value that is not a finite number, an unknown parameter.
    """
    levels.check_keys(table, _KEYS, source, "design", "a table design")
    name = table.get("file")
    if not isinstance(name, str) or not name:
        raise SpecError(source, "design.file", "missing" if name is None else "must be a file name",
                        name if name is not None else ..., 'add file = "points.csv" under [design]')
    path = Path(source).parent / name
    inputs.check_path(path, source, "design.file")
    data = inputs.read_bytes(path, source, "design.file", limits.MAX_FILE_BYTES)
    header, rows = _read_csv(data, path, source)
    columns = _columns(table, header, known, path, source)
    values = tuple(tuple(row[i] for _, i in columns) for row in rows)
    options = (("file", name), ("file_sha256", hashlib.sha256(data).hexdigest()), ("values", values))
    return Design("table", tuple(n for n, _ in columns), options)


def _read_csv(data: bytes, path: Path, source: str) -> tuple[list[str], list[tuple[float, ...]]]:
    try:
        text = data.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        raise SpecError(source, "design.file", f"{path} is not UTF-8 text", path.name) from exc
    lines = [(n, line) for n, line in enumerate(text.splitlines(), 1) if line.strip() and not line.lstrip().startswith("#")]
    if len(lines) < 2:
        raise SpecError(source, "design.file", f"{path} needs a header row and at least one row of values",
                        path.name)
    if len(lines) - 1 > limits.MAX_POINTS:
        raise SpecError(source, "design.file", f"{path} has {len(lines) - 1:,} rows, more than the "
                        f"{limits.MAX_POINTS:,} points a sweep can hold", path.name, "split it into several sweeps")
    parsed = list(csv.reader([line for _, line in lines]))
    header = [h.strip() for h in parsed[0]]
    for h in header:
        if not h or header.count(h) > 1:
            raise SpecError(source, "design.file", f"{path} line {lines[0][0]}: column names must be present and "
                            f"distinct", header)
    rows = []
    for (number, _), cells in zip(lines[1:], parsed[1:]):
        if len(cells) != len(header):
            raise SpecError(source, "design.file", f"{path} line {number} has {len(cells)} values but the header "
                            f"has {len(header)} columns", path.name, "every row needs a value in every column")
        rows.append(tuple(_number(cell, header[i], number, path, source) for i, cell in enumerate(cells)))
    return header, rows


def _number(cell: str, column: str, number: int, path: Path, source: str) -> float:
    try:
        value = float(cell)
    except ValueError:
        value = float("nan")
    if not np.isfinite(value):
        raise SpecError(source, "design.file", f"{path} line {number}, column {column}: {cell.strip()!r} "
                        "is not a finite number", path.name)
    return value


def _columns(table, header, known, path, source) -> list[tuple[str, int]]:
    """(parameter, column index) pairs, from ``[design.vary]`` or from the header."""
    vary = table.get("vary")
    if vary is None:
        for h in header:
            levels.check_known(h, known, source, f"design.file column {h!r}")
        return [(h, i) for i, h in enumerate(header)]
    if not isinstance(vary, dict) or not vary:
        raise SpecError(source, "design.vary", "must be a non-empty table", vary,
                        "list the parameters to take from the file, or leave [design.vary] out")
    out = []
    for name, entry in vary.items():
        field = f"design.vary.{name}"
        levels.check_known(name, known, source, field)
        if not isinstance(entry, dict):
            raise SpecError(source, field, "must be a table", entry, f'write {name} = {{}} or {name} = {{ column = "..." }}')
        levels.check_keys(entry, ("column",), source, field, "a table column")
        column = entry.get("column", name)
        if column not in header:
            raise SpecError(source, field, f"column {column!r} missing from {path.name}", fix=f"its columns: {', '.join(header)}")
        out.append((name, header.index(column)))
    return out


def expand(design: Design, seed: int = 0) -> np.ndarray:
    """The rows of the file, in file order. Ignores ``seed``."""
    values = design.option("values", ())
    return np.array(values, dtype=np.float64).reshape(len(values), len(design.names))


def size(design: Design) -> int:
    """The number of rows in the file."""
    return len(design.option("values", ()))


def describe(design: Design) -> dict[str, Any]:
    """Kind, names, the file and its SHA-256, and each column's range."""
    points = expand(design)
    parameters = {name: {"low": float(points[:, q].min()), "high": float(points[:, q].max())}
                  for q, name in enumerate(design.names)}
    return {"kind": "table", "names": list(design.names), "file": design.option("file"),
            "file_sha256": design.option("file_sha256"), "parameters": parameters}
