"""How much of a folder of SBML files imports and runs: accepted, refused by reason, failed, hung.

    python scripts/sbml_coverage.py FOLDER [--method ode|direct|nrm] [--volume 1e-15]
                                           [--timeout 60] [--end 10] [--jobs 2] [--json OUT]

Each model is imported through a minimal spec (``sweep.spec.from_text``, exactly what ``sweep
check`` does) and, when accepted, simulated once for a short time in a worker process; a model
that takes longer than ``--timeout`` seconds is killed with its worker and counted as hung. A
refusal (a ``SweepError``: exit 2 on the command line) is split into its listed problems and
each is counted under a reason (``reason``); anything else is a failure, with its traceback.
A model is "accepted" when it imports and its simulation ends with status 0 (finished), or,
for a stochastic method, 1 (stopped at the event cap: that run is only a short probe); an ODE
solve that passes its work bound (200,000 right-hand-side evaluations) is "stopped"; a numerical
failure (status 2) is counted as refused with the reason "numerical failure".
"""

from __future__ import annotations

import argparse
import json
import os
import re
import subprocess
import sys
import time
import traceback
from collections import Counter
from pathlib import Path

# (pattern over one problem line, reason): first match wins
REASONS = (
    (r"initial count .* more than", "initial counts over 2^31-1"),
    (r"cannot honour", "ODE-only construct (rate rule) for a stochastic method"),
    (r"event .*: a delay", "event delays"),
    (r"event .*: priorities", "event priorities"),
    (r"event .*: initialValue", "event trigger already true at t = 0 (initialValue=true)"),
    (r"event .*: trigger", "event triggers of another form"),
    (r"event .*: (assign|only species)", "event assignments of another form"),
    (r"changes nothing|rate entry .* reads", "event sets a parameter no rate reads, or shares a rate"),
    (r"event .* reads .*rule", "event reads a variable of a refused rule"),
    (r"\bevent\b", "events"),
    (r"rate rule", "rate rules"),
    (r"algebraic rule", "algebraic rules"),
    (r"assignment rule", "assignment rules"),
    (r"rules are not supported", "rules"),
    (r"reads .*rule", "law reads a rule-set variable"),
    (r"reversible", "reversible law with another net rate"),
    (r"stoichiometry", "non-integer or missing stoichiometry"),
    (r"no size", "compartment without a size"),
    (r"compartment .*size", "compartment size"),
    (r"unit", "units"),
    (r"time csymbol|time-dependent", "time in a law"),
    (r"piecewise|comparison or logical", "piecewise / logic in math"),
    (r"delay", "delay"),
    (r"not a species, parameter or compartment", "law reads an unknown name"),
    (r"reserved word", "reserved word as an id"),
    (r"initial assignment", "initial assignment"),
    (r"conversion factor|conversionFactor", "conversion factors"),
    (r"fast=true", "fast reactions"),
    (r"package", "SBML packages"),
    (r"constraint", "constraints"),
    (r"not valid|not readable|error\(s\)", "libsbml errors"),
    (r"no kinetic law", "no kinetic law"),
    (r"no value", "parameter without a value"),
    (r"numerical failure", "numerical failure"),
    (r"the function|MathML element", "unsupported MathML function"),
    (r"copy number|volume", "model volume"),
    (r"longer than", "expression too long once rules and functions are inlined"),
)


def reason(problem: str) -> str:
    """The reason a refusal's problem line is counted under."""
    for pattern, label in REASONS:
        if re.search(pattern, problem, re.IGNORECASE):
            return label
    return "other: " + re.sub(r"\s+", " ", problem)[:70]


def _spec_text(model: Path, method: str, end: float, volume: float | None) -> str:
    # the work bound of the probe: reaction events for the stochastic methods (a short look),
    # right-hand-side evaluations for the ODE (a solve that needs more is "stopped", not accepted)
    events = 20_000 if method != "ode" else 200_000
    volume_line = f"model_volume = {volume!r}\n" if volume is not None else ""
    return (f"model = {json.dumps(str(model))}\n{volume_line}[run]\nmethod = {json.dumps(method)}\n"
            f"replicates = 1\nseed = 1\nmax_events = {events}\n[time]\nend = {end!r}\nsamples = 5\n")


