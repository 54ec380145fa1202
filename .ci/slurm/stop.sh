#!/bin/bash
# Stop the daemons started by start.sh, by the PIDs it recorded.
# Usage: .ci/slurm/stop.sh [STATE_DIR]
set -u
STATE=${1:-/tmp/gb-slurm}
[ -f "$STATE/pids" ] || { echo "stop.sh: no $STATE/pids" >&2; exit 0; }
# Reverse start order: slurmd, slurmctld, munged.
tac "$STATE/pids" | while read -r name pid; do
    if kill -0 "$pid" 2>/dev/null; then
        kill "$pid"
        for _ in $(seq 50); do kill -0 "$pid" 2>/dev/null || break; sleep 0.1; done
        kill -0 "$pid" 2>/dev/null && kill -9 "$pid"
        echo "stopped $name ($pid)"
    fi
done
rm -f "$STATE/pids"
