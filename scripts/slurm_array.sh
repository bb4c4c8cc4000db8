#!/usr/bin/env bash
# Job array: each task counts one shard of the pair counts of a ringscale plan.
#
#   sbatch --export=ALL,PLAN=plans/survey.toml scripts/slurm_array.sh
#
# Every task writes its counting parts and a record shards/shard-K-of-N.json into the plan's
# output folder (which must be on a file system all nodes see). Afterwards run
# scripts/slurm_merge.sh (or use scripts/slurm_submit.sh, which chains the two with
# --dependency=afterok). Keep --array=0-(N-1) and SHARDS=N in step; N at most the plan's
# [run] units, so every task has work. A task that dies can simply be resubmitted: finished
# parts are kept and the rerun produces identical bytes.
#SBATCH --job-name=ringscale-count
#SBATCH --array=0-7
#SBATCH --nodes=1
#SBATCH --ntasks=1
#SBATCH --cpus-per-task=16
#SBATCH --mem=16G
#SBATCH --time=04:00:00
#SBATCH --output=ringscale-count-%A_%a.log
set -euo pipefail

PLAN=${PLAN:-plan.toml}
# Must equal the number of tasks in --array above.
SHARDS=${SHARDS:-8}
RINGSCALE=${RINGSCALE:-ringscale}

# Threads come from SLURM_CPUS_PER_TASK; the shard index from SLURM_ARRAY_TASK_ID ("auto/N").
# Logs are JSON lines (stderr is not a terminal), one event per line.
srun --cpu-bind=cores "$RINGSCALE" run "$PLAN" --shard "auto/${SHARDS}"
