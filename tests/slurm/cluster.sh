#!/usr/bin/env bash
# A throw-away one-node Slurm cluster for the tests: munged, slurmctld and slurmd started by hand
# as plain daemons (no systemd, no cgroups). DIR (in the build directory) holds the configuration,
# the pid files and the logs; munge's key, socket and seed and Slurm's state and spool live in a
# private directory made under /tmp for each start (DIR/runtime names it) and removed by stop:
# munged refuses a socket below any directory that not everyone may search (a checkout in root's
# home, a build directory under a chmod 0700 directory), so they must not depend on where the
# build directory is. Recipe and measured costs (start under 1 s, stop about 4 s):
# docs/cluster-notes.md §3–4.
#
#   tests/slurm/cluster.sh start DIR   # prints "export SLURM_CONF=DIR/slurm.conf"; stops a cluster
#                                      # an interrupted run left in DIR first
#   tests/slurm/cluster.sh stop DIR    # cancels every job, stops the daemons; idempotent
#   tests/slurm/cluster.sh status DIR  # exit 0 if the node is up
#
# Needs root (the daemons run as root with SlurmUser=root) and Debian's slurmctld, slurmd,
# slurm-client and munge packages. Ports: FREEGAP_SLURM_CTLD_PORT (default 6817) and
# FREEGAP_SLURM_D_PORT (default 6818) on 127.0.0.1; the start refuses if they are taken, so it
# never disturbs a real Slurm on the same machine. The node advertises 8 CPUs on any machine
# (config_overrides), so 4-rank jobs and several one-CPU jobs fit at once on a 2-core VM.
set -euo pipefail

die() {
  echo "cluster.sh: $*" >&2
  exit 1
}

[ $# -eq 2 ] || die "usage: $0 start|stop|status DIR"
action="$1"
DIR="$2"
CTLD_PORT="${FREEGAP_SLURM_CTLD_PORT:-6817}"
D_PORT="${FREEGAP_SLURM_D_PORT:-6818}"

pid_of() {  # pid from a pid file, if that process is alive
  local f="$DIR/$1.pid" p
  [ -s "$f" ] || return 1
  p="$(cat "$f")"
  kill -0 "$p" 2>/dev/null || return 1
  echo "$p"
}

wait_gone() {  # wait_gone SECONDS PID...: 0 when every pid has exited
  local deadline=$((SECONDS + $1)) p alive
  shift
  while :; do
    alive=0
    for p in "$@"; do
      # A zombie (state Z) has exited; the sandbox's init reaps it (docs/cluster-notes.md §3.3).
      if kill -0 "$p" 2>/dev/null && [ "$(ps -o stat= -p "$p" 2>/dev/null | cut -c1)" != Z ]; then
        alive=1
      fi
    done
    [ "$alive" -eq 0 ] && return 0
    [ "$SECONDS" -ge "$deadline" ] && return 1
    sleep 0.1
  done
}

stop_cluster() {
  local p pids=()
  export SLURM_CONF="$DIR/slurm.conf"
  if pid_of slurmctld >/dev/null; then
    # Jobs first: a job's slurmstepd outlives slurmd (docs/cluster-notes.md §3.3).
    scancel --user="$(id -un)" 2>/dev/null || true
    local deadline=$((SECONDS + 30))
    while [ -n "$(squeue -h 2>/dev/null)" ] && [ "$SECONDS" -lt "$deadline" ]; do sleep 0.2; done
  fi
  for d in slurmd slurmctld; do
    if p="$(pid_of "$d")"; then
      kill "$p" 2>/dev/null || true
      pids+=("$p")
    fi
  done
  if [ "${#pids[@]}" -gt 0 ] && ! wait_gone 20 "${pids[@]}"; then
    die "a Slurm daemon did not stop (pids ${pids[*]}); logs in $DIR/log"
  fi
  if p="$(pid_of munged)"; then
    kill "$p" 2>/dev/null || true
    wait_gone 10 "$p" || die "munged did not stop (pid $p)"
  fi
  rm -f "$DIR"/slurmd.pid "$DIR"/slurmctld.pid "$DIR"/munged.pid
  remove_runtime
}

# The private directory of the last start, if it is one of ours (made by mktemp below).
runtime_dir() {
  local r
  [ -s "$DIR/runtime" ] || return 1
  r="$(cat "$DIR/runtime")"
  case "$r" in
    /tmp/freegap-slurm.*) [ -d "$r" ] && echo "$r" ;;
    *) return 1 ;;
  esac
}

remove_runtime() {
  local r
  if r="$(runtime_dir)"; then rm -rf "$r"; fi
  rm -f "$DIR/runtime"
}

port_taken() {
  # /proc/net/tcp lists listening sockets (state 0A) with the port in hex.
  local hex
  hex="$(printf '%04X' "$1")"
  awk -v h=":$hex" 'NR > 1 && $4 == "0A" && substr($2, length($2) - 4) == h { f = 1 } END { exit !f }' \
    /proc/net/tcp /proc/net/tcp6 2>/dev/null
}

