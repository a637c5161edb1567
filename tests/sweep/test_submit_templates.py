"""`sweep submit`: rendered sbatch scripts checked as text, and the array sizing (no Slurm needed).

Directive spellings follow the Slurm manual pages (SchedMD: sbatch(1) for ``--array``,
``--dependency=afterany:<job>``, ``--time``, ``--mem``, ``%A_%a`` in ``--output``;
slurm.conf(5) for ``MaxArraySize``, 1001 by default, so array indices stop at 1000).
"""

from __future__ import annotations

import re

import numpy as np
import pytest
from typer.testing import CliRunner

from sweep.batch import settings as cluster, submit
from sweep.cli import app

runner = CliRunner()

BODY = """
[run]
replicates = 40
replicates_per_task = 10
seed = 3
[time]
end = 5.0
samples = 3
[design.vary]
k = [1.0, 2.0, 3.0]
"""

PROFILE = """
# an invented site: partition "short", account "lab42"
[cluster]
partition = "short"
account = "lab42"
walltime = "00:30:00"
cores = 8
memory = "16GB"
processes = 8
job_extra = ["--qos=normal", "--constraint=haswell"]
setup = ["module load python/3.11", "source $HOME/envs/sweep/bin/activate"]
interface = "ib0"
log_dir = "logs"
max_jobs = 20
"""


@pytest.fixture
def profile_file(tmp_path):
    path = tmp_path / "site.toml"
    path.write_text(PROFILE, encoding="utf-8")
    return path


def _directives(text: str) -> list[str]:
    return [line for line in text.splitlines() if line.startswith("#SBATCH ")]


def test_render_fills_placeholders_and_names_missing_ones():
    assert submit.render("#SBATCH --time={{walltime}}\n{{ setup }}", {"walltime": "01:00:00", "setup": "x"}) == \
        "#SBATCH --time=01:00:00\nx"
    with pytest.raises(submit.SubmitError, match="array.sbatch: no value for placeholder.*job_name, shards"):
        submit.render("{{job_name}} {{shards}} {{walltime}}", {"walltime": 1}, "array.sbatch")
    # shell syntax is left alone: only double braces are placeholders
    assert submit.render("${HOME} $((SLURM_ARRAY_TASK_ID + {{offset}}))", {"offset": 1}) == \
        "${HOME} $((SLURM_ARRAY_TASK_ID + 1))"


def test_every_template_renders_completely(profile_file, tmp_path):
    profile = cluster.resolve(profile_file)  # the loader both routes share
    job = submit.Job(tmp_path / "spec.toml", tmp_path / "s.zarr", tmp_path / "out", tmp_path / "out" / "profile.toml",
                     "sweep-s", tmp_path, "/opt/venv/bin/python")
    layout = submit.Layout(4, 3, (1, 2, 3, 4))
    texts = {
        "array": submit.render(submit.read_template("array"), submit.array_values(job, profile, layout)),
        "finish": submit.render(submit.read_template("finish"), submit.finish_values(job, profile, layout, "123", 2)),
        "allocation": submit.render(submit.read_template("allocation"), submit.allocation_values(job, profile, 8)),
    }
    for name, text in texts.items():
        assert "{{" not in text and "}}" not in text, name
        assert text.startswith("#!/bin/bash\n"), name
        d = _directives(text)
        # values from the profile reach every script
        for wanted in ("#SBATCH --partition=short", "#SBATCH --account=lab42", "#SBATCH --qos=normal",
                       "#SBATCH --constraint=haswell"):
            assert wanted in d, (name, wanted)
        assert "module load python/3.11\nsource $HOME/envs/sweep/bin/activate" in text, name
        # sbatch reads directives only before the first command
        first_command = next(i for i, line in enumerate(text.splitlines()) if line and not line.startswith("#"))
        assert all(text.splitlines().index(line) < first_command for line in d), name
    array = texts["array"]
    assert "#SBATCH --array=0-3" in _directives(array)
    assert "#SBATCH --time=00:30:00" in _directives(array)
    assert f"#SBATCH --output={(tmp_path / 'logs').resolve()}/sweep-s-%A_%a.out" in _directives(array)
    assert "#SBATCH --mem=15258M" in _directives(array)  # 16 GB = 16e9 B = 15258 MiB
    assert re.search(r"^exec /opt/venv/bin/python -m sweep\.cli run \S+spec\.toml --store \S+s\.zarr "
                     r"--shard \$\(\(SLURM_ARRAY_TASK_ID \+ 1\)\)/4$", array, re.M), array
    finish = texts["finish"]
    assert "#SBATCH --dependency=afterany:123" in _directives(finish)
    assert re.search(r"-m sweep\.cli status \S+s\.zarr\n", finish)
    assert "--template array --finish --shards 4 --resubmits 2 --profile" in finish
    alloc = texts["allocation"]
    assert "#SBATCH --ntasks=8" in _directives(alloc) and "#SBATCH --mem-per-cpu=1907M" in _directives(alloc)
    assert "-m dask scheduler --scheduler-file \"$scheduler_file\"" in alloc and "--interface ib0" in alloc
    assert "srun --ntasks=8 --cpus-per-task=1 /opt/venv/bin/python -m dask worker --scheduler-file" in alloc
    assert "-m sweep.cli run" in alloc and '--scheduler "$scheduler_file"' in alloc


