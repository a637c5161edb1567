"""What an analysis is asked for: thresholds, outputs and the options of ``sweep analyze``.

Pure Python (no numpy, xarray or dask), so the CLI can build these at its edge cheaply.

A *threshold* is a condition on one species' count, written ``"protein>=500"`` (switching on)
or ``"A<=0"`` (extinction); the operators are ``>=``, ``>``, ``<=`` and ``<``. Each one gives
the fraction of replicates meeting it at every time and the time it is first met.

An *output* is one number per point that sensitivity analysis and the replicate-adequacy
report use: a statistic of one species (or of one threshold) at one sample time, e.g. the
protein Fano factor at t = 600.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

from sweep.errors import SpecError

OPERATORS = (">=", "<=", ">", "<")
from sweep.analysis import statistics as _table

#: statistics of a species' count at a time, computed at every (point, time, species)
SPECIES_STATISTICS = _table.names("species")
#: statistics of a threshold: fraction meeting it at a time, mean first-passage time, fraction never
THRESHOLD_STATISTICS = _table.names("threshold")
STATISTICS = SPECIES_STATISTICS + THRESHOLD_STATISTICS
NAMES = {s.name: s.label for s in _table.TABLE if s.kind != "column"}
_THRESHOLD = re.compile(r"^\s*([A-Za-z_][A-Za-z0-9_]*)\s*(>=|<=|>|<)\s*([-+0-9.eE]+)\s*$")


@dataclass(frozen=True)
class Threshold:
    """A condition ``count <op> value`` on one species."""

    species: str
    op: str
    value: float

    @property
    def label(self) -> str:
        return f"{self.species}{self.op}{self.value:g}"


def parse_threshold(text: str, source: str = "sweep analyze", field: str = "--threshold") -> Threshold:
    """``"protein>=500"`` -> Threshold("protein", ">=", 500.0).

    Raises
    ------
    SpecError
        Not of the form SPECIES OP NUMBER.

    Example
    -------
    >>> parse_threshold("A<=0").label
    'A<=0'
    """
    match = _THRESHOLD.match(text)
    if match is None:
        raise SpecError(source, field, "not a threshold", text,
                        'write SPECIES OP COUNT, e.g. "protein>=500" or "A<=0" (OP one of >=, >, <=, <)')
    try:
        value = float(match.group(3))
    except ValueError as exc:
        raise SpecError(source, field, "the count is not a number", text) from exc
    return Threshold(match.group(1), match.group(2), value)


@dataclass(frozen=True)
class Output:
    """One number per point: ``statistic`` of ``species`` (or of ``threshold``) at ``time``.

    ``time`` is None for the first-passage statistics, which cover the whole time grid.
    """

    statistic: str
    species: str
    time: float | None
    threshold: str | None = None
    time_unit: str | None = None  # the store's (attrs["time_unit"]); None: the store names none

    @property
    def label(self) -> str:
        subject = self.threshold if self.threshold is not None else self.species
        at = f" at t={self.time:g}{self._unit}" if self.time is not None else ""
        return f"{self.statistic}({subject}){at}"

    @property
    def description(self) -> str:
        """Readable, for axis labels and titles: 'Fano factor of protein at t = 600 min'."""
        subject = f"{self.threshold}" if self.threshold is not None else f"of {self.species}"
        at = f" at t = {self.time:g}{self._unit}" if self.time is not None else ""
        return f"{NAMES[self.statistic]} {subject}{at}"

    @property
    def _unit(self) -> str:
        return f" {self.time_unit}" if self.time_unit else ""


@dataclass(frozen=True)
class AnalysisOptions:
    """Everything ``sweep.analyze`` computes, resolved once at the CLI edge.

    Parameters
    ----------
    quantiles : quantile levels of each species' count at each point and time.
    thresholds : conditions for the fraction meeting them and first-passage times.
    histogram_species : species whose distributions are tabulated (default: none), at ``times``.
    stationary_from : pool all samples at times >= this into a stationary histogram (None: no).
    bins : at most this many bins per histogram (whole-number widths; counts are integers).
    statistics : statistics whose sensitivity and standard error are reported.
    species : species of those statistics (default: every species).
    times : sample times of those statistics, of the histograms and of the bimodality check: each
        a time (the nearest sample is taken) or an inclusive ``(start, end)`` range of samples
        (default: the last sample).
    precision : target standard error, relative to the value unless ``relative`` is false.
    tables : folder for the CSV tables (default: beside the store, named after it: the tables of
        ``results/reporter.zarr`` go to ``results/reporter_analysis/``).
    seed : seed of the bootstrap confidence intervals (Sobol, Morris).
    """

    quantiles: tuple[float, ...] = (0.05, 0.25, 0.5, 0.75, 0.95)
    thresholds: tuple[Threshold, ...] = ()
    histogram_species: tuple[str, ...] = ()
    stationary_from: float | None = None
    bins: int = 50
    statistics: tuple[str, ...] = ("mean", "fano")
    species: tuple[str, ...] = ()
    times: tuple[float | tuple[float, float], ...] = ()
    precision: float = 0.05
    relative: bool = True
    tables: str | None = None
    seed: int = 0

    def check(self, source: str = "sweep analyze") -> None:
        """Validate what can be checked without the store.

        Raises
        ------
        SpecError
            A quantile outside [0, 1], an unknown statistic, a non-positive precision or bins.
        """
        for q in self.quantiles:
            if not 0.0 <= q <= 1.0:
                raise SpecError(source, "--quantile", "must be between 0 and 1", q)
        for s in self.statistics:
            if s not in STATISTICS:
                raise SpecError(source, "--statistic", "unknown statistic", s, f"choose from: {', '.join(STATISTICS)}")
            if s in THRESHOLD_STATISTICS and not self.thresholds:
                raise SpecError(source, "--statistic", f"{s} needs a threshold", s,
                                'add e.g. --threshold "protein>=500"')
        if not self.precision > 0:
            raise SpecError(source, "--precision", "must be > 0", self.precision)
        if self.bins < 1:
            raise SpecError(source, "--bins", "must be at least 1", self.bins)