def probe(model: Path, method: str, end: float, volume: float | None) -> dict:
    """Import one model and run it briefly; a dict with ``outcome`` and ``problems``/``traceback``."""
    import numpy as np

    import kernels
    from sweep.errors import SweepError
    from sweep.model import compile_network, initial_counts, rate_constants
    from sweep.spec import from_text

    try:
        text = _spec_text(model.resolve(), method, end, volume)
        spec = from_text(text, model.parent / "coverage.toml", model.read_text(errors="replace"))
        values = spec.values_at(spec.points()[0])
        x0 = initial_counts(spec.model, values)
        seeds = [np.random.SeedSequence(1)]
        options = dict(spec.options)
        if spec.interventions:  # imported events run as the sweep would run them
            from sweep.model.schedule import build

            options["changes"] = build(spec.model, spec.interventions, spec.derived, values, spec.times[-1])
        result = kernels.get(spec.method).simulate(compile_network(spec.model), rate_constants(spec.model, values),
                                                   x0, np.asarray(spec.times), seeds, spec.max_events, **options)
        status = int(np.asarray(result.status).max())
        if status == 1 and method == "ode":
            return {"outcome": "stopped", "status": status}
        if status == 2:
            why = getattr(result, "reason", "") or "the solver stopped"
            return {"outcome": "refused", "problems": [f"numerical failure: {why}"]}
        return {"outcome": "accepted", "status": status}
    except SweepError as exc:
        return {"outcome": "refused", "problems": _problems(str(exc))}
    except Exception:  # noqa: BLE001 - the point is to count them
        return {"outcome": "failed", "traceback": traceback.format_exc()}


def _problems(message: str) -> list[str]:
    lines = [ln.strip()[2:] for ln in message.splitlines() if ln.strip().startswith("- ")]
    return lines or [message.splitlines()[0] if message else "?"]


def _worker() -> None:
    """Read one JSON request a line on stdin, answer one JSON line on stdout."""
    out = sys.stdout
    sys.stdout = sys.stderr  # nothing else may write to the answer channel
    for line in sys.stdin:
        req = json.loads(line)
        answer = probe(Path(req["model"]), req["method"], req["end"], req["volume"])
        out.write(json.dumps(answer) + "\n")
        out.flush()


class _Worker:
    def __init__(self, env: dict):
        self.proc = subprocess.Popen([sys.executable, __file__, "--worker"], stdin=subprocess.PIPE,
                                     stdout=subprocess.PIPE, stderr=subprocess.DEVNULL, text=True, env=env)
        self.job = None
        self.started = 0.0

    def send(self, job: dict) -> None:
        self.job, self.started = job, time.monotonic()
        self.proc.stdin.write(json.dumps(job) + "\n")
        self.proc.stdin.flush()

    def kill(self) -> None:
        self.proc.kill()
        self.proc.wait()


