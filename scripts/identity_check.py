"""Do two checkouts write the same store for the same spec? And does the newer one resume the older's stores?

    python scripts/identity_check.py OLD_CHECKOUT NEW_CHECKOUT [--work DIR] [--json OUT]

Six specs are reduced from the new checkout's ``configs/`` (few points, few replicates, a short
time, so each run takes seconds) and written once into ``--work``: the demo grid, the LHS, the
Saltelli design, the adaptive grid, the SBML toggle switch, and a custom-law (Hill repression)
grid written here. Both checkouts run the same spec file in a subprocess with only that checkout
on ``PYTHONPATH``, through the API both have (``sweep.load(path, store=...)`` and
``sweep.run(spec, workers=1)``), so only the code differs. Compared: the arrays ``counts``,
``status``, ``events`` and ``done`` byte for byte (and ``params``, ``time``), and every root
attribute except ``created``, ``last_run``, ``store_id`` and ``versions``: the times of the runs,
the random id each creation draws (so that two stores of one spec are told apart), and the package
versions, none of them a result. An attribute only one checkout writes is listed apart (a new record is not
a change of the bytes a task writes).

Resume: the old checkout's store is copied, the second half of its tasks marked not done (their
chunks left as they are, as a killed run leaves them), and the new checkout resumes it; its
arrays must then equal the new checkout's fresh store. Each checkout gets its own numba cache
folder under ``--work``, so neither writes into the other's (or a checkout's) ``__pycache__``.
"""

from __future__ import annotations

import argparse
import json
import os
import shutil
import subprocess
import sys
import tomllib
from pathlib import Path

ARRAYS = ("counts", "status", "events", "done", "params", "time")
# the clock of the runs, the random id each creation draws, and the package versions: not results
NOT_RESULTS = {"created", "last_run", "store_id", "versions"}
SHORT = {"replicates": 20, "replicates_per_task": 10}
TIME = {"end": 60.0, "samples": 7}

# (name, config file, reductions of [design] and [run]); the design keeps its kind
SPECS = (
    ("demo", "reporter.toml", {"vary": {"k_tx": [0.5, 2.0], "k_off": [0.05, 0.4]}}, {}),
    ("lhs", "reporter_lhs.toml", {"points": 6}, {}),
    ("saltelli", "reporter_sobol.toml", {"base_samples": 4}, {}),
    ("adaptive", "reporter_adaptive.toml", {"vary": {"k_tx": [0.5, 4.0], "k_off": [0.05, 0.4]}},
     {"adaptive": {"statistic": "fano", "species": "protein", "time": "last", "precision": 0.2,
                   "max_replicates": 120}}),  # loose enough that points stop after different rounds
    ("sbml", "toggle_sbml.toml", {}, {}),
)
HILL = """\
[model.species]
P = 0
[model.parameters]
vmax = 20.0
K = 30.0
n = 2.0
g = 0.1
[model.reactions]
make = { reaction = "0 -> P", propensity = "hill_down(P, vmax, K, n)" }
decay = { reaction = "P -> 0", rate = "g" }
[run]
replicates = 20
replicates_per_task = 10
seed = 3
[time]
end = 20.0
samples = 11
[design]
kind = "grid"
[design.vary]
vmax = [10.0, 20.0]
n = [1.0, 2.0, 3.0]
"""

RUN = """
import sys
import sweep
spec = sweep.load(sys.argv[1], store=sys.argv[2])
summary = sweep.run(spec, workers=1)
print(summary.complete, summary.tasks_run)
"""


def _toml(table: dict, prefix: str = "") -> str:
    """TOML text of ``table`` (plain values first, then each sub-table under its dotted name)."""
    lines = [f"{json.dumps(k)} = {_value(v)}" for k, v in table.items() if not isinstance(v, dict)]
    for key, value in table.items():
        if isinstance(value, dict):
            name = f"{prefix}.{json.dumps(key)}" if prefix else json.dumps(key)
            lines.append(f"\n[{name}]\n" + _toml(value, name))
    return "\n".join(lines)


def _value(v) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, str):
        return json.dumps(v)
    if isinstance(v, list):
        return "[" + ", ".join(_value(x) for x in v) + "]"
    return repr(v)


def write_specs(configs: Path, work: Path) -> dict[str, Path]:
    """The six reduced spec files, with the model files they name copied beside them."""
    work.mkdir(parents=True, exist_ok=True)
    paths = {}
    for name, config, design, run in SPECS:
        table = tomllib.loads((configs / config).read_text(encoding="utf-8"))
        table.pop("plot", None)  # figure defaults: not read by the older checkout, no part of a store
        table["run"].pop("store", None)  # the store is passed to load, the same for both
        table["run"].update(SHORT, **run)
        table["time"].update(TIME)
        table["design"].update(design)
        shutil.copy(configs / table["model"], work / table["model"])
        paths[name] = work / f"{name}.toml"
        paths[name].write_text(_toml(table) + "\n", encoding="utf-8")
    paths["hill"] = work / "hill.toml"
    paths["hill"].write_text(HILL, encoding="utf-8")
    return paths


