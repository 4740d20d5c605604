#!/usr/bin/env bash
# Starts or stops a single-node Slurm (slurmctld + slurmd) whose state,
# spool, pid and log files all live under DIR, on loopback only, with no
# authentication daemon (auth/none). For the cluster test only.
# Ports: SLURM_TEST_PORT (slurmctld) and SLURM_TEST_PORT+1 (slurmd), default 16817.
#   single-node.sh start DIR   → writes DIR/slurm.conf, starts the daemons,
#                                waits until the node is idle
#   single-node.sh stop DIR    → stops them by their pid files
set -euo pipefail
cmd=$1
dir=$(cd "$2" && pwd)
host=$(hostname -s)
conf=$dir/slurm.conf
port=${SLURM_TEST_PORT:-16817}
mem_mb=$(( $(awk '/MemTotal/ {print $2}' /proc/meminfo) / 1024 - 512 ))
case "$cmd" in
start)
  mkdir -p "$dir/state" "$dir/spool" "$dir/log"
  cat > "$conf" <<CONF
ClusterName=fringeflow-test
SlurmctldHost=$host(127.0.0.1)
SlurmctldPort=$port
SlurmdPort=$((port + 1))
AuthType=auth/none
CredType=cred/none
SlurmUser=root
SlurmdUser=root
StateSaveLocation=$dir/state
SlurmdSpoolDir=$dir/spool
SlurmctldPidFile=$dir/slurmctld.pid
SlurmdPidFile=$dir/slurmd.pid
SlurmctldLogFile=$dir/log/slurmctld.log
SlurmdLogFile=$dir/log/slurmd.log
ProctrackType=proctrack/linuxproc
TaskPlugin=task/none
SelectType=select/cons_tres
SelectTypeParameters=CR_Core
SchedulerType=sched/backfill
AccountingStorageType=accounting_storage/none
JobCompType=jobcomp/none
JobAcctGatherType=jobacct_gather/none
MailProg=/bin/true
ReturnToService=2
MpiDefault=none
NodeName=$host NodeAddr=127.0.0.1 CPUs=$(nproc) RealMemory=$mem_mb State=UNKNOWN
PartitionName=test Nodes=$host Default=YES MaxTime=INFINITE State=UP
CONF
  slurmctld -f "$conf"
  slurmd -f "$conf"
  for _ in $(seq 1 100); do
    if SLURM_CONF=$conf sinfo -h -o %T 2>/dev/null | grep -q idle; then
      echo "slurm: node $host idle"
      exit 0
    fi
    sleep 0.2
  done
  echo "slurm: node did not become idle; slurmctld log:" >&2
  tail -n 20 "$dir/log/slurmctld.log" >&2 || true
  tail -n 20 "$dir/log/slurmd.log" >&2 || true
  exit 1
  ;;
stop)
  for d in slurmd slurmctld; do
    if [ -f "$dir/$d.pid" ]; then
      kill "$(cat "$dir/$d.pid")" 2>/dev/null || true
    fi
  done
  sleep 0.5
  ;;
*)
  echo "usage: single-node.sh start|stop DIR" >&2
  exit 2
  ;;
esac
