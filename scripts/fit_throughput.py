"""Trajectories per second through `sweep fit` against a plain sweep of the very same points.

Runs a short version of a fit spec (default: the demo, 3 rounds) on a local cluster of N workers,
then one plain `sweep run` over every (candidate, condition) point the fit simulated, with the same
replicates, on a cluster of the same size, and prints both rates and their ratio (issue target:
the fit at >= 0.8x the plain sweep). Both include their cluster start; run it on a quiet machine.

    python scripts/fit_throughput.py [FIT_SPEC] [--rounds 3] [--workers 2]
"""

from __future__ import annotations

import argparse
import csv
import io
import shutil
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))


def main() -> None:
    import sweep
    from sweep.execute.execution import Execution
    from sweep.fit import driver
    from sweep.fit import spec as fitspec

    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("spec", nargs="?", default=str(ROOT / "configs" / "reporter_fit.toml"))
    ap.add_argument("--rounds", type=int, default=3)
    ap.add_argument("--workers", type=int, default=2)
    args = ap.parse_args()
    work = Path(tempfile.mkdtemp(prefix="fit-throughput-"))
    try:
        source = Path(args.spec).resolve()
        text = source.read_text().replace("max_rounds = ", f"max_rounds = {args.rounds}  # was ")
        short = source.parent / f".fit-throughput-{source.name}"  # beside it: the model and data paths hold
        short.write_text(text)
        try:
            loaded = fitspec.load(short, work / "fit")
        finally:
            short.unlink()
        began = time.perf_counter()
        # the loop alone: the posterior predictive draws (a sweep of their own) are output, not the fit
        result = driver.run(loaded, Execution("local", workers=args.workers), draws=0)
        fit_seconds = time.perf_counter() - began
        simulated = result.outcome.simulations
        rows, header, spec_text = [], None, None
        for points in sorted((work / "fit").glob("round_*/batch_*/points.csv")):
            table = list(csv.reader(io.StringIO(points.read_text())))
            header, rows = table[0], rows + table[1:]
            spec_text = spec_text or (points.parent / "spec.toml").read_text()
        plain = work / "plain"
        plain.mkdir()
        buffer = io.StringIO()
        csv.writer(buffer, lineterminator="\n").writerows([header] + rows)
        (plain / "points.csv").write_text(buffer.getvalue())
        (plain / "spec.toml").write_text(spec_text)
        spec = sweep.load(plain / "spec.toml", store=plain / "plain.zarr")
        began = time.perf_counter()
        summary = sweep.run(spec, workers=args.workers)
        plain_seconds = time.perf_counter() - began
        trajectories = len(rows) * spec.replicates
        fit_rate, plain_rate = simulated / fit_seconds, trajectories / plain_seconds
        print(f"fit:   {simulated:,} trajectories in {fit_seconds:.1f} s = {fit_rate:,.0f}/s "
              f"({result.outcome.rounds if hasattr(result.outcome, 'rounds') else args.rounds} rounds)")
        print(f"plain: {trajectories:,} trajectories in {plain_seconds:.1f} s = {plain_rate:,.0f}/s "
              f"({len(rows):,} points, complete={summary.complete})")
        print(f"ratio: {fit_rate / plain_rate:.2f}")
    finally:
        shutil.rmtree(work, ignore_errors=True)


if __name__ == "__main__":
    main()
