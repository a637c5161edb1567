"""The largest inputs a spec may ask for, in one place.

``sweep check`` and ``sweep run`` refuse anything beyond these with a ``SpecError`` (exit code 2)
*before* they read past the limit, expand a design, list tasks, allocate arrays or touch a store.
Each limit is either a hard fact (32-bit counts, the operating system's path limits, Python's
parser) or the point where ``check`` itself would take minutes or gigabytes; the numbers below
were measured on a 2-core machine (docs/limits.md). Where a limit can be met by
reshaping the sweep (more replicates per task, fewer samples), the message says how.
"""

from __future__ import annotations

import os
from typing import Callable

from sweep.errors import SpecError

# ---- files -----------------------------------------------------------------------------------
# tomllib reads about 1.6 MB/s: a 16 MiB spec or model takes ~10 s to parse (a 100,000-reaction
# TOML model is ~6 MB). SBML is parsed by libsbml (C++) and design tables by the csv module, both
# far faster, and genome-scale SBML files with annotations reach tens of MB.
MAX_TOML_BYTES = 16 * 2**20
MAX_FILE_BYTES = 64 * 2**20  # SBML models and design tables
# tables and arrays inside one another; real specs use 3 or 4 levels
MAX_TOML_DEPTH = 32
# XML element nesting of an SBML file: libsbml (5.20) crashes the process with a stack overflow
# between 5,000 and 10,000 levels, so documents are measured before libsbml sees them
MAX_XML_DEPTH = 1000

# ---- expressions (propensity laws, [derived], SBML math) --------------------------------------
MAX_EXPRESSION_LENGTH = 1000  # characters
# levels of operators and calls; a sum of n terms is n levels. A law becomes generated Python
# source whose parser accepts at most 200 nested brackets (a 333-level power ran it out of memory)
MAX_EXPRESSION_DEPTH = 100
# operations in one SBML expression after inlining its function definitions: a chain of
# functions that each call the previous twice doubles the size at every step
MAX_EXPRESSION_NODES = 10_000

# ---- models ----------------------------------------------------------------------------------
# `sweep check` prints every species; rich needs ~0.12 ms per species and the import ~0.1 ms per
# reaction, so check takes ~25 s at these limits (measured figures in docs/limits.md)
MAX_SPECIES = 100_000
MAX_REACTIONS = 100_000
# libsbml's consistency check (general and MathML rules) grows with the square of the model:
# 1.1 s at 5,000 reactions, 3.5 s at 10,000, 13 s at 20,000 (so ~5 min at 100,000)
MAX_SBML_SPECIES = 20_000
MAX_SBML_REACTIONS = 20_000
# entries of the dependency graph (reactions to recompute after each reaction fires); the kernels'
# packed program holds 32 bytes per entry, so this bounds it at 320 MB per worker
MAX_DEPENDENCIES = 10_000_000
# the integer-state methods (direct, nrm, tau_leap) store counts as int32
MAX_COUNT = 2**31 - 1
# molecules of one species a reaction consumes or makes: the kernels hold it as int32 and loop
# over it per propensity (C(x, m) is a product of m factors; tau-leaping's g_i a sum of m terms)
MAX_STOICHIOMETRY = 1000
# instants of timed changes per point, repeats expanded ([[change]], sweep.model.schedule): each
# is a kernel segment (a restart of the event loop) and 3 numbers per operation in every task's
# pickled input; building 100,000 instants of one operation takes ~0.3 s per point
MAX_INSTANTS = 100_000

# ---- the sweep's size ------------------------------------------------------------------------
# every point is expanded in memory by check and run; the store's params and done arrays are
# single chunks of (points, ...)
MAX_POINTS = 1_000_000
# run and check hold the task list in memory, ~200 bytes a task: 2,000,000 tasks take ~0.4 GB and
# ~10 s to list (`sweep plan` asks for --yes beyond 1,000,000)
MAX_TASKS = 2_000_000
MAX_SAMPLES = 1_000_000  # sample times per trajectory
# one task's chunk of counts (replicates_per_task x samples x species x bytes per count), held in
# a worker's memory while simulated and again while compressed
MAX_CHUNK_BYTES = 256 * 2**20
# event cap per replicate: over three years at 10^7 events/s, and far from int64 overflow in any
# sum of event counts
MAX_EVENT_CAP = 10**15
# observables of one model: each is a column of the task's observables chunk (float64), which
# ``check_observables`` holds to MAX_CHUNK_BYTES like counts
MAX_OBSERVABLES = 1000
# TOML's own integers are 64-bit (toml.io, "Integer"); tomllib reads larger ones without complaint
INT64_MIN, INT64_MAX = -(2**63), 2**63 - 1


def _pathconf(name: str, default: int) -> int:
    try:
        return int(os.pathconf("/", name))
    except (AttributeError, ValueError, OSError):
        return default


# a file or folder name, and a whole path, in bytes (Linux: 255 and 4096)
NAME_MAX = _pathconf("PC_NAME_MAX", 255)
PATH_MAX = _pathconf("PC_PATH_MAX", 4096)


