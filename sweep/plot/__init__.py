"""Figures of a sweep (matplotlib, Agg; PNG, SVG or PDF by the file's suffix).

Every function takes the store's path, returns a ``matplotlib.figure.Figure`` (8 x 5 inches,
text at 12 pt or more, so it reads on a slide) and leaves saving to ``save``::

    from sweep import plot
    fig = plot.ensemble("results/reporter.zarr", "protein", points=[0, 15], time_unit="min")
    plot.save(fig, "protein.png")

==================  ==================================================================
``ensemble``        mean and a quantile band over time, with a few sample trajectories
``distribution``    histogram of a species' count at one time, the mean marked
``convergence``     a statistic against the number of replicates, with its standard error
``sensitivity``     PRCC / Sobol / Morris indices with confidence intervals (needs ``sweep analyze``)
``heatmap``         a statistic over two parameters of a grid design
==================  ==================================================================

Figures are built with ``matplotlib.figure.Figure`` directly (no pyplot), so no GUI backend and
no global figure state are involved.
"""

from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING

from sweep.errors import SpecError, StoreError
from sweep.plot.summary import heatmap, sensitivity
from sweep.plot.trajectories import convergence, distribution, ensemble

if TYPE_CHECKING:
    from matplotlib.figure import Figure

FORMATS = (".png", ".svg", ".pdf")
DPI = 150


def save(fig: Figure, path: str | Path) -> Path:
    """Write ``fig`` to ``path`` (PNG at 150 dpi, or SVG / PDF by the suffix).

    Raises
    ------
    SpecError
        Unsupported suffix.
    StoreError
        The file cannot be written.
    """
    from sweep.plot.style import styled

    path = Path(path)
    if path.suffix.lower() not in FORMATS:
        raise SpecError("sweep plot", "--output", "unsupported image format", str(path),
                        f"end the file name in one of {', '.join(FORMATS)}")
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        with styled():
            fig.savefig(path, dpi=DPI, metadata=_metadata(path))
    except OSError as exc:
        raise StoreError(f"{path}: cannot write: {exc.strerror or exc}") from exc
    return path


def _metadata(path: Path) -> dict:
    # an SVG carries its creation date unless told not to; keep files byte-stable
    return {"Date": None} if path.suffix.lower() == ".svg" else {}


__all__ = ["FORMATS", "convergence", "distribution", "ensemble", "heatmap", "save", "sensitivity"]
