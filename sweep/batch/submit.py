"""Batch scripts for Slurm: a job array of shards (plus its finishing job), or one allocation.

The templates in ``slurm_templates/`` are plain text with named placeholders ``{{name}}`` and
no logic; ``render`` is the one function that fills them. Everything a template needs is
decided here first: the site profile (``[cluster]`` table of a TOML file, then flags), the
shard count and the array indices (from the plan: the tasks still pending), paths made
absolute and shell-quoted.

Array sizing: with P pending tasks, a cap C on the array size (Slurm's ``MaxArraySize`` is
1001 by default, so indices up to 1000) and K tasks per element (given, or chosen for about
ten minutes of work, at most half the walltime, from a short calibration run), the array
has N = ceil(P / K) elements, and K grows to ceil(P / C) when N would pass C. Element k runs
shard k + 1 of N (``sweep.shard``: every N-th task of the whole sweep). A resubmission keeps
N and lists only the shards that still have pending tasks.
"""

from __future__ import annotations

import math
import re
import shlex
import subprocess
import sys
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from sweep.batch import settings as clusters
from sweep.batch.settings import ClusterConfig
from sweep.errors import SweepError

TEMPLATES = ("array", "finish", "allocation")
PLACEHOLDER = re.compile(r"\{\{\s*([A-Za-z_][A-Za-z0-9_]*)\s*\}\}")
DEFAULT_MAX_ARRAY = 1001
DEFAULT_RESUBMITS = 3
FINISH_WALLTIME = "00:10:00"
# an element's work: about ten minutes (shorter jobs spend much of their time starting, and
# load the scheduler: common practice), at most this share of its walltime so most finish in one go
ELEMENT_SECONDS = 600.0
ELEMENT_SHARE = 0.5


class SubmitError(SweepError):
    """A template cannot be rendered, or sbatch refused a script."""


def render(template: str, values: dict[str, object], name: str = "template") -> str:
    """Fill every ``{{name}}`` of ``template`` with ``str(values[name])``.

    Raises
    ------
    SubmitError
        If the template names a placeholder ``values`` lacks (all missing ones are listed).

    Example
    -------
    >>> render("#SBATCH --time={{walltime}}", {"walltime": "01:00:00"})
    '#SBATCH --time=01:00:00'
    """
    missing = sorted({m for m in PLACEHOLDER.findall(template) if m not in values})
    if missing:
        raise SubmitError(f"{name}: no value for placeholder(s) {', '.join(missing)}; "
                          f"known: {', '.join(sorted(values)) or '(none)'}")
    return PLACEHOLDER.sub(lambda m: str(values[m[1]]), template)


