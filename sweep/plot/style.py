"""What every figure shares: slide-sized style, labels, and reading small slices of a store."""

from __future__ import annotations

import contextlib
from typing import Iterator, Sequence

import numpy as np
import xarray as xr

from sweep.errors import SpecError

SIZE = (8.0, 5.0)
#: readable on a slide: nothing below 12 pt
RC = {
    "font.size": 13, "axes.titlesize": 14, "axes.labelsize": 14, "xtick.labelsize": 12, "ytick.labelsize": 12,
    "legend.fontsize": 12, "figure.titlesize": 15, "axes.spines.top": False, "axes.spines.right": False,
    "svg.hashsalt": "stochsweep",
}
MAX_DEFAULT_POINTS = 4


@contextlib.contextmanager
def styled() -> Iterator[None]:
    import matplotlib

    with matplotlib.rc_context(RC):
        yield


def figure():
    """A new 8 x 5 inch Figure with one Axes (no pyplot, no GUI backend)."""
    from matplotlib.figure import Figure

    fig = Figure(figsize=SIZE, layout="constrained")
    return fig, fig.add_subplot()


def time_label(unit: str | None) -> str:
    return f"time ({unit})" if unit else "time"


def count_label(species: str) -> str:
    return f"{species} (molecules)"


def point_label(ds: xr.Dataset, point: int) -> str:
    """'point 3: k_tx=0.5, k_off=0.1'."""
    names = [str(p) for p in ds["param"].values]
    values = ds["params"].values[point]
    text = ", ".join(f"{n}={v:g}" for n, v in zip(names, values))
    return f"point {point}: {text}" if text else f"point {point}"


def choose_points(ds: xr.Dataset, points: Sequence[int] | None, src: str = "sweep plot") -> list[int]:
    """The given points (checked), or up to four spread evenly over the design."""
    n = ds.sizes["point"]
    if points:
        for p in points:
            if not 0 <= p < n:
                raise SpecError(src, "--point", f"must be within 0..{n - 1}", p)
        return list(dict.fromkeys(int(p) for p in points))
    return sorted({int(round(v)) for v in np.linspace(0, n - 1, min(MAX_DEFAULT_POINTS, n))})


def finished(ds: xr.Dataset, point: int, species: str, time_index: int | slice = slice(None)) -> np.ndarray:
    """Counts of one point's finished replicates, (replicates, times) or (replicates,); eager, small."""
    status = ds["status"].values[point]
    counts = ds["counts"].isel(point=point, time=time_index).sel(species=species).values
    return counts[status == 0].astype(np.float64)


def species_of(ds: xr.Dataset, species: str | None, src: str = "sweep plot") -> str:
    """``species`` checked against the store; the last species if None (often the reporter)."""
    names = [str(s) for s in ds["species"].values]
    if species is None:
        return names[-1]
    if species not in names:
        raise SpecError(src, "--species", "not a species of this store", species, f"choose from: {', '.join(names)}")
    return species


def with_style(function):
    """Build the figure inside ``styled()``, so every text gets the slide-sized fonts."""
    import functools

    @functools.wraps(function)
    def wrapper(*args, **kwargs):
        with styled():
            return function(*args, **kwargs)

    return wrapper
