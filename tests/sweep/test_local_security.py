"""Who may use the local cluster: only the sweep's own client (issue 12.4). Real processes throughout.

A Dask scheduler runs any pickled function it is sent, and so do its workers and nannies;
the local cluster listens on 127.0.0.1, which any user of this machine can reach. Each test
plays the other user from a second process.
"""

from __future__ import annotations

import json
import logging
import os
import signal
import subprocess
import sys
import textwrap
from pathlib import Path
from urllib.parse import urlsplit

import numpy as np
import psutil
import pytest
from distributed import LocalCluster
from distributed.security import Security

from sweep.execute import local
from support.models import DIMERISING
from support.stores import assert_identical

# 16 tasks of a few hundredths of a second: the cluster's start dominates
BODY = """
[run]
replicates = 80
replicates_per_task = 20
seed = 7
[time]
end = 20.0
samples = 5
[design.vary]
k = [300.0, 400.0]
h = [0.01, 0.02]
"""
ATTEMPT_SECONDS = 5  # each connection attempt of the other user gives up after this

# The other user: for each port, try to speak Dask to it without the run's certificate, three
# ways, all at once; with "credentials", also with them (the control: the attempts are real).
OTHER_USER = textwrap.dedent("""
    import asyncio, json, os, ssl, sys, urllib.error, urllib.request
    import dask
    from distributed import Client
    from distributed.comm import connect
    from distributed.security import Security

    request = json.loads(sys.argv[1])
    timeout = request["timeout"]

    class NoCertificate(Security):
        # TLS that shows no client certificate and checks none of the server's
        def get_connection_args(self, role):
            context = ssl.create_default_context(ssl.Purpose.SERVER_AUTH)
            context.check_hostname = False
            context.verify_mode = ssl.CERT_NONE
            return {"ssl_context": context, "require_encryption": True, "extra_conn_args": {}}

    ways = {"tcp": ("tcp", Security()), "tls without a certificate": ("tls", NoCertificate()),
            "tls with another certificate": ("tls", Security.temporary())}
    if request["credentials"]:
        c = request["credentials"]
        ways["tls with the run's certificate"] = ("tls", Security(
            require_encryption=True, tls_ca_file=c["ca"], tls_client_cert=c["cert"], tls_client_key=c["key"]))

    def speaks_http(port):
        try:
            with urllib.request.urlopen(f"http://127.0.0.1:{port}/health", timeout=timeout) as answer:
                return answer.status == 200
        except urllib.error.HTTPError:
            return True
        except Exception:
            return False

    def has_api(port):
        try:
            urllib.request.urlopen(f"http://127.0.0.1:{port}/api/v1/get_workers", timeout=timeout)
            return True
        except urllib.error.HTTPError as exc:
            return exc.code != 404

    async def talk(port, scheme, security):
        # the Dask handshake, then one request; with it done, "run" would execute code
        comm = await connect(f"{scheme}://127.0.0.1:{port}", timeout=timeout,
                             **security.get_connection_args("client"))
        try:
            await comm.write({"op": "identity", "reply": True})
            return "answered as " + (await comm.read())["type"]
        finally:
            comm.abort()

    async def submit(port, scheme, security):
        async with Client(f"{scheme}://127.0.0.1:{port}", security=security, asynchronous=True,
                          timeout=timeout) as client:
            pids = await client.run(os.getpid)
            return "ran code on workers " + " ".join(str(p) for p in pids.values())

    async def attempt(how, *args):
        try:
            return await asyncio.wait_for(how(*args), 4 * timeout)
        except BaseException as exc:
            return "refused: " + type(exc).__name__

    async def main():
        out = {}
        for port in request["ports"]:
            if speaks_http(port):
                out[port] = {"http": True, "api": has_api(port)}
                continue
            hows = [(name, talk, port, *way) for name, way in ways.items()]
            if port == request["scheduler"]:
                hows += [("submit " + name, submit, port, *way) for name, way in ways.items()]
            results = await asyncio.gather(*(attempt(how, *args) for _, how, *args in hows))
            out[port] = {"http": False, **dict(zip((h[0] for h in hows), results))}
        print(json.dumps(out))

    with dask.config.set({"distributed.comm.timeouts.connect": f"{timeout}s"}):
        asyncio.run(main())
""")


@pytest.fixture(scope="module")
def reference(reference_run) -> tuple[Path, dict[str, np.ndarray]]:
    """The spec file and the arrays of a run with no TLS and no Dask (in this process)."""
    return reference_run(BODY, DIMERISING)


def _sweep(*args: str, env: dict[str, str] | None = None) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "sweep.cli", *args], capture_output=True, text=True, timeout=300,
                          env={**os.environ, "COLUMNS": "200", **(env or {})})


def _write_credentials(security: Security, folder: Path) -> dict[str, str]:
    """The run's key and certificate as files of mode 600 (what the other user does not have)."""
    paths = {}
    for name, pem in (("ca", security.tls_ca_file), ("cert", security.tls_client_cert),
                      ("key", security.tls_client_key)):
        path = folder / f"{name}.pem"
        path.touch(mode=0o600)
        path.write_text(pem)
        paths[name] = str(path)
    return paths


