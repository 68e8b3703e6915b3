#!/usr/bin/env bash
# Start a one-node SLURM cluster on this machine for the tests marked `slurm`.
#
# Installs Debian's slurm-wlm and munge (if missing), writes /etc/slurm/slurm.conf for one node (this
# machine's hostname, its CPUs and memory as `slurmd -C` reports them; SlurmUser root;
# proctrack/linuxproc; task/none), starts munged, slurmctld and slurmd, and waits until `sinfo` shows
# the node idle. Every SLURM daemon talks over loopback (the node and the controller are given the
# address 127.0.0.1). Safe to run again: daemons already running are left alone, a changed
# configuration is written and the daemons restarted.
#
# Usage (as root):  bash .ci/slurm-setup.sh        (env SLURM_SETUP_TIMEOUT=seconds, default 120)
set -euo pipefail

timeout_s="${SLURM_SETUP_TIMEOUT:-120}"
say() { echo "slurm-setup: $*" >&2; }

if [ "$(id -u)" -ne 0 ]; then
    say "must run as root (it installs packages and starts daemons)"
    exit 1
fi

# --- packages ---------------------------------------------------------------------------------
if ! command -v slurmctld >/dev/null || ! command -v slurmd >/dev/null || ! command -v munged >/dev/null; then
    say "installing slurm-wlm and munge"
    export DEBIAN_FRONTEND=noninteractive
    apt-get -o DPkg::Lock::Timeout=600 update -q >/dev/null
    apt-get -o DPkg::Lock::Timeout=600 install -y -q --no-install-recommends \
        slurm-wlm munge >/dev/null
fi

# --- munge ------------------------------------------------------------------------------------
install -d -o munge -g munge -m 0700 /etc/munge /var/lib/munge /var/log/munge
install -d -o munge -g munge -m 0755 /run/munge
if [ ! -s /etc/munge/munge.key ]; then
    if command -v mungekey >/dev/null; then
        mungekey --create --keyfile=/etc/munge/munge.key --force
    else
        dd if=/dev/urandom of=/etc/munge/munge.key bs=1024 count=1 status=none
    fi
fi
chown munge:munge /etc/munge/munge.key
chmod 0400 /etc/munge/munge.key
if ! munge -n </dev/null 2>/dev/null | unmunge >/dev/null 2>&1; then
    say "starting munged"
    rm -f /run/munge/munged.pid
    runuser -u munge -- /usr/sbin/munged
    for _ in $(seq 50); do
        munge -n </dev/null 2>/dev/null | unmunge >/dev/null 2>&1 && break
        sleep 0.2
    done
fi
munge -n </dev/null | unmunge >/dev/null || { say "munged does not answer"; exit 1; }

# --- slurm.conf -------------------------------------------------------------------------------
node="$(hostname -s)"
# `slurmd -C` prints this machine's CPUs, sockets, cores, threads and RealMemory [MiB].
hardware="$(slurmd -C | head -n 1 | sed -e 's/^NodeName=[^ ]* //' -e 's/ UpTime=.*//')"
install -d -m 0755 /etc/slurm /var/spool/slurmctld /var/spool/slurmd /var/log/slurm /run/slurm
conf_new="$(mktemp)"
cat >"$conf_new" <<EOF
# One-node SLURM cluster for sweep's tests (written by .ci/slurm-setup.sh; rewritten on every run).
ClusterName=sweeptest
SlurmctldHost=${node}(127.0.0.1)
SlurmUser=root
SlurmdUser=root
AuthType=auth/munge
CryptoType=crypto/munge
MpiDefault=none
ProctrackType=proctrack/linuxproc
TaskPlugin=task/none
JobAcctGatherType=jobacct_gather/none
AccountingStorageType=accounting_storage/none
SchedulerType=sched/backfill
SelectType=select/cons_tres
SelectTypeParameters=CR_Core
ReturnToService=2
StateSaveLocation=/var/spool/slurmctld
SlurmdSpoolDir=/var/spool/slurmd
SlurmctldPidFile=/run/slurm/slurmctld.pid
SlurmdPidFile=/run/slurm/slurmd.pid
SlurmctldLogFile=/var/log/slurm/slurmctld.log
SlurmdLogFile=/var/log/slurm/slurmd.log
SlurmctldTimeout=30
SlurmdTimeout=30
InactiveLimit=0
KillWait=5
MinJobAge=30
Waittime=0
NodeName=${node} NodeAddr=127.0.0.1 ${hardware} State=UNKNOWN
PartitionName=debug Nodes=${node} Default=YES MaxTime=INFINITE State=UP OverSubscribe=NO
EOF
changed=1
if [ -f /etc/slurm/slurm.conf ] && cmp -s "$conf_new" /etc/slurm/slurm.conf; then
    changed=0
fi
if [ "$changed" -eq 1 ]; then
    say "writing /etc/slurm/slurm.conf for node ${node}: ${hardware}"
    install -m 0644 "$conf_new" /etc/slurm/slurm.conf
fi
rm -f "$conf_new"

# --- daemons ----------------------------------------------------------------------------------
running() { [ -s "$1" ] && kill -0 "$(cat "$1")" 2>/dev/null; }
stop() {
    if running "$1"; then
        kill "$(cat "$1")"
        for _ in $(seq 50); do running "$1" || break; sleep 0.2; done
    fi
}
if [ "$changed" -eq 1 ]; then
    stop /run/slurm/slurmd.pid
    stop /run/slurm/slurmctld.pid
fi
if ! running /run/slurm/slurmctld.pid; then
    say "starting slurmctld"
    slurmctld
fi
if ! running /run/slurm/slurmd.pid; then
    say "starting slurmd"
    slurmd
fi

# --- wait until the node takes jobs -----------------------------------------------------------
deadline=$((SECONDS + timeout_s))
while :; do
    state="$(sinfo --noheader --nodes="$node" --format=%T 2>/dev/null | head -n 1 || true)"
    case "$state" in
        idle | mixed | allocated) break ;;
        down* | drain* | fail*) scontrol update NodeName="$node" State=RESUME >/dev/null 2>&1 || true ;;
    esac
    if [ "$SECONDS" -ge "$deadline" ]; then
        say "node ${node} is '${state:-unknown}' after ${timeout_s} s; see /var/log/slurm/"
        tail -n 20 /var/log/slurm/slurmctld.log /var/log/slurm/slurmd.log >&2 || true
        exit 1
    fi
    sleep 1
done
say "SLURM ready: node ${node} is ${state}"
sinfo >&2