def check_sweep(points: int, replicates: int, per_task: int, n_times: int, n_species: int,
                itemsize: Callable[[], int], replicates_field: str, src: str) -> None:
    """Refuse a sweep beyond these limits before anything is expanded or allocated.

    Points (``MAX_POINTS``), replicates per task (at most the store's replicates per point), one
    task's chunk of counts (``MAX_CHUNK_BYTES``) and the number of tasks (``MAX_TASKS``), each
    refused with what would fit. ``itemsize`` gives the bytes per count of the method's store; it
    is called only when 8 bytes a count would not fit (it imports the kernel module).

    Raises
    ------
    SpecError
        Naming ``design``, ``run.replicates_per_task``, ``time`` or ``replicates_field``.

    Example
    -------
    >>> check_sweep(10, 1000, 100, 101, 3, lambda: 4, "run.replicates", "spec.toml")
    """
    if points > MAX_POINTS:
        raise SpecError(src, "design", f"{points:,} points, more than the {MAX_POINTS:,} a sweep can hold",
                        fix="use fewer levels, samples or conditions")
    if per_task > replicates:
        raise SpecError(src, "run.replicates_per_task", f"more than the {replicates:,} replicates per point "
                        f"({replicates_field})", per_task, f"use at most {replicates:,}: one task then holds every "
                        "replicate of a point")
    row = n_times * n_species * 8
    tasks = points * -(-replicates // per_task)
    if per_task * row > MAX_CHUNK_BYTES or tasks > MAX_TASKS:
        row = n_times * n_species * itemsize()  # the exact figure, for the check and the message
    per_task_max = MAX_CHUNK_BYTES // row
    if per_task_max == 0:
        raise SpecError(src, "time", f"one trajectory ({n_times:,} samples x {n_species:,} species) takes "
                        f"{row:,} bytes, more than the {mib(MAX_CHUNK_BYTES)} of one task's chunk",
                        fix=f"sample at most {MAX_CHUNK_BYTES // (row // n_times):,} times")
    if per_task > per_task_max:
        raise SpecError(src, "run.replicates_per_task", f"one task's chunk ({per_task:,} replicates x {n_times:,} "
                        f"samples x {n_species:,} species x {row // (n_times * n_species)} bytes) is "
                        f"{per_task * row:,} bytes, more than {mib(MAX_CHUNK_BYTES)}", per_task,
                        f"use at most {per_task_max:,} replicates per task, or fewer samples")
    if tasks <= MAX_TASKS:
        return
    widest = min(per_task_max, replicates)
    most = (MAX_TASKS // points) * widest
    need = -(-replicates // (MAX_TASKS // points))
    wider = f"replicates_per_task >= {need:,} (at most {per_task_max:,} fit in a chunk), or " if need <= widest else ""
    raise SpecError(src, replicates_field, f"{points:,} points x {replicates:,} replicates in tasks of {per_task:,} "
                    f"make {tasks:,} tasks, more than {MAX_TASKS:,}", replicates,
                    f"use {wider}at most {most:,} replicates per point, or fewer points")


def check_observables(per_task: int, n_times: int, n_observables: int, src: str) -> None:
    """Refuse a task's ``observables`` chunk (replicates x samples x observables x 8 bytes) beyond
    ``MAX_CHUNK_BYTES``: the worker holds it beside the counts chunk.

    Raises
    ------
    SpecError
        Naming ``run.replicates_per_task``, with the most that fit.
    """
    row = n_times * n_observables * 8
    if row and per_task * row > MAX_CHUNK_BYTES:
        raise SpecError(src, "run.replicates_per_task", f"one task's observables chunk ({per_task:,} replicates x "
                        f"{n_times:,} samples x {n_observables:,} observables x 8 bytes) is {per_task * row:,} bytes, "
                        f"more than {mib(MAX_CHUNK_BYTES)}", per_task,
                        f"use at most {max(MAX_CHUNK_BYTES // row, 1):,} replicates per task, fewer samples or "
                        "fewer observables")


def mib(n: int) -> str:
    """``16 * 2**20`` -> ``"16 MiB"`` (for messages)."""
    return f"{n / 2**20:g} MiB"


__all__ = [
    "INT64_MAX", "INT64_MIN", "MAX_CHUNK_BYTES", "MAX_COUNT", "MAX_DEPENDENCIES", "MAX_EVENT_CAP",
    "MAX_EXPRESSION_DEPTH", "MAX_EXPRESSION_LENGTH", "MAX_EXPRESSION_NODES", "MAX_FILE_BYTES", "MAX_POINTS",
    "MAX_REACTIONS", "MAX_SAMPLES", "MAX_SBML_REACTIONS", "MAX_SBML_SPECIES", "MAX_SPECIES", "MAX_STOICHIOMETRY", "MAX_TASKS", "MAX_TOML_BYTES", "MAX_TOML_DEPTH",
    "MAX_XML_DEPTH", "NAME_MAX", "PATH_MAX", "check_sweep", "mib",
]
