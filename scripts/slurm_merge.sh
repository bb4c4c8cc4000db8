#!/usr/bin/env bash
# Merge job: after all array tasks succeeded, merge their counting parts (exactly, bit for bit
# equal to a single process) and run the estimate, fit and report stages.
#
#   sbatch --dependency=afterok:<ARRAY_JOB_ID> --export=ALL,PLAN=plans/survey.toml scripts/slurm_merge.sh
#
# --merge-only refuses to count anything itself: if a shard is missing it stops with a list of
# the missing parts instead of silently redoing a whole shard on one node. Shards made from a
# different plan or ringscale version are refused with an error naming the shard record.
#SBATCH --job-name=ringscale-merge
#SBATCH --nodes=1
#SBATCH --ntasks=1
#SBATCH --cpus-per-task=4
#SBATCH --mem=8G
#SBATCH --time=00:30:00
#SBATCH --output=ringscale-merge-%j.log
set -euo pipefail

PLAN=${PLAN:-plan.toml}
RINGSCALE=${RINGSCALE:-ringscale}

"$RINGSCALE" run "$PLAN" --merge-only