def memory_mib(text: str) -> int:
    """``"4GB"`` -> 3814: MiB, as Slurm's ``--mem=...M`` wants; units as Dask reads them (GB = 10^9 B).

    The value was checked by ``sweep.batch.settings`` already.
    """
    from dask.utils import parse_bytes

    return max(1, int(parse_bytes(text) // 2**20))


def profile_toml(config: ClusterConfig) -> str:
    """The settings given (profile, spec and flags merged) as a ``[cluster]`` table, for the finishing job."""
    lines = ["# written by `sweep submit`: the resolved settings of this submission", "[cluster]"]
    for key in clusters.KEYS:
        if config.where(key) == "the default":
            continue
        value = getattr(config, key)
        if isinstance(value, tuple):
            lines.append(f"{key} = [{', '.join(_toml_string(v) for v in value)}]")
        elif isinstance(value, bool):
            lines.append(f"{key} = {'true' if value else 'false'}")
        elif isinstance(value, (int, float)):
            lines.append(f"{key} = {value!r}")
        else:
            lines.append(f"{key} = {_toml_string(str(value))}")
    return "\n".join(lines) + "\n"


def _toml_string(text: str) -> str:
    escaped = text.replace("\\", "\\\\").replace('"', '\\"')
    return f'"{escaped}"'


@dataclass(frozen=True)
class Layout:
    """How pending tasks are spread over a job array."""

    shards: int  # N: the shard count (every shard of a store uses it)
    tasks_per_element: int
    pending_shards: tuple[int, ...]  # 1-based shards with tasks pending (the array's elements + offset)

    @property
    def array(self) -> str:
        """Slurm's ``--array`` value: the 0-based element indices, as ranges."""
        return index_ranges([s - 1 for s in self.pending_shards])


def choose_layout(pending: int, *, max_array: int = DEFAULT_MAX_ARRAY, tasks_per_element: int | None = None,
                  task_seconds: float | None = None, walltime_seconds: float | None = None) -> tuple[int, int]:
    """Shard count N and tasks per element K for ``pending`` tasks, with N <= ``max_array``.

    K is ``tasks_per_element`` if given; otherwise enough tasks of ``task_seconds`` for
    ``ELEMENT_SECONDS`` of work, but no more than ``ELEMENT_SHARE`` of the walltime (1 when
    either is unknown). K grows to ceil(pending / max_array) if needed; N = ceil(pending / K),
    and K is then evened out to ceil(pending / N).

    Example
    -------
    >>> choose_layout(5000, max_array=1001, tasks_per_element=1)
    (1000, 5)
    """
    if pending <= 0:
        return 0, 0
    if tasks_per_element:
        k = tasks_per_element
    elif task_seconds and walltime_seconds:
        k = max(1, int(min(ELEMENT_SECONDS, ELEMENT_SHARE * walltime_seconds) / task_seconds))
    else:
        k = 1
    k = max(k, math.ceil(pending / max_array))
    n = math.ceil(pending / k)
    return n, math.ceil(pending / n)


def pending_shards(done: np.ndarray, shards: int) -> tuple[int, ...]:
    """1-based shards of ``shards`` owning at least one task not done (task index modulo N)."""
    missing = np.flatnonzero(~done.reshape(-1))
    return tuple(int(s) + 1 for s in np.unique(missing % shards)) if shards else ()


def index_ranges(indices: list[int]) -> str:
    """[0, 1, 2, 5, 7, 8] -> "0-2,5,7-8" (Slurm's array syntax)."""
    out, run = [], []
    for i in sorted(set(indices)):
        if run and i == run[-1] + 1:
            run.append(i)
            continue
        if run:
            out.append(_span(run))
        run = [i]
    if run:
        out.append(_span(run))
    return ",".join(out)


def _span(run: list[int]) -> str:
    return str(run[0]) if len(run) == 1 else f"{run[0]}-{run[-1]}"


@dataclass(frozen=True)
class Job:
    """Where the scripts go and what they run."""

    spec: Path
    store: Path
    out: Path
    profile_file: Path
    job_name: str
    workdir: Path
    python: str = field(default_factory=lambda: sys.executable)


def common_values(job: Job, profile: ClusterConfig) -> dict[str, object]:
    """Placeholders every template shares (paths absolute and shell-quoted)."""
    q = shlex.quote
    directives = []
    if profile.partition:
        directives.append(f"#SBATCH --partition={profile.partition}")
    if profile.account:
        directives.append(f"#SBATCH --account={profile.account}")
    directives += [f"#SBATCH {extra}" for extra in profile.job_extra]
    return {
        "job_name": job.job_name, "walltime": profile.walltime, "memory": f"{memory_mib(profile.memory)}M",
        "directives": "\n".join(directives), "setup": "\n".join(profile.setup), "workdir": q(str(job.workdir)),
        "python": q(profile.python or job.python), "spec": q(str(job.spec)), "store": q(str(job.store)),
        "out": q(str(job.out)), "log_dir": str(log_folder(job, profile)), "profile": q(str(job.profile_file)),
    }


def log_folder(job: Job, profile: ClusterConfig) -> Path:
    """The jobs' output folder: the profile's ``log_dir`` (relative to the working directory), or ``<out>/logs``."""
    return (job.workdir / profile.log_dir).resolve() if profile.log_dir else job.out / "logs"


def array_values(job: Job, profile: ClusterConfig, layout: Layout) -> dict[str, object]:
    return {**common_values(job, profile), "array": layout.array, "offset": 1, "shards": layout.shards}


def finish_values(job: Job, profile: ClusterConfig, layout: Layout, array_job: str,
                  resubmits: int) -> dict[str, object]:
    """``resubmits``: how many more times finishing jobs may resubmit the array."""
    return {**common_values(job, profile), "array_job": array_job, "shards": layout.shards,
            "resubmits": resubmits, "finish_walltime": FINISH_WALLTIME}


def allocation_values(job: Job, profile: ClusterConfig, workers: int) -> dict[str, object]:
    """One single-threaded worker per task; each gets the profile's memory per core."""
    per_worker = max(1, memory_mib(profile.memory) // max(1, profile.cores))
    interface = f"--interface {shlex.quote(profile.interface)}" if profile.interface else ""
    return {**common_values(job, profile), "workers": workers, "memory_per_worker": f"{per_worker}M",
            "interface": interface, "interface_name": profile.interface or "the default interface",
            "local_directory": shlex.quote(profile.local_dir) if profile.local_dir else '"${TMPDIR:-/tmp}"'}


def template_dir() -> Path:
    """``slurm_templates/`` of a source checkout, or the copy installed under ``<prefix>/share``."""
    for candidate in (Path(__file__).resolve().parents[2] / "slurm_templates",
                      Path(sys.prefix) / "share" / "stochsweep" / "slurm_templates"):
        if (candidate / "array.sbatch").is_file():
            return candidate
    raise SubmitError("cannot find the sbatch templates (slurm_templates/); pass --templates DIR")


def read_template(name: str, folder: Path | None = None) -> str:
    path = (folder or template_dir()) / f"{name}.sbatch"
    try:
        return path.read_text(encoding="utf-8")
    except OSError as exc:
        raise SubmitError(f"{path}: cannot read the template: {exc.strerror}") from exc


def write_script(out: Path, stem: str, text: str, resubmission: bool = False) -> Path:
    """Write ``<out>/<stem>.sbatch``, or for a resubmission ``<stem>-<n>.sbatch`` with the first free n
    (so every round's script stays for the record)."""
    out.mkdir(parents=True, exist_ok=True)
    path, n = out / f"{stem}.sbatch", 1
    while resubmission and path.exists():
        path, n = out / f"{stem}-{n}.sbatch", n + 1
    path.write_text(text, encoding="utf-8")
    return path


def sbatch(script: Path) -> str:
    """Submit ``script`` with ``sbatch --parsable``; returns the job id.

    Raises
    ------
    SubmitError
        If sbatch is missing or refuses the script (its message is included).
    """
    try:
        done = subprocess.run(["sbatch", "--parsable", str(script)], capture_output=True, text=True, timeout=120)
    except FileNotFoundError as exc:
        raise SubmitError("sbatch not found: run `sweep submit` on a Slurm login node (or use --dry-run)") from exc
    except subprocess.TimeoutExpired as exc:
        raise SubmitError(f"{script}: sbatch did not answer within 120 s") from exc
    if done.returncode != 0:
        raise SubmitError(f"{script}: sbatch refused it: {done.stderr.strip() or done.stdout.strip()}")
    return done.stdout.strip().split(";")[0]




@dataclass(frozen=True)
class Submission:
    """What ``submit_array`` / ``submit_allocation`` wrote and submitted."""

    scripts: tuple[tuple[Path, str], ...]  # (path, text) of each rendered script
    job_ids: tuple[str, ...] = ()
    layout: Layout | None = None
    pending: int = 0
    tasks_total: int = 0
    note: str = ""  # "complete" (nothing left), "budget spent", or ""


def default_out(store: Path) -> Path:
    """Where scripts and logs go unless ``--out`` says: beside the store, ``<name>.slurm``."""
    return store.parent / f"{store.stem}.slurm"


def job_name(store: Path) -> str:
    return "sweep-" + re.sub(r"[^A-Za-z0-9_.-]", "_", store.stem)


def pending_record(spec) -> np.ndarray:
    """The store's completion record (shards' records merged), or all False before the store exists.

    Raises
    ------
    StoreError
        The store holds another spec's sweep (the shards would refuse it anyway).
    """
    from sweep import store as store_mod
    from sweep.execute.session import check_same_sweep
    from sweep.execute.tasks import n_blocks

    if store_mod.exists(spec.store):
        check_same_sweep(spec)
        return store_mod.read_done(spec.store)
    return np.zeros((spec.points().shape[0], n_blocks(spec.store_replicates, spec.replicates_per_task)), dtype=bool)


def task_seconds(spec) -> float:
    """Seconds one task takes in one process, from `sweep plan`'s short calibration run."""
    from sweep import plan as plan_mod

    p = plan_mod.plan(spec, workers=1, seconds=1.0)
    return max(p.seconds - plan_mod.STARTUP_SECONDS, p.longest_task_seconds) / max(p.size.tasks, 1)


def submit_array(spec, job: Job, profile: ClusterConfig, *, max_array: int = DEFAULT_MAX_ARRAY,
                 tasks_per_element: int | None = None, shards: int | None = None,
                 resubmits: int = DEFAULT_RESUBMITS, dry_run: bool = False, templates: Path | None = None,
                 resubmission: bool = False) -> Submission:
    """Render (and unless ``dry_run``, submit) the job array for the pending shards and its finishing job.

    Parameters
    ----------
    spec : Spec
        The loaded spec (``spec.store`` is the store).
    job : Job
        Paths, job name and interpreter for the scripts.
    profile : ClusterConfig
        Site settings (walltime, memory, partition, ...), resolved by ``sweep.batch.settings.resolve``.
    max_array, tasks_per_element : int
        The array-size cap and, optionally, the tasks each element should run.
    shards : int, optional
        Keep this shard count (a resubmission); default: chosen from the pending tasks.
    resubmits : int
        How many times the finishing jobs may resubmit what is still missing.
    dry_run : bool
        Write the scripts but do not submit them.
    resubmission : bool
        A finishing job's round: number the scripts instead of replacing the first round's.

    Returns
    -------
    Submission
        ``note="complete"`` and no scripts when nothing is pending.

    Raises
    ------
    SpecError
        An adaptive spec (shards run a fixed task list).
    """
    from sweep.execute.session import refuse_adaptive

    refuse_adaptive(spec)
    done = pending_record(spec)
    pending = int((~done).sum())
    if pending == 0:
        return Submission((), note="complete", tasks_total=done.size)
    if shards is None:
        seconds = None
        if not tasks_per_element:
            seconds = task_seconds(spec)
        n, k = choose_layout(pending, max_array=max_array, tasks_per_element=tasks_per_element,
                             task_seconds=seconds, walltime_seconds=profile.walltime_seconds)
    else:
        n, k = shards, math.ceil(done.size / shards)
    layout = Layout(n, k, pending_shards(done, n))
    if len(layout.pending_shards) > max_array:
        raise SubmitError(f"{spec.store}: {len(layout.pending_shards)} shards have tasks left, more than the "
                          f"array cap {max_array}; raise --max-array or lower the shard count")
    job.out.mkdir(parents=True, exist_ok=True)
    job.profile_file.write_text(profile_toml(profile), encoding="utf-8")
    log_folder(job, profile).mkdir(parents=True, exist_ok=True)
    array_text = render(read_template("array", templates), array_values(job, profile, layout), "array.sbatch")
    array_path = write_script(job.out, "array", array_text, resubmission)
    array_id = "<array job id>" if dry_run else sbatch(array_path)
    finish_text = render(read_template("finish", templates),
                         finish_values(job, profile, layout, array_id, resubmits), "finish.sbatch")
    finish_path = write_script(job.out, "finish", finish_text, resubmission)
    ids = () if dry_run else (array_id, sbatch(finish_path))
    return Submission(((array_path, array_text), (finish_path, finish_text)), ids, layout, pending, done.size)


def finish_array(spec, job: Job, profile: ClusterConfig, *, shards: int, resubmits: int,
                 max_array: int = DEFAULT_MAX_ARRAY, templates: Path | None = None) -> Submission:
    """The finishing job's step: fold the shards' records, then resubmit what is missing while allowed.

    Returns
    -------
    Submission
        ``note="complete"`` when no task is left, ``"budget spent"`` when tasks are left and
        ``resubmits`` is 0, else the new array and finishing job.
    """
    from sweep.store import claims
    from sweep import store as store_mod

    if store_mod.exists(spec.store):
        try:
            with claims.holding_lock(spec.store, wait=60.0):
                claims.fold(spec.store)
        except SweepError:
            pass  # a whole run holds the store, or it cannot be checked: the records stay valid
    done = pending_record(spec)
    pending = int((~done).sum())
    if pending == 0:
        return Submission((), note="complete", tasks_total=done.size)
    if resubmits <= 0:
        return Submission((), pending=pending, tasks_total=done.size, note="budget spent")
    return submit_array(spec, job, profile, max_array=max_array, shards=shards, resubmits=resubmits - 1,
                        templates=templates, resubmission=True)


def submit_allocation(spec, job: Job, profile: ClusterConfig, *, workers: int, dry_run: bool = False,
                      templates: Path | None = None) -> Submission:
    """Render (and unless ``dry_run``, submit) one allocation running a whole Dask cluster and the sweep."""
    done = pending_record(spec)
    pending = int((~done).sum())
    if pending == 0:
        return Submission((), note="complete", tasks_total=done.size)
    job.out.mkdir(parents=True, exist_ok=True)
    log_folder(job, profile).mkdir(parents=True, exist_ok=True)
    text = render(read_template("allocation", templates), allocation_values(job, profile, workers), "allocation.sbatch")
    path = write_script(job.out, "allocation", text)
    ids = () if dry_run else (sbatch(path),)
    return Submission(((path, text),), ids, None, pending, done.size)
