#!/usr/bin/env bash
# slurm-scan.sh — run a cavern parameter scan as a SLURM job array, then merge the shards.
#
#   scripts/slurm-scan.sh CONFIG.toml OUT.h5 TASKS [extra sbatch options...]
#
# Submits an array of TASKS tasks; task K runs `cavern scan CONFIG -o OUT`, which takes its shard
# K/TASKS from SLURM_ARRAY_TASK_ID/_COUNT and appends every finished point to its own journal
# OUT.shard-K-of-TASKS.journal. A second job, started when every task has ended (afterany), runs
# `cavern merge` and writes OUT, identical to a single-machine `cavern scan CONFIG -o OUT`.
# OUT's directory must be on a file system that all nodes share.
#
# Resuming: a task stopped by its wall-time limit (or a node failure) keeps its finished points;
# submit the same command again and every task continues where it stopped. The merge reports
# missing points (and their shards) instead of writing an incomplete file.
#
# Environment: CAVERN = the cavern binary (default: `cavern` from PATH); CPUS = cores per task
# (default 1; cavern splits them between points and threads); WAIT=1 makes this script wait for
# the merge and exit with its status (used by the CI test).
set -euo pipefail

if (( $# < 3 )); then
  sed -n '2,20p' "$0" | sed 's/^# \{0,1\}//' >&2
  exit 2
fi
config=$(realpath "$1"); out=$(realpath -m "$2"); tasks=$3; shift 3
cavern=$(command -v "${CAVERN:-cavern}") || { echo "slurm-scan: cavern binary not found (set CAVERN)" >&2; exit 2; }
cpus=${CPUS:-1}
[[ $tasks =~ ^[1-9][0-9]*$ ]] || { echo "slurm-scan: TASKS must be a positive integer" >&2; exit 2; }
logs="$out.slurm-logs"
mkdir -p "$logs"

# A task that finished with failed points exits 1 (the points are in its journal); the merge
# runs after every task whatever its state (afterany) and reports the failed points again.
array=$(sbatch --parsable --array="0-$((tasks - 1))" --cpus-per-task="$cpus" \
  --job-name=cavern-scan --output="$logs/task-%A_%a.out" "$@" \
  --wrap="\"$cavern\" scan \"$config\" -o \"$out\"")
echo "slurm-scan: array job $array ($tasks tasks)"

wait_opt=()
[[ ${WAIT:-0} == 1 ]] && wait_opt=(--wait)
merge_cmd="\"$cavern\" merge -o \"$out\" \"$out\".shard-*-of-$tasks.journal"
(( tasks == 1 )) && merge_cmd="true"   # a single task writes OUT itself
set +e
merge=$(sbatch --parsable "${wait_opt[@]}" --dependency="afterany:$array" --job-name=cavern-merge \
  --output="$logs/merge-%j.out" "$@" --wrap="$merge_cmd")
rc=$?
set -e
echo "slurm-scan: merge job $merge (after the array); log in $logs"
exit $rc
