#!/usr/bin/env bash
# A one-node Slurm cluster on this machine, for the tests that submit rowdeck's stages as real
# array jobs (test/cluster.slurm.test.ts). Needs root and Debian's packages:
#   apt-get install -y slurm-wlm munge
#
#   sudo scripts/slurm-local.sh start    # writes /etc/slurm/slurm.conf, starts munged, slurmctld, slurmd
#   sudo scripts/slurm-local.sh stop     # stops them (by their pid files)
#   scripts/slurm-local.sh status        # sinfo
#
# The node is this host, with its cores and memory; state, spool and logs go to
# /var/lib/rowdeck-slurm. No systemd is needed: the daemons detach themselves.
set -euo pipefail
base=/var/lib/rowdeck-slurm
host=$(hostname -s)

start() {
  if [ "$(id -u)" != 0 ]; then echo "slurm-local.sh start: run as root" >&2; exit 1; fi
  for cmd in munged slurmctld slurmd sbatch mungekey; do
    command -v "$cmd" >/dev/null || { echo "slurm-local.sh: $cmd not found; install with: apt-get install -y slurm-wlm munge" >&2; exit 1; }
  done
  mkdir -p "$base"/{state,spool,log,run} /etc/slurm /run/munge /var/log/munge /var/lib/munge
  # munge: a key owned by the munge user, read only by it; the daemon runs as that user.
  if [ ! -s /etc/munge/munge.key ]; then mungekey -c -f; fi
  chown munge:munge /etc/munge/munge.key /run/munge /var/log/munge /var/lib/munge
  chmod 400 /etc/munge/munge.key
  chmod 755 /run/munge
  if ! pgrep -x munged >/dev/null; then su -s /bin/sh munge -c munged; fi
  local cpus mem
  cpus=$(nproc)
  mem=$(( $(awk '/MemTotal/ {print $2}' /proc/meminfo) / 1024 - 1024 ))
  cat > /etc/slurm/slurm.conf <<EOF
ClusterName=rowdeck-local
SlurmctldHost=$host
AuthType=auth/munge
CredType=cred/munge
SlurmUser=root
SlurmdUser=root
ProctrackType=proctrack/linuxproc
TaskPlugin=task/none
SelectType=select/cons_tres
SelectTypeParameters=CR_Core
ReturnToService=2
MpiDefault=none
StateSaveLocation=$base/state
SlurmdSpoolDir=$base/spool
SlurmctldPidFile=$base/run/slurmctld.pid
SlurmdPidFile=$base/run/slurmd.pid
SlurmctldLogFile=$base/log/slurmctld.log
SlurmdLogFile=$base/log/slurmd.log
JobCompType=jobcomp/none
JobAcctGatherType=jobacct_gather/none
MailProg=/bin/true
AccountingStorageType=accounting_storage/none
SchedulerType=sched/backfill
MaxArraySize=100001
NodeName=$host CPUs=$cpus RealMemory=$mem State=UNKNOWN
PartitionName=local Nodes=$host Default=YES MaxTime=INFINITE State=UP
EOF
  [ -f "$base/run/slurmctld.pid" ] && kill -0 "$(cat "$base/run/slurmctld.pid")" 2>/dev/null || slurmctld
  [ -f "$base/run/slurmd.pid" ] && kill -0 "$(cat "$base/run/slurmd.pid")" 2>/dev/null || slurmd
  # Wait for the node to come up idle.
  for _ in $(seq 1 60); do
    if timeout 5 sinfo -h -o '%t' 2>/dev/null | grep -qE '^(idle|mix|alloc)'; then sinfo; return 0; fi
    if ! pgrep -x slurmctld >/dev/null || ! pgrep -x slurmd >/dev/null; then break; fi
    sleep 0.5
  done
  echo "slurm-local.sh: the node did not come up; the logs say:" >&2
  tail -n 5 "$base"/log/*.log >&2 || true
  exit 1
}

stop() {
  for d in slurmd slurmctld; do
    if [ -f "$base/run/$d.pid" ]; then kill "$(cat "$base/run/$d.pid")" 2>/dev/null || true; fi
  done
  pkill -x munged 2>/dev/null || true
}

case "${1:-}" in
  start) start ;;
  stop) stop ;;
  status) sinfo ;;
  *) echo "usage: $0 start|stop|status" >&2; exit 2 ;;
esac
