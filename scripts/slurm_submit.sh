#!/usr/bin/env bash
# Submit a whole plan as a job array of counting shards plus a merge job that starts only when
# every array task has finished successfully (--dependency=afterok).
#
#   scripts/slurm_submit.sh plans/survey.toml 8
#
# Not a batch script itself: run it on a login node.
set -euo pipefail

PLAN=${1:?usage: slurm_submit.sh PLAN.toml [SHARDS]}
SHARDS=${2:-8}
HERE=$(cd "$(dirname "$0")" && pwd)

# --parsable prints just the job id.
ARRAY_ID=$(sbatch --parsable --array=0-$((SHARDS - 1)) \
    --export=ALL,PLAN="$PLAN",SHARDS="$SHARDS" "$HERE/slurm_array.sh")
MERGE_ID=$(sbatch --parsable --dependency=afterok:"$ARRAY_ID" --kill-on-invalid-dep=yes \
    --export=ALL,PLAN="$PLAN" "$HERE/slurm_merge.sh")
echo "submitted counting array $ARRAY_ID ($SHARDS tasks) and merge job $MERGE_ID"