def _listening_ports(pids: list[int]) -> dict[int, str]:
    ports = {}
    for pid in pids:
        for c in psutil.Process(pid).net_connections("tcp"):
            if c.status == psutil.CONN_LISTEN:
                ports[c.laddr.port] = c.laddr.ip
    return ports


def _sigint_blocked(pid: int) -> bool:
    fields = dict(line.split(":\t", 1) for line in Path(f"/proc/{pid}/status").read_text().splitlines()
                  if ":\t" in line)
    return bool(int(fields["SigBlk"], 16) & (1 << (signal.SIGINT - 1)))


def test_a_run_through_the_local_tls_cluster_gives_the_same_bytes(reference, tmp_path):
    spec_path, expected = reference
    store = tmp_path / "tls.zarr"
    result = _sweep("run", str(spec_path), "--store", str(store), "--workers", "2")
    assert result.returncode == 0, result.stdout + result.stderr
    assert "Dask dashboard: http://127.0.0.1:" in result.stdout
    assert_identical(store, expected)


def test_only_the_sweep_s_own_client_can_submit_work(tmp_path):
    with local.connect(workers=1) as client:
        scheduler = client.scheduler.address
        assert scheduler.startswith("tls://127.0.0.1:"), scheduler
        info = client.scheduler_info(n_workers=-1)["workers"]
        assert all(a.startswith("tls://") and w["nanny"].startswith("tls://") for a, w in info.items()), info
        workers = client.run(os.getpid)
        ports = _listening_ports([os.getpid(), *workers.values()])
        credentials = _write_credentials(client.security, tmp_path)
        request = {"ports": sorted(ports), "scheduler": int(scheduler.rsplit(":", 1)[1]), "timeout": ATTEMPT_SECONDS,
                   "credentials": credentials}
        other = subprocess.run([sys.executable, "-c", OTHER_USER, json.dumps(request)], capture_output=True,
                               text=True, timeout=120)
        # Ctrl-C in a terminal reaches the workers too: they must not see it (sweep.execute.local)
        assert all(_sigint_blocked(pid) for pid in workers.values())
        assert not _sigint_blocked(os.getpid())
        dashboard = client.dashboard_link
    assert other.returncode == 0, other.stderr
    seen = {int(port): result for port, result in json.loads(other.stdout).items()}
    assert set(ports.values()) == {"127.0.0.1"}, ports  # nothing listens beyond this machine
    http = {port for port, result in seen.items() if result["http"]}
    # the dashboard and each worker's metrics page: plain HTTP that offers no way to submit work
    assert urlsplit(dashboard).port in http and len(http) == 1 + len(workers), (http, dashboard)
    assert not any(seen[port]["api"] for port in http)
    dask_ports = set(seen) - http
    # the scheduler, and each worker and its nanny: all of them ask for the run's certificate
    assert len(dask_ports) == 1 + 2 * len(workers), seen
    for port in dask_ports:
        for way, outcome in seen[port].items():
            if way == "http":
                continue
            if "run's certificate" in way:  # the control: the same attempt with the key gets through
                assert not outcome.startswith("refused"), (port, way, outcome)
            else:
                assert outcome.startswith("refused"), (port, way, outcome)
    assert seen[request["scheduler"]]["submit tls with the run's certificate"].startswith("ran code on workers")


@pytest.fixture
def tls_scheduler(tmp_path):
    """An existing scheduler that wants TLS, with its credentials in files a user would configure."""
    security = Security.temporary()
    credentials = _write_credentials(security, tmp_path)
    with LocalCluster(n_workers=2, threads_per_worker=1, processes=False, host="127.0.0.1", dashboard_address=":0",
                      security=security, silence_logs=logging.CRITICAL) as cluster:
        yield cluster.scheduler_address, credentials


def test_an_existing_tls_scheduler_with_credentials_from_dask_config(reference, tls_scheduler, tmp_path):
    spec_path, expected = reference
    address, credentials = tls_scheduler
    assert address.startswith("tls://")
    store = tmp_path / "existing.zarr"
    result = _sweep("run", str(spec_path), "--store", str(store), "--scheduler", address)
    assert result.returncode == 1, result.stdout + result.stderr  # no credentials configured: refused, said so
    assert "cannot connect to the Dask scheduler" in result.stderr and "DASK_DISTRIBUTED__COMM__TLS__CA_FILE" in (
        result.stderr.replace("\n", "")), result.stderr
    assert "Traceback" not in result.stderr
    config = {"DASK_DISTRIBUTED__COMM__TLS__CA_FILE": credentials["ca"],
              "DASK_DISTRIBUTED__COMM__TLS__CLIENT__CERT": credentials["cert"],
              "DASK_DISTRIBUTED__COMM__TLS__CLIENT__KEY": credentials["key"]}
    result = _sweep("run", str(spec_path), "--store", str(store), "--scheduler", address, env=config)
    assert result.returncode == 0, result.stdout + result.stderr
    assert_identical(store, expected)
