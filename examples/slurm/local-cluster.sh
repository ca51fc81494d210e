#!/usr/bin/env bash
# A one-node Slurm cluster on this machine, for trying the batch scripts of
# this folder and for nightjar's integration tests. Run as root:
#
#   bash examples/slurm/local-cluster.sh start   # installs (Debian) and starts it
#   bash examples/slurm/local-cluster.sh status  # sinfo
#   bash examples/slurm/local-cluster.sh stop    # stops the daemons
#
# It installs the Debian packages slurm-wlm and munge if they are missing,
# writes a small slurm.conf (one node: this host, all its cores;
# proctrack/linuxproc and task/none, so no cgroups are needed; state under
# $NIGHTJAR_SLURM_STATE, default /tmp/nightjar-slurm) and starts munged,
# slurmctld and slurmd. Finished jobs are kept for an hour so a test can
# read their state and restart count with scontrol.
set -euo pipefail

state=${NIGHTJAR_SLURM_STATE:-/tmp/nightjar-slurm}
conf=/etc/slurm/slurm.conf

install() {
  if command -v slurmctld >/dev/null && command -v slurmd >/dev/null && command -v munged >/dev/null; then
    return
  fi
  if [ "$(id -u)" != 0 ]; then
    echo "local-cluster.sh: installing slurm-wlm and munge needs root" >&2; exit 1
  fi
  export DEBIAN_FRONTEND=noninteractive
  apt-get update -qq
  apt-get install -y -qq slurm-wlm munge >/dev/null
}

configure() {
  local host cpus mem
  host=$(hostname -s)
  cpus=$(nproc)
  mem=$(( $(awk '/MemTotal/ {print $2}' /proc/meminfo) / 1024 - 512 ))
  mkdir -p "$state/ctld" "$state/d" "$state/log" /etc/slurm
  cat > "$conf" <<CONF
# Written by nightjar's examples/slurm/local-cluster.sh: a one-node cluster.
ClusterName=nightjar-local
SlurmctldHost=$host
SlurmUser=root
SlurmdUser=root
AuthType=auth/munge
ProctrackType=proctrack/linuxproc
TaskPlugin=task/none
SchedulerType=sched/backfill
SelectType=select/cons_tres
SelectTypeParameters=CR_Core
ReturnToService=2
StateSaveLocation=$state/ctld
SlurmdSpoolDir=$state/d
SlurmctldPidFile=$state/slurmctld.pid
SlurmdPidFile=$state/slurmd.pid
SlurmctldLogFile=$state/log/slurmctld.log
SlurmdLogFile=$state/log/slurmd.log
JobCompType=jobcomp/none
AccountingStorageType=accounting_storage/none
MinJobAge=3600
KillWait=60
JobRequeue=1
MpiDefault=none
NodeName=$host CPUs=$cpus RealMemory=$mem State=UNKNOWN
PartitionName=local Nodes=$host Default=YES MaxTime=INFINITE State=UP OverSubscribe=YES
CONF
  # An empty cgroup.conf keeps slurmd from looking for cgroup settings.
  [ -f /etc/slurm/cgroup.conf ] || echo "CgroupPlugin=autodetect" > /etc/slurm/cgroup.conf
}

start() {
  install
  configure
  mkdir -p /run/munge /var/log/munge /var/lib/munge
  if [ ! -s /etc/munge/munge.key ]; then
    dd if=/dev/urandom of=/etc/munge/munge.key bs=1024 count=1 status=none
  fi
  chown -R munge:munge /etc/munge /run/munge /var/log/munge /var/lib/munge 2>/dev/null || true
  chmod 0400 /etc/munge/munge.key
  if ! pgrep -x munged >/dev/null; then
    runuser -u munge -- /usr/sbin/munged || /usr/sbin/munged --force
  fi
  pgrep -x slurmctld >/dev/null || slurmctld
  pgrep -x slurmd >/dev/null || slurmd
  for _ in $(seq 1 60); do
    if sinfo -h -o %t 2>/dev/null | grep -Eq '^(idle|mix|alloc)'; then
      echo "local-cluster.sh: Slurm is up ($(sinfo -h -o '%P %D %t %c'))"
      return
    fi
    scontrol update nodename="$(hostname -s)" state=resume >/dev/null 2>&1 || true
    sleep 1
  done
  echo "local-cluster.sh: Slurm did not come up; logs in $state/log" >&2
  tail -n 20 "$state"/log/*.log >&2 || true
  exit 1
}

stop() {
  pkill -x slurmd 2>/dev/null || true
  pkill -x slurmctld 2>/dev/null || true
  pkill -x munged 2>/dev/null || true
  echo "local-cluster.sh: stopped"
}

case "${1:-}" in
  start) start ;;
  stop) stop ;;
  status) sinfo ;;
  *) echo "usage: $0 start|stop|status" >&2; exit 2 ;;
esac
