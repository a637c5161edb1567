"""The one table of statistics: what each is called, what it describes, where it may be chosen.

Everything that lists statistics reads this table: the analysis (``stats``, ``tables``), the
choices of ``sweep analyze --statistic`` and ``sweep plot --statistic``, the adaptive target
(``[run.adaptive] statistic``), the CSV columns and the long names in the store. Adding a
statistic is a row here and its computation (``stats.moments`` or ``stats.fractions``, and its
standard error in ``adequacy`` when ``has_se``).

Kinds: ``species`` statistics are computed at every (point, time, species) and can be chosen
for sensitivity, adequacy, adaptive targets and plots; ``threshold`` statistics belong to a
``--threshold`` condition; ``column`` ones are reported in ``statistics.csv`` only.
"""

from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class Statistic:
    name: str
    label: str  # what a figure or table calls it
    description: str  # the long name kept in the store and the docs
    kind: str  # "species", "threshold" or "column"
    has_se: bool = False  # a delta-method standard error exists (``adequacy.standard_errors``)


TABLE: tuple[Statistic, ...] = (
    Statistic("n", "replicates", "finished replicates used", "column"),
    Statistic("mean", "mean", "mean count", "species", True),
    Statistic("var", "variance", "variance of the count (ddof 1)", "species", True),
    Statistic("sd", "standard deviation", "standard deviation of the count", "species", True),
    Statistic("cv", "coefficient of variation", "coefficient of variation (sd / mean)", "species", True),
    Statistic("fano", "Fano factor", "Fano factor (variance / mean)", "species", True),
    Statistic("min", "smallest count", "smallest count", "column"),
    Statistic("max", "largest count", "largest count", "column"),
    Statistic("fraction", "fraction of replicates meeting", "fraction of finished replicates meeting the threshold",
              "threshold"),
    Statistic("passage_mean", "mean first-passage time", "mean first-passage time over the replicates that passed",
              "threshold"),
    Statistic("never", "fraction never meeting", "fraction of replicates that never met the threshold", "threshold"),
)
BY_NAME = {s.name: s for s in TABLE}


def names(*kinds: str) -> tuple[str, ...]:
    """The statistics of the given kinds, in table order."""
    return tuple(s.name for s in TABLE if s.kind in kinds)


def with_standard_errors() -> tuple[str, ...]:
    return tuple(s.name for s in TABLE if s.has_se)