def test_array_size_respects_the_cap():
    # MaxArraySize 1001 (slurm.conf(5) default): indices 0..1000
    assert submit.choose_layout(5000, max_array=1001, tasks_per_element=1) == (1000, 5)
    assert submit.choose_layout(1001, max_array=1001) == (1001, 1)
    assert submit.choose_layout(30, max_array=1001, tasks_per_element=4) == (8, 4)
    # calibrated: 600 s of work per element (300 tasks of 2 s), evened out: 7 elements of <= 286
    assert submit.choose_layout(2000, task_seconds=2.0, walltime_seconds=3600) == (7, 286)
    # ... but at most half the walltime: 60 tasks of 1 s in 2-minute jobs, evened out to 50
    assert submit.choose_layout(100, task_seconds=1.0, walltime_seconds=120) == (2, 50)
    assert submit.choose_layout(0) == (0, 0)
    done = np.zeros((3, 4), dtype=bool)
    done.reshape(-1)[[0, 4, 8, 1, 5, 9, 2]] = True  # shard 1 (0, 4, 8) and 2 (1, 5, 9) complete; shard 3 not
    assert submit.pending_shards(done, 4) == (3, 4)
    assert submit.index_ranges([0, 1, 2, 5, 7, 8, 10]) == "0-2,5,7-8,10"


def test_the_resolved_profile_reads_back_the_same(profile_file, tmp_path):
    """The finishing job re-reads what the first submission resolved (profile < flags)."""
    first = cluster.resolve(profile_file, None, "spec.toml", {"walltime": "00:05:00", "setup": ["echo 'a \\ b'"]})
    again = tmp_path / "again.toml"
    again.write_text(submit.profile_toml(first))
    second = cluster.resolve(again)
    assert second == first
    assert second.walltime == "00:05:00" and second.setup == ("echo 'a \\ b'",)
    assert second.job_extra[0] == "--qos=normal"


def test_dry_run_writes_and_prints_without_submitting(spec_file, profile_file, tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    spec = spec_file(BODY)
    out = tmp_path / "scripts"
    result = runner.invoke(app, ["submit", str(spec), "--store", "s.zarr", "--dry-run", "--out", str(out),
                                 "--profile", str(profile_file), "--walltime", "00:02:00", "--tasks-per-element", "5"])
    assert result.exit_code == 0, result.output
    assert "12 of 12 tasks pending: 3 array element(s) of 3 shards" in result.output
    assert "#SBATCH --time=00:02:00" in result.output  # the flag beats the profile's 00:30:00
    assert "#SBATCH --partition=short" in result.output
    assert "dry run: nothing submitted" in result.output
    assert sorted(p.name for p in out.iterdir()) == ["array.sbatch", "finish.sbatch", "profile.toml"]
    assert not (tmp_path / "s.zarr").exists()
    # the profile the finishing job will read carries the flag's value
    assert cluster.resolve(out / "profile.toml").walltime == "00:02:00"
    bad = runner.invoke(app, ["submit", str(spec), "--dry-run", "--walltime", "forever"])
    assert bad.exit_code == 2 and "--walltime = 'forever': is not a walltime" in bad.output, bad.output
    profile_file.write_text('[cluster]\nmemory = "lots"\n')
    bad = runner.invoke(app, ["submit", str(spec), "--dry-run", "--profile", str(profile_file)])
    assert bad.exit_code == 2 and "cluster.memory = 'lots': is not an amount of memory" in bad.output, bad.output
