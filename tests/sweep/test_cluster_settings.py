"""`--cluster slurm` settings without a Slurm: the profile loader, precedence, errors, job script.

The job-script checks read the text dask-jobqueue renders, as dask-jobqueue's own
``test_slurm.py`` does; what each ``#SBATCH`` line means is Slurm's sbatch manual
(``-t`` time limit, ``-p`` partition, ``-A`` account, ``--mem`` memory per node).
Real parts: a real Dask scheduler starts (no job is submitted without work to do).
"""

from __future__ import annotations

import stat
from pathlib import Path

import pytest
from distributed.security import Security
from typer.testing import CliRunner

import sweep
from sweep.batch import settings as clusters
from sweep.spec import diff as specdiff
from sweep.cli import app
from sweep.errors import SpecError

runner = CliRunner()
BODY = """
[run]
replicates = 10
seed = 1
[time]
end = 1.0
samples = 3
[design.vary]
k = [1.0, 2.0]
"""
PROFILE = """
[cluster]
partition = "short"
account = "lab-budget"
walltime = "02:00:00"
cores = 4
memory = "8GB"
job_extra = ["--qos=normal"]
setup = ["module load python/3.11", "export OMP_NUM_THREADS=1"]
max_jobs = 8
"""


def _profile(tmp_path: Path, text: str = PROFILE, name: str = "site.toml") -> Path:
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    return path


def test_profile_then_spec_then_flags(tmp_path, spec_file):
    profile = _profile(tmp_path)
    spec = sweep.load(spec_file(BODY + '\n[cluster]\nwalltime = "00:30:00"\nmax_jobs = 3\n'))
    config = clusters.resolve(profile, dict(spec.cluster), str(spec.path), {"max_jobs": 2, "partition": None})
    assert config.partition == "short" and config.cores == 4 and config.setup[0] == "module load python/3.11"
    assert config.walltime == "00:30:00"  # the spec's [cluster] beats the profile
    assert config.max_jobs == 2  # the flag beats both
    assert config.where("partition") == f"{profile}: cluster.partition"
    assert config.where("walltime") == f"{spec.path}: cluster.walltime"
    assert config.where("max_jobs") == "--max-jobs"
    assert config.workers_per_job == 4  # default: one single-threaded worker per core


@pytest.mark.parametrize("walltime, margin, lifetime, stagger", [
    ("01:00:00", 360.0, 3240.0, 120.0),  # 10 %
    ("00:05:00", 60.0, 240.0, 20.0),  # at least a minute
    ("1-00:00:00", 900.0, 85500.0, 300.0),  # at most 15 minutes
    ("00:01:00", 30.0, 30.0, 10.0),  # at most half the walltime
])
def test_workers_retire_before_the_walltime(walltime, margin, lifetime, stagger):
    config = clusters.resolve(None, {"walltime": walltime}, "s.toml")
    assert (config.margin_seconds, config.lifetime_seconds, config.stagger_seconds) == (margin, lifetime, stagger)
    # the latest a worker can retire (lifetime + stagger) still leaves part of the margin
    assert config.lifetime_seconds + config.stagger_seconds < config.walltime_seconds
    assert config.worker_args() == ["--lifetime", f"{lifetime:.0f}s", "--lifetime-stagger", f"{stagger:.0f}s"]


@pytest.mark.parametrize("text, field, words", [
    ('[cluster]\nwaltime = "01:00:00"\n', "cluster.waltime", "unknown key"),
    ('[cluster]\nwalltime = "1 hour"\n', "cluster.walltime", "HH:MM:SS"),
    ('[cluster]\nmemory = "lots"\n', "cluster.memory", "4GB"),
    ('[cluster]\ncores = 0\n', "cluster.cores", ">= 1"),
    ('[cluster]\ncores = 4\nprocesses = 3\n', "cluster.processes", "divide cores"),
    ('[cluster]\nmin_jobs = 5\nmax_jobs = 2\n', "cluster.min_jobs", "max_jobs"),
    ('[cluster]\nwalltime = "00:10:00"\nlifetime_margin = 600\n', "cluster.lifetime_margin", "at least 10 s"),
    ('[cluster]\npartition = "short\\n#SBATCH --exclusive"\n', "cluster.partition", "one line"),
    ('[cluster]\njob_extra = ["qos=normal"]\n', "cluster.job_extra", "starting with '-'"),
    ('[cluster]\ntls = "no"\n', "cluster.tls", "true or false"),
    ('walltime = "01:00:00"\n', "walltime", "under [cluster]"),
    ("[slurm]\ncores = 2\n", "slurm", "under [cluster]"),
    ('[cluster\nwalltime = 1\n', "", "TOML syntax error"),
])
def test_a_bad_profile_names_file_field_and_fix(tmp_path, text, field, words):
    profile = _profile(tmp_path, text)
    with pytest.raises(SpecError) as err:
        clusters.resolve(profile)
    message = str(err.value)
    assert message.startswith(f"{profile}: {field}"), message
    assert words in message, message