def run(checkout: Path, spec: Path, store: Path, cache: Path) -> str:
    """Run ``spec`` into ``store`` with only ``checkout`` importable; its one-line summary."""
    env = {**os.environ, "PYTHONPATH": str(checkout), "NUMBA_CACHE_DIR": str(cache),
           "PYTHONDONTWRITEBYTECODE": "1"}
    done = subprocess.run([sys.executable, "-c", RUN, str(spec), str(store)], env=env, cwd=spec.parent,
                          capture_output=True, text=True, timeout=900)
    if done.returncode != 0:
        raise RuntimeError(f"{checkout}: {spec.name}: exit {done.returncode}\n{done.stderr[-3000:]}")
    return done.stdout.strip().splitlines()[-1]


def compare(a: Path, b: Path) -> dict:
    """Which arrays are equal byte for byte, which shared attributes differ, which are one side's only."""
    import numpy as np
    import zarr

    ga, gb = zarr.open_group(a, mode="r"), zarr.open_group(b, mode="r")
    arrays = {}
    for name in ARRAYS:
        x, y = ga[name][:], gb[name][:]
        arrays[name] = bool(x.dtype == y.dtype and x.shape == y.shape and x.tobytes() == y.tobytes())
    aa, ab = dict(ga.attrs), dict(gb.attrs)
    shared = (set(aa) & set(ab)) - NOT_RESULTS
    return {"arrays": arrays,
            "attrs_differing": sorted(k for k in shared if json.dumps(aa[k], sort_keys=True) != json.dumps(ab[k], sort_keys=True)),
            "only_old": sorted(set(aa) - set(ab) - NOT_RESULTS), "only_new": sorted(set(ab) - set(aa) - NOT_RESULTS)}


def _blocks_per_point(path: Path) -> list[int]:
    import zarr

    return [int(n) for n in zarr.open_group(path, mode="r")["done"][:].sum(axis=1)]


def unmark_half(store: Path) -> int:
    """Mark the second half of the store's tasks (in task order) not done; how many."""
    import numpy as np
    import zarr

    done = zarr.open_group(store, mode="r+")["done"]
    flags = done[:]
    flat = np.flatnonzero(flags.ravel())
    undo = flat[len(flat) // 2:]
    flags.ravel()[undo] = False
    done[:] = flags
    return len(undo)


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("old", type=Path)
    parser.add_argument("new", type=Path)
    parser.add_argument("--work", type=Path, default=Path("identity-work"))
    parser.add_argument("--json", type=Path)
    args = parser.parse_args(argv)
    old, new, work = args.old.resolve(), args.new.resolve(), args.work.resolve()
    specs = write_specs(new / "configs", work / "specs")
    rows = {}
    for name, spec in specs.items():
        stores = {side: work / side / f"{name}.zarr" for side in ("old", "new", "resumed")}
        for path in stores.values():
            shutil.rmtree(path, ignore_errors=True)
            path.parent.mkdir(parents=True, exist_ok=True)
        ran_old = run(old, spec, stores["old"], work / "numba-old")
        ran_new = run(new, spec, stores["new"], work / "numba-new")
        row = compare(stores["old"], stores["new"])
        shutil.copytree(stores["old"], stores["resumed"])
        unmarked = unmark_half(stores["resumed"])
        resumed = run(new, spec, stores["resumed"], work / "numba-new")
        row["resume"] = {"unmarked": unmarked, "summary": resumed,
                         "arrays": compare(stores["resumed"], stores["new"])["arrays"]}
        row["summaries"] = {"old": ran_old, "new": ran_new}
        row["blocks_per_point"] = _blocks_per_point(stores["new"])
        rows[name] = row
        same = all(row["arrays"].values()) and not row["attrs_differing"]
        print(f"{name:9s} {'identical' if same else 'DIFFERENT'}  arrays={row['arrays']}  "
              f"attrs differing={row['attrs_differing']}  only old={row['only_old']}  only new={row['only_new']}  "
              f"resume of {unmarked} tasks: {'same bytes' if all(row['resume']['arrays'].values()) else row['resume']}",
              flush=True)
    if args.json:
        args.json.write_text(json.dumps(rows, indent=1), encoding="utf-8")
    return 0 if all(all(r["arrays"].values()) and not r["attrs_differing"] and all(r["resume"]["arrays"].values())
                    for r in rows.values()) else 1


if __name__ == "__main__":
    sys.exit(main())