start_cluster() {
  [ "$(id -u)" -eq 0 ] || die "needs root (the daemons run as root)"
  local tool
  for tool in munged mungekey slurmctld slurmd sbatch squeue sinfo scancel; do
    command -v "$tool" >/dev/null ||
      die "$tool is missing; install Debian's packages: apt-get install slurmctld slurmd slurm-client munge"
  done
  if pid_of slurmctld >/dev/null || pid_of slurmd >/dev/null || pid_of munged >/dev/null; then
    # Left over from an interrupted test run in the same directory: ours, so stop it first.
    echo "cluster.sh: stopping the cluster left running in $DIR" >&2
    stop_cluster
  fi
  for p in "$CTLD_PORT" "$D_PORT"; do
    port_taken "$p" && die "port $p is in use (another Slurm?); set FREEGAP_SLURM_CTLD_PORT and FREEGAP_SLURM_D_PORT"
  done
  remove_runtime 2>/dev/null || true
  rm -rf "$DIR"
  mkdir -p "$DIR"/log
  DIR="$(cd "$DIR" && pwd)"
  RUN="$(mktemp -d /tmp/freegap-slurm.XXXXXXXX)" || die "cannot make a directory under /tmp"
  chmod 0755 "$RUN"  # searchable by everyone, as munged requires of its socket's directories
  echo "$RUN" >"$DIR/runtime"
  mkdir -p "$RUN"/state "$RUN"/spool
  mungekey -c -k "$RUN/munge.key" >/dev/null 2>&1 || die "mungekey failed"
  chmod 600 "$RUN/munge.key"
  cat >"$DIR/slurm.conf" <<EOF
# Written by tests/slurm/cluster.sh: a one-node test cluster (docs/cluster-notes.md §3).
ClusterName=freegapci
SlurmctldHost=localhost
SlurmctldPort=$CTLD_PORT
SlurmdPort=$D_PORT
SlurmUser=root
SlurmdUser=root
AuthType=auth/munge
CredType=cred/munge
# cred_expire=30: a requeued job comes back after about 30-60 s instead of 150 s. It is also how
# long a launch credential stays valid: 10 s was too short on a loaded 2-core CI machine (a
# requeued job did not come back in 11 minutes).
AuthInfo=socket=$RUN/munge.sock,cred_expire=30
StateSaveLocation=$RUN/state
SlurmdSpoolDir=$RUN/spool
SlurmctldPidFile=$DIR/slurmctld.pid
SlurmdPidFile=$DIR/slurmd.pid
SlurmctldLogFile=$DIR/log/slurmctld.log
SlurmdLogFile=$DIR/log/slurmd.log
ProctrackType=proctrack/linuxproc
TaskPlugin=task/none
SelectType=select/cons_tres
SelectTypeParameters=CR_Core
JobAcctGatherType=jobacct_gather/none
AccountingStorageType=accounting_storage/none
JobCompType=jobcomp/none
MpiDefault=pmix
MailProg=/bin/true
ReturnToService=2
SlurmdParameters=config_overrides
KillWait=10
NodeName=localhost CPUs=8 RealMemory=4000 State=UNKNOWN
PartitionName=debug Nodes=localhost Default=YES MaxTime=INFINITE State=UP
EOF
  export SLURM_CONF="$DIR/slurm.conf"
  trap 'echo "cluster.sh: start failed; stopping what started" >&2; stop_cluster; exit 1' ERR
  munged -S "$RUN/munge.sock" --key-file "$RUN/munge.key" --pid-file "$DIR/munged.pid" \
    --log-file "$DIR/log/munged.log" --seed-file "$RUN/munged.seed"
  slurmctld
  slurmd -N localhost
  local deadline=$((SECONDS + 30))
  until [ "$(sinfo -h -n localhost -o %T 2>/dev/null)" = idle ]; do
    if [ "$SECONDS" -ge "$deadline" ]; then
      echo "cluster.sh: the node did not become idle in 30 s; last log lines:" >&2
      tail -n 20 "$DIR"/log/*.log >&2 || true
      false
    fi
    sleep 0.1
  done
  trap - ERR
  echo "export SLURM_CONF=$DIR/slurm.conf"
}

case "$action" in
  start) start_cluster ;;
  stop)
    [ -d "$DIR" ] || exit 0
    DIR="$(cd "$DIR" && pwd)"
    stop_cluster
    ;;
  status)
    export SLURM_CONF="$DIR/slurm.conf"
    [ "$(sinfo -h -n localhost -o %T 2>/dev/null)" = idle ] || [ -n "$(pid_of slurmd || true)" ]
    ;;
  *) die "unknown action '$action'; use start, stop or status" ;;
esac