def survey(folder: Path, method: str = "ode", *, end: float = 10.0, volume: float | None = None,
           timeout: float = 60.0, jobs: int = 2) -> dict[str, dict]:
    """``{file name: probe result}`` for every ``*.xml``/``*.sbml`` file of ``folder``, in name order."""
    import selectors

    files = sorted(p for p in folder.iterdir() if p.suffix.lower() in (".xml", ".sbml"))
    env = dict(os.environ)
    root = str(Path(__file__).resolve().parents[1])
    env["PYTHONPATH"] = root + os.pathsep + env.get("PYTHONPATH", "")
    todo = [{"model": str(p), "method": method, "end": end, "volume": volume} for p in files]
    results: dict[str, dict] = {}
    workers = [_Worker(env) for _ in range(max(1, min(jobs, len(todo))))]
    sel = selectors.DefaultSelector()
    try:
        for w in workers:
            sel.register(w.proc.stdout, selectors.EVENT_READ, w)
        idle = list(workers)
        while todo or any(w.job for w in workers):
            while idle and todo:
                idle.pop().send(todo.pop(0))
            for key, _ in sel.select(timeout=0.5):
                w = key.data
                line = w.proc.stdout.readline()
                name = Path(w.job["model"]).name
                results[name] = json.loads(line) if line else {"outcome": "failed", "traceback": "worker died"}
                results[name]["seconds"] = round(time.monotonic() - w.started, 2)
                w.job = None
                if line:
                    idle.append(w)
                else:
                    sel.unregister(w.proc.stdout)
                    _replace(w, workers, sel, idle, env)
            now = time.monotonic()
            for w in list(workers):
                if w.job and now - w.started > timeout:
                    results[Path(w.job["model"]).name] = {"outcome": "hung", "seconds": round(now - w.started, 2)}
                    w.job = None
                    sel.unregister(w.proc.stdout)
                    _replace(w, workers, sel, idle, env)
    finally:
        for w in workers:
            w.kill()
    return dict(sorted(results.items()))


def _replace(w: _Worker, workers: list, sel, idle: list, env: dict) -> None:
    import selectors

    w.kill()
    fresh = _Worker(env)
    workers[workers.index(w)] = fresh
    sel.register(fresh.proc.stdout, selectors.EVENT_READ, fresh)
    idle.append(fresh)


def table(results: dict[str, dict], method: str) -> str:
    """The coverage table as text: accepted, refused (by reason: models hit), failed, hung."""
    n = len(results)
    outcome = Counter(r["outcome"] for r in results.values())
    hit: Counter = Counter()
    alone: Counter = Counter()
    for r in results.values():
        if r["outcome"] == "refused":
            why = sorted({reason(p) for p in r["problems"]})
            hit.update(why)
            if len(why) == 1:
                alone.update(why)
    pct = (lambda k: f"{100.0 * k / n:5.1f} %") if n else (lambda k: "  -  ")
    lines = [f"method = {method}: {n} models",
             f"  accepted {outcome['accepted']:4d}  {pct(outcome['accepted'])}",
             f"  refused  {outcome['refused']:4d}  {pct(outcome['refused'])}",
             f"  failed   {outcome['failed']:4d}  (traceback)",
             f"  hung     {outcome['hung']:4d}  (time bound)",
             f"  stopped  {outcome['stopped']:4d}  (ODE work bound)",
             "  refusal reason (models hit / refused for that reason alone):"]
    lines += [f"    {count:4d} / {alone[label]:4d}  {label}" for label, count in hit.most_common()]
    for name, r in results.items():
        if r["outcome"] in ("failed", "hung"):
            last = r.get("traceback", "").strip().splitlines()[-1:] or ["time bound passed"]
            lines.append(f"  {r['outcome']}: {name}: {last[0]}")
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("folder", type=Path, nargs="?")
    parser.add_argument("--method", default="ode")
    parser.add_argument("--volume", type=float, default=None, help="system volume in litres for the import")
    parser.add_argument("--timeout", type=float, default=60.0, help="seconds per model before it counts as hung")
    parser.add_argument("--end", type=float, default=10.0, help="simulated end time (model time units)")
    parser.add_argument("--jobs", type=int, default=2)
    parser.add_argument("--json", type=Path, default=None, help="also write every model's result here")
    parser.add_argument("--worker", action="store_true", help=argparse.SUPPRESS)
    args = parser.parse_args(argv)
    if args.worker:
        _worker()
        return 0
    if args.folder is None or not args.folder.is_dir():
        parser.error("FOLDER: give a folder of SBML files (*.xml, *.sbml)")
    results = survey(args.folder, args.method, end=args.end, volume=args.volume, timeout=args.timeout,
                     jobs=args.jobs)
    print(table(results, args.method))
    if args.json:
        args.json.write_text(json.dumps(results, indent=1))
    return 0


if __name__ == "__main__":
    sys.exit(main())
