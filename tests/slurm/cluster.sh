#!/usr/bin/env bash
# Brings a real single-node SLURM cluster up or down on this machine, for the scale-out test.
# Everything lives under one state folder; daemons bind to 127.0.0.1 only. Needs root (slurmd
# starts jobs as the submitting user) and the Debian packages slurm-wlm and munge.
#
#   tests/slurm/cluster.sh up   DIR   writes DIR/slurm.conf, starts munged, slurmctld, slurmd
#   tests/slurm/cluster.sh down DIR   stops them
#
# Clients find the cluster through SLURM_CONF=DIR/slurm.conf.
set -euo pipefail

action="${1:?usage: cluster.sh up|down DIR}"
dir="${2:?usage: cluster.sh up|down DIR}"
mkdir -p "$dir"
dir="$(cd "$dir" && pwd)"

stop_pidfile() {
  local f="$1"
  if [[ -s "$f" ]]; then
    local pid
    pid="$(cat "$f")"
    kill "$pid" 2>/dev/null || true
    for _ in $(seq 50); do kill -0 "$pid" 2>/dev/null || break; sleep 0.1; done
    kill -9 "$pid" 2>/dev/null || true
    rm -f "$f"
  fi
}

case "$action" in
  up)
    mkdir -p "$dir/state" "$dir/spool" "$dir/munge" "$dir/log"
    cpus="$(nproc)"
    memory_mb=$(( $(awk '/MemTotal/ {print $2}' /proc/meminfo) / 1024 / 2 ))
    # Ports off the usual 6817/6818, so that a real cluster's daemons on the same host are untouched.
    cat > "$dir/slurm.conf" <<CONF
ClusterName=tabcard-ci
SlurmctldHost=localhost(127.0.0.1)
SlurmctldPort=16817
SlurmdPort=16818
SlurmUser=root
SlurmdUser=root
AuthType=auth/munge
AuthInfo=socket=$dir/munge/munge.socket
CredType=cred/munge
StateSaveLocation=$dir/state
SlurmdSpoolDir=$dir/spool
SlurmctldPidFile=$dir/slurmctld.pid
SlurmdPidFile=$dir/slurmd.pid
SlurmctldLogFile=$dir/log/slurmctld.log
SlurmdLogFile=$dir/log/slurmd.log
ProctrackType=proctrack/linuxproc
TaskPlugin=task/none
SelectType=select/cons_tres
SelectTypeParameters=CR_CPU
SchedulerType=sched/backfill
SchedulerParameters=batch_sched_delay=0
CommunicationParameters=NoCtldInAddrAny,NoInAddrAny
JobAcctGatherType=jobacct_gather/none
AccountingStorageType=accounting_storage/none
MpiDefault=none
ReturnToService=2
MaxArraySize=1001
NodeName=tabcard-node NodeHostname=$(hostname) NodeAddr=127.0.0.1 CPUs=$cpus RealMemory=$memory_mb State=UNKNOWN
PartitionName=ci Nodes=tabcard-node Default=YES MaxTime=INFINITE State=UP
CONF
    # munged wants its key readable by its user only; root runs it here with --force.
    munged --force --socket="$dir/munge/munge.socket" --pid-file="$dir/munge/munged.pid" \
      --log-file="$dir/log/munged.log" --seed-file="$dir/munge/munged.seed" --key-file=/etc/munge/munge.key
    export SLURM_CONF="$dir/slurm.conf"
    slurmctld -f "$dir/slurm.conf"
    slurmd -f "$dir/slurm.conf" -N tabcard-node
    for _ in $(seq 100); do
      if sinfo -h -o '%T' 2>/dev/null | grep -qx idle; then
        echo "slurm cluster up: SLURM_CONF=$dir/slurm.conf ($cpus CPUs)"
        exit 0
      fi
      sleep 0.2
    done
    echo "slurm cluster did not come up; logs in $dir/log:" >&2
    tail -n 20 "$dir"/log/*.log >&2 || true
    exit 1
    ;;
  down)
    stop_pidfile "$dir/slurmd.pid"
    stop_pidfile "$dir/slurmctld.pid"
    stop_pidfile "$dir/munge/munged.pid"
    echo "slurm cluster down"
    ;;
  *)
    echo "usage: cluster.sh up|down DIR" >&2
    exit 2
    ;;
esac
