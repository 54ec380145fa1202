#!/bin/bash
# End-to-end on a real one-node Slurm, through the real binary:
#   demo bundle → glitchbook plan (SHARDS shards) → sbatch --wait run-array.sh
#   → glitchbook plan status → glitchbook merge → one-go glitchbook scan of the
#   same bundle → glitchbook compare-catalogues (same trigger count per
#   channel, peaks within one tile, same analysed time) → timings.
# Starts the daemons (start.sh) and stops them by PID on exit (stop.sh).
# Usage (as root, from anywhere):
#   .ci/slurm/e2e.sh [GLITCHBOOK_BINARY]
# Without an argument (or $GLITCHBOOK_BIN) it runs `cargo build --release` once.
# Knobs: GB_E2E_HOURS (demo length, default 0.25), GB_E2E_SHARDS (default 6),
#        GB_SLURM_STATE (daemon state dir, default /tmp/gb-slurm-e2e).
set -euo pipefail
HERE=$(cd "$(dirname "$0")" && pwd)
ROOT=$(cd "$HERE/../.." && pwd)
STATE=${GB_SLURM_STATE:-/tmp/gb-slurm-e2e}
HOURS=${GB_E2E_HOURS:-0.25}
SHARDS=${GB_E2E_SHARDS:-6}
WORK=$(mktemp -d /tmp/gb-e2e.XXXXXX)
now() { date +%s.%N; }
secs() { awk "BEGIN{printf \"%.1f\", $2 - $1}"; }

# ---- 0. the binary (built once, outside the jobs) --------------------------
BIN=${1:-${GLITCHBOOK_BIN:-}}
if [ -z "$BIN" ]; then
    (cd "$ROOT" && cargo build --release --bin glitchbook)
    BIN="$ROOT/target/release/glitchbook"
fi
BIN=$(readlink -f "$BIN")
[ -x "$BIN" ] || { echo "e2e.sh: no executable at $BIN" >&2; exit 1; }
T_START=$(now)

"$HERE/start.sh" "$STATE"
trap '"$HERE/stop.sh" "$STATE"' EXIT
# shellcheck disable=SC1091
source "$STATE/env"

# ---- 1. demo bundle and plan -----------------------------------------------
DEMO="$WORK/demo"
PLAN="$WORK/plan"
"$BIN" demo-data --out "$DEMO" --hours "$HOURS" --seed 7
"$BIN" plan "$DEMO" --out "$PLAN" --shards "$SHARDS" --segments "$DEMO/segments.txt" \
    --cpus 1 --mem-mb 500 --time-limit 00:10:00 --exe "$BIN"
N=$(grep -c '"index"' "$PLAN/plan.json")
grep '^#SBATCH' "$PLAN/run-array.sh"

# ---- 2. the job array (each task: glitchbook scan --shard K --plan DIR) ----
T_SUB=$(now)
sbatch --wait "$PLAN/run-array.sh"
T_DONE=$(now)
"$BIN" plan status "$PLAN"
# sbatch --wait polls the controller (seconds apart), so also time the array
# by the last shard catalogue written.
T_LAST=$(stat -c %.9Y "$PLAN"/shards/shard-*.db | sort -n | tail -1)

# ---- 3. merge, one-go scan, compare ----------------------------------------
T_M=$(now)
"$BIN" merge "$PLAN" --into "$WORK/merged.db"
T_M2=$(now)
"$BIN" merge "$PLAN" --into "$WORK/merged.db" | grep -q "merged 0 shards" \
    || { echo "e2e.sh: second merge was not a no-op" >&2; exit 1; }
T_ONE=$(now)
"$BIN" --db "$WORK/one.db" scan "$DEMO" --segments "$DEMO/segments.txt"
T_ONE2=$(now)
"$BIN" compare-catalogues "$WORK/one.db" "$WORK/merged.db"

ARRAY_S=$(secs "$T_SUB" "$T_DONE")
LAST_S=$(secs "$T_SUB" "$T_LAST")
echo "e2e: $N shards on Slurm: sbatch --wait returned after $ARRAY_S s, last shard written $LAST_S s after" \
     "submission ($(awk "BEGIN{printf \"%.1f\", $N * 60 / $LAST_S}") shards/min);" \
     "merge $(secs "$T_M" "$T_M2") s; one-go scan $(secs "$T_ONE" "$T_ONE2") s;" \
     "whole e2e after the build $(secs "$T_START" "$(now)") s"
echo "e2e: OK (work dir $WORK)"
