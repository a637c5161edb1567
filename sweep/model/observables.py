"""Observables: named expressions over species and parameters, computed on the sample grid.

A model (its own TOML file, or a spec's ``[model]`` table) may list them in a table of its own::

    [observables]
    total_protein = "P + PP"
    fluor = "alpha * protein + background"

Each is read with the whitelist parser of ``sweep.model.expr`` (never evaluated as code) and may
read only the model's species (their counts), its parameters (their value at each point) and
numbers. An SBML assignment rule whose target reads species becomes one too
(``sweep.model.sbml.rules.observables``), through this same table.

The worker evaluates them from each block's counts with its point's parameter values
(``Readout.evaluate``) and writes them beside ``counts`` (``sweep.store``). A replicate that did
not finish (status != 0), and any sample the kernel left unknown (-1), gives NaN: never a number
computed from -1.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from typing import Any, Mapping

import numpy as np

from sweep.errors import SpecError
from sweep.model import expr
from sweep.spec import limits

_NAME = re.compile(r"^[A-Za-z_][A-Za-z0-9_]*$")
MAX_OBSERVABLES = limits.MAX_OBSERVABLES


def parse(table: Any, species: tuple[str, ...], parameters: set[str], reactions: set[str], source: str,
          field: str) -> tuple[tuple[str, expr.Expr], ...]:
    """Validate an ``[observables]`` table (``name = "expression"``) in the order written.

    Parameters
    ----------
    table : mapping or None
        The parsed TOML table; None when the model has none.
    species, parameters, reactions : the model's names (an observable may not reuse one)
    source, field : str
        File and dotted field of the table, for error messages.

    Returns
    -------
    tuple of (name, Expr)

    Raises
    ------
    SpecError
        Not a table, a name that is not an identifier or clashes with a species, parameter or
        reaction, an expression outside the whitelist, or one reading an unknown name.

    Example
    -------
    >>> parse({"total": "A + B"}, ("A", "B"), set(), set(), "m.toml", "observables")[0][0]
    'total'
    """
    if table is None:
        return ()
    if not isinstance(table, dict):
        raise SpecError(source, field, "must be a table", table, 'write it as [observables] with total = "A + B"')
    if len(table) > MAX_OBSERVABLES:
        raise SpecError(source, field, f"{len(table):,} observables, more than {MAX_OBSERVABLES:,}",
                        fix=f"at most {MAX_OBSERVABLES:,}")
    known = set(species)
    out = []
    for name, text in table.items():
        where = f"{field}.{name}"
        if not isinstance(name, str) or not _NAME.fullmatch(name):
            raise SpecError(source, where, "names must be identifiers (letters, digits, '_')", name)
        for kind, names in (("species", known), ("parameter", parameters), ("reaction", reactions)):
            if name in names:
                raise SpecError(source, where, f"an observable and a {kind} share this name", name,
                                "rename the observable: analysis finds both by name")
        if not isinstance(text, str):
            raise SpecError(source, where, "must be an expression in quotes", text, f'e.g. {name} = "A + B"')
        parsed = expr.parse(text, source, where)
        for used in parsed.names:
            if used not in known and used not in parameters:
                raise SpecError(source, where, f"unknown name {used!r}", text,
                                "an observable reads species and parameters of this model, and numbers")
        out.append((name, parsed))
    return tuple(out)


def storable(items: Mapping[str, str]) -> tuple[dict[str, str], list[tuple[str, str]]]:
    """Split imported observables (an SBML rule's inlined math) into those the whitelist reads and the rest.

    An assignment rule is an observable only as a bonus of the import: one whose inlined
    expression is too long or too deep for the parser must not make the whole model fail, so
    it is left out with a note (element, why) for ``sweep check`` instead.
    """
    kept, dropped = {}, []
    for name, text in items.items():
        try:
            expr.parse(text, "", name)
        except SpecError as exc:
            dropped.append((f"assignment rule for {name}", f"not kept as an observable: {exc.problem}"))
            continue
        kept[name] = text
    return kept, dropped


@dataclass(frozen=True)
class Readout:
    """What a worker needs to compute a model's observables: small and picklable (tuples only).

    ``parameters`` are the parameter names the expressions read, in the order of the values
    each block carries (``values_of`` gives them at one point).
    """

    names: tuple[str, ...]
    expressions: tuple[expr.Expr, ...]
    species: tuple[str, ...]
    parameters: tuple[str, ...]

    @classmethod
    def of(cls, model) -> "Readout | None":
        """The model's readout, or None when it has no observables (the store then has no array)."""
        if not model.observables:
            return None
        species = set(model.species)
        read = {n for _, e in model.observables for n in e.names if n not in species}
        return cls(tuple(n for n, _ in model.observables), tuple(e for _, e in model.observables),
                   tuple(model.species), tuple(sorted(read)))

    def values_of(self, values: Mapping[str, float]) -> tuple[float, ...]:
        """The parameters the expressions read, from one point's full set of values."""
        return tuple(float(values[n]) for n in self.parameters)

    def evaluate(self, counts: np.ndarray, status: np.ndarray, values: tuple[float, ...]) -> np.ndarray:
        """Observables of one block: float64 (replicates, times, observables).

        ``counts`` (replicates, times, species) and ``status`` (replicates,) are the kernel's;
        NaN where the replicate did not finish or a sample it reads is unknown (-1).
        """
        x = np.asarray(counts, dtype=np.float64)
        x = np.where(x < 0, np.nan, x)  # -1 marks an unknown sample, never a count
        env: dict[str, Any] = dict(zip(self.parameters, values))
        env.update((name, x[:, :, s]) for s, name in enumerate(self.species))
        out = np.empty(x.shape[:2] + (len(self.names),), dtype=np.float64)
        for k, e in enumerate(self.expressions):
            out[:, :, k] = np.broadcast_to(expr.evaluate(e, env), x.shape[:2])
        out[np.asarray(status) != 0] = np.nan
        return out


__all__ = ["MAX_OBSERVABLES", "Readout", "parse", "storable"]
