#!/usr/bin/env bash
# End the private Slurm started by start.sh DIR: slurmctld and slurmd (scontrol shutdown), then
# munged. Safe to call on a half-started folder; every wait is bounded.
set -uo pipefail

dir=${1:?usage: stop.sh DIR}
conf=$dir/slurm.conf

alive() { [ -f "$1" ] && kill -0 "$(cat "$1")" 2>/dev/null; }

if [ -f "$conf" ]; then
  SLURM_CONF=$conf timeout 20 scontrol shutdown >/dev/null 2>&1 || true
fi
for _ in $(seq 1 40); do
  alive "$dir/slurmctld.pid" || alive "$dir/slurmd.pid" || break
  sleep 0.25
done
# Still there after 10 s: end them by their own pid files.
for f in "$dir/slurmctld.pid" "$dir/slurmd.pid"; do
  if alive "$f"; then kill "$(cat "$f")" 2>/dev/null || true; fi
done
if [ -S "$dir/munge/munge.socket" ]; then
  timeout 20 munged --stop --socket="$dir/munge/munge.socket" >/dev/null 2>&1 || true
fi
if alive "$dir/munge/munged.pid"; then kill "$(cat "$dir/munge/munged.pid")" 2>/dev/null || true; fi
exit 0
