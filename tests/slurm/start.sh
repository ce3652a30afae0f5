#!/usr/bin/env bash
# Start a private single-node Slurm (munged, slurmctld, slurmd) on localhost, all state inside
# the folder given as $1, with no systemd and nothing written outside that folder.
#
#   tests/slurm/start.sh DIR      # prints "SLURM_CONF=DIR/slurm.conf" when the node is idle
#   tests/slurm/stop.sh DIR       # ends all three daemons
#
# Needs root (slurmd starts jobs as the submitting user) and the Debian packages slurmctld,
# slurmd, slurm-client and munge. Ports are chosen free at start. Every wait is bounded.
# Settings measured on Debian 12 (slurm 22.05): see DEVELOPERS.md, "Running on a cluster".
set -euo pipefail

dir=${1:?usage: start.sh DIR}
mkdir -p "$dir"
dir=$(cd "$dir" && pwd)

for cmd in munged slurmctld slurmd scontrol sinfo; do
  command -v "$cmd" >/dev/null 2>&1 || { echo "start.sh: $cmd not found" >&2; exit 3; }
done
[ "$(id -u)" = 0 ] || { echo "start.sh: must run as root (slurmd)" >&2; exit 3; }

# The munge user must traverse every folder on the way to its key and socket (mktemp -d makes
# 0700 folders: this one is opened to 0711; its parents must already be traversable).
chmod 0711 "$dir"
runuser -u munge -- test -x "$dir" || {
  echo "start.sh: the munge user cannot reach $dir; use a folder under /tmp" >&2
  exit 3
}
mkdir -p "$dir/munge" "$dir/state" "$dir/spool"
chmod 0711 "$dir/munge"
chown munge:munge "$dir/munge"

# A fresh munge key, 0400, owned by munge.
key=$dir/munge/munge.key
head -c 1024 /dev/urandom >"$key"
chown munge:munge "$key"
chmod 0400 "$key"
sock=$dir/munge/munge.socket
runuser -u munge -- munged --socket="$sock" --key-file="$key" \
  --pid-file="$dir/munge/munged.pid" --log-file="$dir/munge/munged.log" \
  --seed-file="$dir/munge/munged.seed" --force

# Two free TCP ports for slurmctld and slurmd.
free_port() {
  local port
  for _ in $(seq 1 200); do
    port=$((20000 + RANDOM % 20000))
    if ! (exec 3<>"/dev/tcp/127.0.0.1/$port") 2>/dev/null; then
      echo "$port"
      return 0
    fi
  done
  return 1
}
ctld_port=$(free_port)
d_port=$(free_port)
while [ "$d_port" = "$ctld_port" ]; do d_port=$(free_port); done

cpus=$(nproc)
conf=$dir/slurm.conf
cat >"$conf" <<EOF
ClusterName=hardmaxtest
SlurmctldHost=localhost(127.0.0.1)
SlurmctldPort=$ctld_port
SlurmdPort=$d_port
SlurmUser=root
AuthType=auth/munge
AuthInfo=socket=$sock
CredType=cred/munge
CommunicationParameters=NoInAddrAny,NoCtldInAddrAny
ProctrackType=proctrack/linuxproc
TaskPlugin=task/none
SelectType=select/cons_tres
SelectTypeParameters=CR_CPU
MpiDefault=none
SwitchType=switch/none
JobCompType=jobcomp/none
JobAcctGatherType=jobacct_gather/none
AccountingStorageType=accounting_storage/none
ReturnToService=2
StateSaveLocation=$dir/state
SlurmdSpoolDir=$dir/spool
SlurmctldPidFile=$dir/slurmctld.pid
SlurmdPidFile=$dir/slurmd.pid
SlurmctldLogFile=$dir/slurmctld.log
SlurmdLogFile=$dir/slurmd.log
NodeName=localhost NodeAddr=127.0.0.1 CPUs=$cpus State=UNKNOWN
PartitionName=hardmaxtest Nodes=localhost Default=YES MaxTime=INFINITE State=UP
EOF
export SLURM_CONF=$conf

slurmctld -f "$conf"
slurmd -f "$conf" -N localhost

# Wait (at most 60 s) for the node to be idle.
for _ in $(seq 1 120); do
  state=$(sinfo -h -N -o '%T' 2>/dev/null | head -n1 || true)
  if [ "$state" = idle ]; then
    echo "SLURM_CONF=$conf"
    exit 0
  fi
  sleep 0.5
done
echo "start.sh: node not idle after 60 s (state: ${state:-none}); logs in $dir" >&2
exit 4
