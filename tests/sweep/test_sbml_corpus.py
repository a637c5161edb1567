"""The curated SBML corpus (../shared/sbml-corpus/, public-domain test data read in place, never
copied here): every model is imported, and run briefly, by ``scripts/sbml_coverage.py``.

The test prints the table (accepted, refused by reason, failed, hung) and fails on any traceback
or hang; it also holds the coverage targets of issue 16 (>= 60 % for ``method = "ode"`` run to
the end, >= 40 % for the exact direct method given a model volume of 1 fL). A model that is
refused is fine: the reason is counted. Each model is bounded in time (a worker process killed
past ``TIMEOUT`` seconds counts as hung), so the test cannot hang itself.
"""

from __future__ import annotations

import importlib.util
from pathlib import Path

import pytest

CORPUS = Path(__file__).resolve().parents[3] / "shared" / "sbml-corpus"
if not CORPUS.is_dir():
    CORPUS = Path("/work/shared/sbml-corpus")
SCRIPT = Path(__file__).resolve().parents[2] / "scripts" / "sbml_coverage.py"
TIMEOUT = 60.0   # seconds per model, on a busy 2-core machine
END = 2.0        # model time units: a short run is enough to show that a model runs

pytestmark = [pytest.mark.slow,
              pytest.mark.skipif(not CORPUS.is_dir(), reason="no SBML corpus at ../shared/sbml-corpus/")]


def _coverage():
    spec = importlib.util.spec_from_file_location("sbml_coverage", SCRIPT)
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


@pytest.mark.parametrize("method, volume, target", [("ode", None, 0.60), ("direct", 1e-15, 0.40)])
def test_corpus_imports_without_traceback_or_hang(method, volume, target, capsys):
    coverage = _coverage()
    results = coverage.survey(CORPUS, method, end=END, volume=volume, timeout=TIMEOUT, jobs=2)
    with capsys.disabled():
        print("\n" + coverage.table(results, method))
    failed = {n: r.get("traceback", "")[-400:] for n, r in results.items() if r["outcome"] in ("failed", "hung")}
    assert not failed, failed
    accepted = sum(r["outcome"] == "accepted" for r in results.values())
    assert accepted >= target * len(results), f"{accepted} of {len(results)} accepted"
    refused = [r for r in results.values() if r["outcome"] == "refused"]
    assert all(r["problems"] for r in refused)  # every refusal has a reason to count


def test_reason_table_counts_each_reason():
    coverage = _coverage()
    # the lines sweep.model.sbml.events writes (events are read since issue 16; these remain refused)
    results = {"a.xml": {"outcome": "refused", "problems": ["event e1: a delay is not supported (...)",
                                                            "rate rule for q: ..."]},
               "b.xml": {"outcome": "refused", "problems": ["event e2: a delay is not supported (...)"]},
               "c.xml": {"outcome": "accepted"},
               "d.xml": {"outcome": "refused", "problems": ["event e3: trigger is not a single comparison (...)",
                                                            "event e4: priorities are not supported (...)"]}}
    text = coverage.table(results, "ode")
    assert "accepted    1" in text and "refused     3" in text
    assert "2 /    1  event delays" in text and "1 /    0  rate rules" in text
    assert "1 /    0  event triggers of another form" in text and "1 /    0  event priorities" in text
