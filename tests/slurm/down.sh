#!/bin/bash
# Stop the daemons up.sh started in DIR, by the PIDs they wrote there (nothing else).
# Usage: down.sh DIR
W=${1:?dir}
for f in "$W/slurmd.pid" "$W/slurmctld.pid" "$W/munge-run/munged.pid"; do
  [ -s "$f" ] || continue
  pid=$(cat "$f"); kill "$pid" 2>/dev/null || continue
  for _ in $(seq 1 50); do kill -0 "$pid" 2>/dev/null || break; sleep 0.2; done
  kill -0 "$pid" 2>/dev/null && kill -9 "$pid"
done
true