def test_cli_refuses_bad_settings_with_exit_code_2(tmp_path, spec_file):
    spec = spec_file(BODY)
    store = tmp_path / "s.zarr"
    bad = _profile(tmp_path, '[cluster]\nwalltime = "soon"\n', "bad.toml")
    cases = [
        (["--cluster", "slurm", "--profile", str(bad)], f"{bad}: cluster.walltime"),
        (["--cluster", "slurm", "--profile", str(tmp_path / "missing.toml")], "profile file not found"),
        (["--cluster", "slurm", "--walltime", "5"], "--walltime"),
        (["--partition", "short"], "only apply to --cluster slurm"),
        (["--cluster", "slurm", "--workers", "2"], "max_jobs"),
        (["--cluster", "slurm", "--scheduler", "tls://10.0.0.5:8786"], "not both"),
    ]
    for extra, words in cases:
        result = runner.invoke(app, ["run", str(spec), "--store", str(store), *extra])
        assert result.exit_code == 2, (extra, result.output)
        assert words in _flat(result.output), (extra, result.output)
    assert not store.exists()  # refused before anything was written


def _flat(text: str) -> str:
    """Output without rich's panel borders and line breaks."""
    return " ".join(text.translate({ord(c): " " for c in "│╭╮╰╯─"}).split())


def test_a_bad_cluster_table_in_the_spec_is_refused(spec_file):
    path = spec_file(BODY + "\n[cluster]\nmax_jobs = -1\n")
    with pytest.raises(SpecError, match=r"cluster\.max_jobs = -1: must be a whole number >= 1"):
        sweep.load(path)


def test_cluster_settings_do_not_block_a_resume():
    # where the work runs does not change which numbers land where (sweep.specdiff)
    old = ('[run]\nreplicates = 10\n[cluster]\nwalltime = "01:00:00"\n', "")
    new = ('[run]\nreplicates = 10\n[cluster]\nwalltime = "04:00:00"\nmax_jobs = 50\n', "")
    assert specdiff.changes(old, new) == []
    assert specdiff.digest(*old) == specdiff.digest(*new)
    assert specdiff.changes(old, ('[run]\nreplicates = 20\n', "")) == ["run.replicates: 10 -> 20"]


def test_job_script_carries_the_site_settings_and_tls(tmp_path):
    from sweep.execute.slurm import make_cluster

    config = clusters.resolve(_profile(tmp_path), {"interface": "lo"}, "s.toml")
    cluster = make_cluster(config, tmp_path / "logs", Security.temporary())
    try:
        script = cluster.job_script()
        address = cluster.scheduler_address
    finally:
        cluster.close()
    lines = script.splitlines()
    for directive in ("#SBATCH -t 02:00:00", "#SBATCH -p short", "#SBATCH -A lab-budget",
                      "#SBATCH --cpus-per-task=4", "#SBATCH --qos=normal", "#SBATCH -J sweep-worker",
                      f"#SBATCH -e {tmp_path / 'logs'}/sweep-worker-%J.err"):
        assert directive in lines, script
    assert "#SBATCH --mem=8G" in lines  # dask rounds 8 GB (10^9 B) up to whole GiB for Slurm
    command = lines[-1]
    # setup lines run in order, after the directives and before the worker starts
    assert lines.index("module load python/3.11") < lines.index("export OMP_NUM_THREADS=1") < len(lines) - 1
    assert "-m distributed.cli.dask_worker tls://" in command and address.startswith("tls://")
    assert "--nworkers 4" in command and "--nthreads 1" in command
    # 2 h walltime: retire 12 min (10 %) before it, give or take 4 min
    assert "--lifetime 6480s --lifetime-stagger 240s" in command
    assert "--lifetime-restart" not in command  # a restarted worker would die at the walltime
    for flag in ("--protocol tls://", "--tls-ca-file", "--tls-cert", "--tls-key", "--interface lo"):
        assert flag in command, command


def test_without_tls_the_workers_get_no_certificate(tmp_path):
    from sweep.execute.slurm import make_cluster

    config = clusters.resolve(None, {"tls": False, "interface": "lo"}, "s.toml")
    cluster = make_cluster(config, tmp_path / "logs", None)
    try:
        script, address = cluster.job_script(), cluster.scheduler_address
    finally:
        cluster.close()
    assert address.startswith("tcp://") and "--tls-" not in script


def test_the_key_is_private_and_deleted_after_the_run(tmp_path):
    from sweep.execute import slurm

    store = tmp_path / "s.zarr"
    config = clusters.resolve(None, {"interface": "lo", "max_jobs": 1}, "s.toml")
    with slurm.connect(config, store) as client:  # no work, so no job is submitted
        assert client.scheduler.address.startswith("tls://")
        assert client.dashboard_link.startswith("http://127.0.0.1:")
        files = sorted((tmp_path / "s.zarr.logs").glob(".dask-jobqueue.worker.*"))
        assert len(files) == 3  # CA, certificate, key: beside the store, shared with the nodes
        for path in files:
            assert stat.S_IMODE(path.stat().st_mode) == 0o600, path  # readable by the owner only
    assert not list((tmp_path / "s.zarr.logs").glob(".dask-jobqueue.worker.*"))


def test_site_example_profile_is_valid():
    config = clusters.resolve(Path(__file__).parents[2] / "configs" / "slurm_site_example.toml")
    assert config.tls and config.partition and config.setup
