"""What every figure shares: slide-sized style, labels, and reading small slices of a store."""

from __future__ import annotations

import contextlib
from typing import Iterator, Sequence

import numpy as np
import xarray as xr

from sweep.errors import SpecError

SIZE = (8.0, 5.0)
#: small multiples of more than six panels get a larger figure, so each panel stays readable
LARGE = (12.0, 7.5)
#: readable on a slide: nothing below 12 pt
RC = {
    "font.size": 13, "axes.titlesize": 14, "axes.labelsize": 14, "xtick.labelsize": 12, "ytick.labelsize": 12,
    "legend.fontsize": 12, "figure.titlesize": 15, "axes.spines.top": False, "axes.spines.right": False,
    "svg.hashsalt": "stochsweep",
}
MAX_DEFAULT_POINTS = 4
#: up to this many points share one axes; more become small multiples, one panel per point
MAX_OVERLAY = 4
MAX_PANELS = 16
#: distinct colours, none repeated within a figure: Okabe & Ito (2008), "Color Universal Design",
#: a palette told apart with the common colour-vision deficiencies (its yellow left out: too pale on white)
PALETTE = ("#0072B2", "#D55E00", "#009E73", "#CC79A7", "#E69F00", "#56B4E9", "#000000")


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


def panels(n: int, sharey: bool = True):
    """A Figure of ``n`` small multiples (at most ``MAX_PANELS``), in a near-square grid; unused cells hidden."""
    from matplotlib.figure import Figure

    cols = int(np.ceil(np.sqrt(n)))
    rows = int(np.ceil(n / cols))
    fig = Figure(figsize=SIZE if n <= 6 else LARGE, layout="constrained")
    grid = fig.subplots(rows, cols, sharex=True, sharey=sharey, squeeze=False)
    axes = list(grid.ravel())
    for ax in axes[n:]:
        ax.set_visible(False)
    return fig, axes[:n], grid


def label_axes(fig, axes, overlaid: bool, xlabel: str, ylabel: str) -> None:
    """Axis labels: on the one axes, or once for the whole grid of small multiples."""
    if overlaid:
        axes[0].set_xlabel(xlabel)
        axes[0].set_ylabel(ylabel)
        return
    fig.supxlabel(xlabel, fontsize=14)
    fig.supylabel(ylabel, fontsize=14)


def colours(n: int) -> list[str]:
    """``n`` distinct colours (``n`` <= len(PALETTE): more series than that become small multiples)."""
    if n > len(PALETTE):
        raise ValueError(f"{n} series in one axes: at most {len(PALETTE)} distinct colours")
    return list(PALETTE[:n])


def legend_outside(fig, ax=None, columns: int = 1) -> None:
    """The legend under the axes, outside the data (constrained layout makes room for it)."""
    source = ax if ax is not None else fig.axes[0]
    handles, labels = source.get_legend_handles_labels()
    if max(map(len, labels), default=0) > 32:
        columns = 1  # two columns of long labels would run off the figure
    if handles:
        fig.legend(handles, labels, loc="outside lower center", ncols=columns, frameon=False)


def title(fig, *lines: str, width: int = 72) -> None:
    """The figure's title, each line wrapped to ``width`` characters so none runs off the figure."""
    import textwrap

    fig.suptitle("\n".join(textwrap.fill(line, width) for line in lines if line), fontsize=14)


def check_points(ds: xr.Dataset, chosen: list[int], src: str = "sweep plot") -> None:
    """Refuse more points than small multiples can show."""
    if len(chosen) > MAX_PANELS:
        raise SpecError(src, "--point", f"{len(chosen)} points: a figure shows at most {MAX_PANELS}",
                        fix=f"name up to {MAX_PANELS} points, e.g. --point 0:{MAX_PANELS - 1}")


def time_unit(ds: xr.Dataset, given: str | None = None) -> str | None:
    """The time unit for labels: ``given`` (Python callers with an old store), else the store's."""
    unit = given or ds.attrs.get("time_unit")
    return str(unit) if unit else None


def time_label(unit: str | None) -> str:
    return f"time ({unit})" if unit else "time"


def at_time(t: float, unit: str | None) -> str:
    """'t = 600 min'."""
    return f"t = {t:g}" + (f" {unit}" if unit else "")


def count_label(species: str) -> str:
    return f"{species} (molecules)"


def point_label(ds: xr.Dataset, point: int) -> str:
    """'point 3: k_tx=0.5, k_off=0.1'."""
    names = [str(p) for p in ds["param"].values]
    values = ds["params"].values[point]
    text = ", ".join(f"{n}={v:g}" for n, v in zip(names, values))
    return f"point {point}: {text}" if text else f"point {point}"


def choose_points(ds: xr.Dataset, points: Sequence | None, src: str = "sweep plot") -> list[int]:
    """The given points and inclusive ``(first, last)`` ranges (checked), or up to four spread evenly."""
    n = ds.sizes["point"]
    if points:
        chosen: list[int] = []
        for p in points:
            first, last = p if isinstance(p, tuple) else (p, p)
            if not 0 <= int(first) <= int(last) < n:
                raise SpecError(src, "--point", f"must be within 0..{n - 1}", p)
            chosen.extend(range(int(first), int(last) + 1))
        chosen = list(dict.fromkeys(chosen))
        check_points(ds, chosen, src)
        return chosen
    return sorted({int(round(v)) for v in np.linspace(0, n - 1, min(MAX_DEFAULT_POINTS, n))})


def finished(ds: xr.Dataset, point: int, species: str, time_index: int | slice = slice(None)) -> np.ndarray:
    """Counts of one point's finished replicates, (replicates, times) or (replicates,); eager, small."""
    status = ds["status"].values[point]
    counts = ds["counts"].isel(point=point, time=time_index).sel(species=species).values
    return counts[status == 0].astype(np.float64)


def species_of(ds: xr.Dataset, species: str | None, src: str = "sweep plot") -> str:
    """``species`` checked against the store; if None, the species the store names as its default
    (``attrs["default_species"]``, for a spec key that names it), else the first species of the
    model: a rule a user can predict (put the species you plot most first, or name it)."""
    names = [str(s) for s in ds["species"].values]
    if species is None:
        named = ds.attrs.get("default_species")
        return str(named) if named in names else names[0]
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
