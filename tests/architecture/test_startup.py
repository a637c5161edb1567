"""`sweep --help` and `sweep check` start without the heavy libraries (numba, Dask, matplotlib).

Each costs a large part of a second to import; a user asking for help or checking a spec waits for
none of them. Measured with ``python -X importtime`` in docs/measurements.md.
"""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[2]
HEAVY = ("numba", "dask", "distributed", "matplotlib", "xarray", "SALib")

PROBE = """
import json, runpy, sys
sys.argv = ["sweep", *json.loads(sys.argv[1])]
try:
    runpy.run_module("sweep.cli", run_name="__main__")
except SystemExit:
    pass
print(json.dumps(sorted(m for m in %s if m in sys.modules)))
""" % repr(HEAVY)


@pytest.mark.parametrize("args", [["--help"], ["check", "configs/reporter.toml"], ["run", "--help"],
                                  ["check", "configs/reporter_induction.toml"]])  # interventions: schedules built
def test_light_commands_import_no_heavy_library(args):
    out = subprocess.run([sys.executable, "-c", PROBE, json.dumps(args)], capture_output=True, text=True,
                         cwd=ROOT, timeout=120)
    loaded = json.loads(out.stdout.strip().splitlines()[-1])
    assert loaded == [], (loaded, out.stderr[-2000:])
