#!/usr/bin/env bash
# Install and start a real single-node Slurm (munge + slurmctld + slurmd) for the tests marked `slurm`.
#
# Idempotent: when a controller already answers and the node is usable, it does nothing. Needs root and
# apt-get (Debian/Ubuntu packages); without them it prints why and exits 0, and the slurm tests then skip
# with a reason (tests/slurm/conftest.py). The configuration follows the tested recipe in the project's
# notes: no systemd, no cgroups, no accounting database, 127.0.0.1 addresses so an unresolvable hostname
# does not matter, and CPUs=8 on any box so several array elements run at once (oversubscribed; tests only).
#
# Usage: bash tests/slurm/start_cluster.sh        (logs in /var/log/slurm/, config in /etc/slurm/slurm.conf)
set -euo pipefail

say() { echo "start_cluster: $*"; }

node_ready() {
    # the controller answers and our node takes jobs (idle, mixed or allocated; not down/drained/unknown)
    scontrol ping 2>/dev/null | grep -q 'is UP' || return 1
    local state
    state=$(sinfo -h -n "$HOST" -o %T 2>/dev/null | head -n1)
    [[ "$state" == idle* || "$state" == mix* || "$state" == alloc* || "$state" == completing* ]]
}

HOST=$(hostname -s)

if command -v scontrol >/dev/null 2>&1 && node_ready; then
    say "Slurm already up (node $HOST: $(sinfo -h -n "$HOST" -o %T)); nothing to do"
    exit 0
fi
if [[ $(id -u) -ne 0 ]]; then
    say "not root: cannot install or start Slurm; the slurm tests will be skipped"
    exit 0
fi
if ! command -v apt-get >/dev/null 2>&1; then
    say "apt-get not found: cannot install Slurm here; the slurm tests will be skipped"
    exit 0
fi

# ---- install (about 13 MB, 8 packages) ----------------------------------------------------------------
if ! command -v slurmctld >/dev/null 2>&1 || ! command -v slurmd >/dev/null 2>&1 \
        || ! command -v munged >/dev/null 2>&1 || ! command -v sbatch >/dev/null 2>&1; then
    # the packages' postinst scripts start the daemons through invoke-rc.d; forbid that during the install
    # (we start them ourselves below, in the foreground mode whose pid we know), unless a policy already exists
    added_policy=0
    if [[ ! -e /usr/sbin/policy-rc.d ]]; then
        printf '#!/bin/sh\nexit 101\n' > /usr/sbin/policy-rc.d
        chmod 755 /usr/sbin/policy-rc.d
        added_policy=1
    fi
    trap 'if [[ $added_policy -eq 1 ]]; then rm -f /usr/sbin/policy-rc.d; fi' EXIT
    say "installing slurmctld slurmd slurm-client munge"
    export DEBIAN_FRONTEND=noninteractive
    apt-get update -qq
    apt-get install -y -qq --no-install-recommends slurmctld slurmd slurm-client munge >/dev/null
    if [[ $added_policy -eq 1 ]]; then rm -f /usr/sbin/policy-rc.d; added_policy=0; fi
fi

# ---- configuration ----------------------------------------------------------------------------------
mem_mb=$(awk '/^MemTotal:/ {print int($2 / 1024 * 0.9)}' /proc/meminfo)
mkdir -p /etc/slurm /var/spool/slurmctld /var/spool/slurmd /var/log/slurm
cat > /etc/slurm/slurm.conf <<CONF
# written by tests/slurm/start_cluster.sh: single-node test cluster
ClusterName=sweeptest
SlurmctldHost=${HOST}(127.0.0.1)
SlurmUser=root
SlurmdUser=root
AuthType=auth/munge
CredType=cred/munge
MpiDefault=none
SwitchType=switch/none
ProctrackType=proctrack/linuxproc
TaskPlugin=task/none
JobAcctGatherType=jobacct_gather/none
AccountingStorageType=accounting_storage/none
JobCompType=jobcomp/filetxt
JobCompLoc=/var/log/slurm/jobcomp.log
SchedulerType=sched/backfill
SchedulerParameters=batch_sched_delay=0
SelectType=select/cons_tres
SelectTypeParameters=CR_Core
SlurmdParameters=config_overrides
ReturnToService=2
MailProg=/bin/true
KillWait=5
MinJobAge=300
InactiveLimit=0
StateSaveLocation=/var/spool/slurmctld
SlurmdSpoolDir=/var/spool/slurmd
SlurmctldPidFile=/run/slurmctld.pid
SlurmdPidFile=/run/slurmd.pid
SlurmctldLogFile=/var/log/slurm/slurmctld.log
SlurmdLogFile=/var/log/slurm/slurmd.log
NodeName=${HOST} NodeAddr=127.0.0.1 CPUs=8 Sockets=1 CoresPerSocket=8 ThreadsPerCore=1 RealMemory=${mem_mb} State=UNKNOWN
PartitionName=debug Nodes=ALL Default=YES MaxTime=INFINITE State=UP
CONF

alive() { [[ -n "${1:-}" ]] && kill -0 "$1" 2>/dev/null; }
pidof_file() { [[ -f "$1" ]] && cat "$1" || true; }

wait_for() {  # wait_for SECONDS DESCRIPTION COMMAND...
    local limit=$1 what=$2; shift 2
    local i
    for ((i = 0; i < limit * 10; i++)); do
        if "$@" >/dev/null 2>&1; then return 0; fi
        sleep 0.1
    done
    say "timed out after ${limit}s waiting for $what (logs in /var/log/slurm/)"
    return 1
}

munge_ok() { munge -n | unmunge; }

# ---- munged -----------------------------------------------------------------------------------------
if ! munge_ok >/dev/null 2>&1; then
    mkdir -p /run/munge
    chown munge:munge /run/munge
    chmod 755 /run/munge
    # run as munge (it owns the key); setpriv execs, so the daemon keeps this pid
    setsid setpriv --reuid=munge --regid=munge --init-groups /usr/sbin/munged -F \
        >>/var/log/slurm/munged.out 2>&1 < /dev/null &
    wait_for 10 "munged" munge_ok
fi

# ---- slurmctld --------------------------------------------------------------------------------------
ctld_up() { scontrol ping | grep -q 'is UP'; }
if ! ctld_up >/dev/null 2>&1; then
    if ! alive "$(pidof_file /run/slurmctld.pid)"; then
        setsid /usr/sbin/slurmctld -D -i >>/var/log/slurm/slurmctld.out 2>&1 < /dev/null &
    fi
    wait_for 20 "slurmctld" ctld_up
else
    scontrol reconfigure >/dev/null 2>&1 || true
fi

# ---- slurmd -----------------------------------------------------------------------------------------
if ! alive "$(pidof_file /run/slurmd.pid)"; then
    setsid /usr/sbin/slurmd -D >>/var/log/slurm/slurmd.out 2>&1 < /dev/null &
fi
if ! wait_for 20 "node $HOST to become idle" node_ready; then
    # a node left down/drained by an earlier run: put it back in service once
    scontrol update NodeName="$HOST" State=RESUME >/dev/null 2>&1 || true
    wait_for 20 "node $HOST to become idle" node_ready
fi
say "Slurm up: $(scontrol ping | head -n1); node $HOST $(sinfo -h -n "$HOST" -o '%T cpus=%c mem=%m')"
