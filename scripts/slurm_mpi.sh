#!/usr/bin/env bash
# One MPI job: every rank counts one shard of the plan, rank 0 merges and finishes.
#
#   sbatch --export=ALL,PLAN=plans/survey.toml scripts/slurm_mpi.sh
#
# Needs ringscale built with MPI support (cargo build --release --features mpi, against the
# cluster's Open MPI) and an output folder on a shared file system: parts travel through it, so
# a rerun after a failure keeps every finished part. Use one rank per node and threads within
# the node (SLURM_CPUS_PER_TASK) for the best balance.
#SBATCH --job-name=ringscale-mpi
#SBATCH --nodes=4
#SBATCH --ntasks-per-node=1
#SBATCH --cpus-per-task=32
#SBATCH --mem=32G
#SBATCH --time=04:00:00
#SBATCH --output=ringscale-mpi-%j.log
set -euo pipefail

PLAN=${PLAN:-plan.toml}
RINGSCALE=${RINGSCALE:-ringscale}

# Your site may need: module load openmpi
if command -v srun >/dev/null 2>&1; then
    # Slurm launches the ranks itself (PMIx); fall back to mpirun outside Slurm.
    srun --mpi=pmix "$RINGSCALE" run "$PLAN" --mpi
else
    mpirun -np "${NP:-4}" "$RINGSCALE" run "$PLAN" --mpi
fi
