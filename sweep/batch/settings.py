"""Settings of a batch cluster for ``sweep run --cluster slurm``: load, validate, resolve once.

Three layers, later ones winning key by key: a site profile (the ``[cluster]`` table of a
TOML file passed with ``--profile``), the spec's own ``[cluster]`` table, and command-line
flags. ``resolve`` merges them into one frozen ``ClusterConfig`` at the CLI edge; nothing
after it reads a file or the environment. Every error names the file (or flag), the dotted
field, the bad value and the fix, as a ``SpecError`` (exit code 2).

A profile (``configs/slurm_site_example.toml`` is an example)::

    [cluster]
    partition = "short"
    account = "lab-budget"
    walltime = "01:00:00"          # per job, HH:MM:SS or D-HH:MM:SS
    cores = 4                      # per job
    memory = "8GB"                 # per job
    processes = 4                  # Dask worker processes per job (default: one per core)
    job_extra = ["--qos=normal"]   # extra #SBATCH options
    setup = ["module load python/3.11"]   # shell lines run before the worker starts
    interface = "ib0"              # network interface of scheduler and workers
    min_jobs = 0                   # adaptive scaling between these
    max_jobs = 20
    tls = true                     # scheduler and workers talk over TLS (the default)
    lifetime_margin = 300          # seconds before the walltime a worker retires

Walltime and worker lifetime: a worker retires gracefully ``lifetime_margin`` seconds (give
or take a third of it, so that workers do not all leave at once) before its job's walltime;
its tasks go to other workers, and a new job is submitted in its place while work remains.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any, Mapping

from sweep.spec import inputs, limits
from sweep.errors import SpecError
from sweep.batch.walltime import parse_duration

TABLE = "cluster"
# default margin: 10 % of the walltime, at least a minute, at most 15 minutes, at most half the walltime
MARGIN_SHARE, MARGIN_MIN, MARGIN_MAX = 0.10, 60.0, 900.0
MIN_WALLTIME = 60.0  # Slurm counts walltime in minutes; a worker needs some of it to work
MIN_LIFETIME = 10.0

# key -> kind; the kinds are checked by ``_check``. One spelling per key, shared with `sweep submit`.
KEYS: dict[str, str] = {
    "partition": "word",
    "account": "word",
    "walltime": "walltime",
    "cores": "positive",
    "memory": "memory",
    "processes": "positive",
    "job_extra": "directives",
    "setup": "lines",
    "interface": "word",
    "log_dir": "path",
    "local_dir": "path",
    "python": "path",
    "job_name": "word",
    "min_jobs": "count",
    "max_jobs": "positive",
    "tls": "bool",
    "lifetime_margin": "seconds",
    "poll_seconds": "seconds",
}
_EXAMPLES = {
    "partition": '"short"', "account": '"lab-budget"', "walltime": '"01:00:00"', "cores": "4", "memory": '"8GB"',
    "processes": "4", "job_extra": '["--qos=normal"]', "setup": '["module load python/3.11"]', "interface": '"ib0"',
    "log_dir": '"results/logs"', "local_dir": '"/tmp"', "python": '"/opt/venvs/sweep/bin/python"',
    "job_name": '"sweep-worker"', "min_jobs": "0", "max_jobs": "20", "tls": "true", "lifetime_margin": "300",
    "poll_seconds": "30",
}


@dataclass(frozen=True)
class ClusterConfig:
    """Resolved settings of the Slurm jobs that run Dask workers (see the module docstring).

    ``origin`` maps each key that was set to where it came from (``"site.toml: cluster.partition"``
    or ``"--partition"``), so later errors (a partition sbatch refuses) can point at it.
    """

    partition: str | None = None
    account: str | None = None
    walltime: str = "01:00:00"
    cores: int = 1
    memory: str = "2GB"
    processes: int | None = None  # None: one single-threaded worker per core
    job_extra: tuple[str, ...] = ()
    setup: tuple[str, ...] = ()
    interface: str | None = None
    log_dir: str | None = None  # None: "<store>.logs" beside the store
    local_dir: str | None = None
    python: str | None = None  # None: the Python running `sweep run`
    job_name: str = "sweep-worker"
    min_jobs: int = 0
    max_jobs: int = 10
    tls: bool = True
    lifetime_margin: float | None = None  # None: see ``margin_seconds``
    poll_seconds: float = 30.0
    origin: tuple[tuple[str, str], ...] = field(default=(), compare=False)

    @property
    def walltime_seconds(self) -> float:
        return parse_duration(self.walltime)

    @property
    def workers_per_job(self) -> int:
        return self.processes or self.cores

    @property
    def margin_seconds(self) -> float:
        """Seconds before the walltime a worker retires (given, or 10 % clamped to [1 min, 15 min], <= half)."""
        if self.lifetime_margin is not None:
            return float(self.lifetime_margin)
        wall = self.walltime_seconds
        return min(max(MARGIN_SHARE * wall, MARGIN_MIN), MARGIN_MAX, wall / 2)

    @property
    def lifetime_seconds(self) -> float:
        return self.walltime_seconds - self.margin_seconds

    @property
    def stagger_seconds(self) -> float:
        """Workers retire at lifetime ± this, uniformly; a third of the margin keeps them inside the walltime."""
        return self.margin_seconds / 3

    def worker_args(self) -> list[str]:
        """dask-worker options that retire a worker before Slurm's walltime kill.

        ``--lifetime-restart`` is deliberately absent: it would restart the worker inside the
        same job, which Slurm then kills at the walltime; the job must end so that a fresh one
        (with a full walltime) takes its place.
        """
        return ["--lifetime", f"{math.floor(self.lifetime_seconds)}s",
                "--lifetime-stagger", f"{math.floor(self.stagger_seconds)}s"]

    def where(self, key: str) -> str:
        """Where ``key`` was set, for messages ("the default" when nowhere)."""
        return dict(self.origin).get(key, "the default")


def parse(table: Any, source: str, prefix: str = TABLE) -> dict[str, Any]:
    """Validate one layer (a ``[cluster]`` table, or flags) and return its values, checked.

    Parameters
    ----------
    table : mapping
        Key -> value as read from TOML (or from flags, with ``prefix="--"``).
    source : str
        The file (or "command line") named in errors.
    prefix : str
        Field prefix in errors: ``"cluster"`` gives ``cluster.walltime``; ``"--"`` gives ``--walltime``.

    Raises
    ------
    SpecError
        An unknown key, or a value of the wrong type or form (named with an example).

    Example
    -------
    >>> parse({"walltime": "00:30:00", "max_jobs": 4}, "site.toml")
    {'walltime': '00:30:00', 'max_jobs': 4}
    """
    if not isinstance(table, Mapping):
        raise SpecError(source, prefix, "must be a table", table, f"write it as [{TABLE}]")
    out = {}
    for key, value in table.items():
        name = _field(prefix, key)
        if key not in KEYS:
            raise SpecError(source, name, "unknown key", fix=f"expected one of: {', '.join(KEYS)}")
        out[key] = _check(KEYS[key], value, source, name, key)
    return out


def read_profile(path: str | Path) -> dict[str, Any]:
    """Read and validate a site profile file: its ``[cluster]`` table (the only table it may hold).

    Raises
    ------
    SpecError
        Missing or unreadable file, TOML syntax error, no ``[cluster]`` table, or a bad key.
    """
    src = str(path)
    if not Path(path).exists():
        raise SpecError(src, "", "profile file not found", fix="check the --profile path")
    doc = inputs.parse_toml(inputs.read_text(Path(path), src, "", limits.MAX_TOML_BYTES), src)
    for key in doc:
        if key != TABLE:
            raise SpecError(src, key, "unknown table in a site profile", fix=f"put the settings under [{TABLE}]")
    if TABLE not in doc:
        raise SpecError(src, TABLE, "missing table", fix=f"add a [{TABLE}] table, e.g. walltime = \"01:00:00\"")
    return parse(doc[TABLE], src)


def resolve(profile: str | Path | None = None, spec_table: Mapping[str, Any] | None = None, spec_source: str = "spec",
            flags: Mapping[str, Any] | None = None) -> ClusterConfig:
    """Merge profile < spec ``[cluster]`` < flags into one checked ``ClusterConfig``.

    Parameters
    ----------
    profile : path, optional
        A site profile file (``--profile``).
    spec_table : mapping, optional
        The spec's ``[cluster]`` table (``Spec.cluster``), already parsed by ``sweep.spec``.
    spec_source : str
        The spec's path, for messages.
    flags : mapping, optional
        Flag values by key; None values are ignored (the flag was not given).

    Raises
    ------
    SpecError
        A bad value in any layer, or settings that contradict each other (e.g. ``min_jobs`` >
        ``max_jobs``), naming where the offending value came from.

    Example
    -------
    >>> resolve(None, {"walltime": "00:10:00"}, "s.toml", {"max_jobs": 2}).lifetime_seconds
    540.0
    """
    values: dict[str, Any] = {}
    origin: dict[str, str] = {}
    layers = [(read_profile(profile), str(profile), TABLE)] if profile is not None else []
    layers.append((parse(dict(spec_table or {}), spec_source), spec_source, TABLE))
    given = {k: v for k, v in (flags or {}).items() if v is not None}
    layers.append((parse(given, "command line", "--"), "command line", "--"))
    for layer, source, prefix in layers:
        values.update(layer)
        origin.update((k, _origin(source, prefix, k)) for k in layer)
    config = ClusterConfig(**{k: (tuple(v) if isinstance(v, list) else v) for k, v in values.items()},
                           origin=tuple(origin.items()))
    _check_together(config)
    return config


def _check_together(c: ClusterConfig) -> None:
    def fail(key: str, problem: str, value: Any, fix: str) -> None:
        source, _, name = c.where(key).rpartition(": ")
        raise SpecError(source or "command line", name or _field("--", key), problem, value, fix)

    wall = c.walltime_seconds
    if wall < MIN_WALLTIME:
        fail("walltime", "a worker job needs at least a minute", c.walltime, 'e.g. "00:30:00"')
    if c.processes is not None and (c.processes > c.cores or c.cores % c.processes):
        fail("processes", f"must divide cores = {c.cores} (each worker process gets cores / processes threads)",
             c.processes, f"e.g. processes = {c.cores}: one single-threaded worker per core")
    if c.min_jobs > c.max_jobs:
        fail("min_jobs", f"must not exceed max_jobs = {c.max_jobs}", c.min_jobs, "lower min_jobs or raise max_jobs")
    if c.lifetime_margin is not None and not MIN_LIFETIME <= c.lifetime_margin <= wall - MIN_LIFETIME:
        fail("lifetime_margin", f"must leave a worker at least {MIN_LIFETIME:g} s of its {wall:g} s walltime "
             f"and be at least {MIN_LIFETIME:g} s", c.lifetime_margin,
             f"e.g. lifetime_margin = {max(MIN_LIFETIME, min(MARGIN_MAX, wall / 10)):g}")


def _check(kind: str, value: Any, source: str, name: str, key: str) -> Any:
    example = f"e.g. {_flag_or_key(name, key)} {_EXAMPLES[key]}"
    if kind == "bool":
        if not isinstance(value, bool):
            raise SpecError(source, name, "must be true or false", value)
        return value
    if kind in ("positive", "count"):
        low = 1 if kind == "positive" else 0
        if isinstance(value, bool) or not isinstance(value, int) or value < low:
            raise SpecError(source, name, f"must be a whole number >= {low}", value, example)
        return value
    if kind == "seconds":
        if isinstance(value, bool) or not isinstance(value, (int, float)) or not value > 0 or not math.isfinite(value):
            raise SpecError(source, name, "must be a number of seconds > 0", value, example)
        return float(value)
    if kind in ("lines", "directives"):
        # a list from TOML, or the tuple a layer was already checked into (``Spec.cluster``)
        if not isinstance(value, (list, tuple)) or not all(isinstance(v, str) and v.strip() for v in value):
            raise SpecError(source, name, "must be a list of non-empty strings", value, example)
        for line in value:
            if "\n" in line or "\r" in line:
                raise SpecError(source, name, "one line per list item (no line breaks inside an item)", line, example)
            if kind == "directives" and not line.startswith("-"):
                raise SpecError(source, name, "each item is an sbatch option starting with '-'", line, example)
        return tuple(value)
    if not isinstance(value, str) or not value.strip():
        raise SpecError(source, name, "must be a non-empty string", value, example)
    if "\n" in value or "\r" in value:
        raise SpecError(source, name, "must be on one line", value, example)
    if kind == "word" and any(ch.isspace() for ch in value):
        raise SpecError(source, name, "must not contain spaces", value, example)
    if kind == "walltime":
        try:
            seconds = parse_duration(value)
        except ValueError:
            seconds = -1.0
        if ":" not in value or seconds <= 0:
            raise SpecError(source, name, "is not a walltime", value, 'give HH:MM:SS or D-HH:MM:SS, e.g. "01:00:00"')
    if kind == "memory":
        from dask.utils import parse_bytes  # the same parser dask-jobqueue applies to it

        try:
            size = parse_bytes(value)
        except (ValueError, TypeError):
            size = 0
        if size < 2**20:
            raise SpecError(source, name, "is not an amount of memory", value, 'e.g. "4GB" or "512MB"')
    return value


def _field(prefix: str, key: str) -> str:
    return f"--{key.replace('_', '-')}" if prefix == "--" else f"{prefix}.{key}"


def _flag_or_key(name: str, key: str) -> str:
    return name if name.startswith("--") else f"{key} ="


def _origin(source: str, prefix: str, key: str) -> str:
    return _field(prefix, key) if prefix == "--" else f"{source}: {_field(prefix, key)}"


def for_store(config: ClusterConfig, store: Path) -> ClusterConfig:
    """Fill what depends on the store: the log folder defaults to ``<store>.logs`` beside it.

    The store must be on a file system the compute nodes share (workers write into it), so a
    folder beside it is shared too: job logs and the TLS certificate files go there.
    """
    if config.log_dir is not None:
        return config
    return replace(config, log_dir=str(store.parent / f"{store.name}.logs"))
