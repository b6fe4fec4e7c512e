#!/usr/bin/env bash
# signfold strong, weak and threads scaling series under Slurm.
#
# EDIT BEFORE USE:
#   - the #SBATCH lines: account, partition, nodes, tasks per node (= the largest rank count
#     / nodes), time; --exclusive keeps other jobs off the nodes so the timings mean something;
#   - JOB, SIGNFOLD, MODULES, OUT (results; the runs themselves go to OUT/runs and are
#     deleted after reading), RANKS (the rank counts, at most the allocation's tasks),
#     SAMPLES (Monte Carlo samples; strong: total; weak: per rank; PARTICLES is its old name), REPEAT (runs per point; the shortest counts).
#
# The driver runs in the batch shell itself and launches `srun -n P signfold run …` for every
# point; it writes OUT/<job>-strong.csv, -weak.csv, -threads.csv, PNG pictures and
# OUT/machine.txt (see scaling-results/README.md for the columns).
#SBATCH --job-name=signfold-scaling
#SBATCH --nodes=4
#SBATCH --ntasks-per-node=32
#SBATCH --cpus-per-task=1
#SBATCH --exclusive
#SBATCH --time=02:00:00
#SBATCH --output=signfold-scaling-%j.out
##SBATCH --account=EDIT
##SBATCH --partition=EDIT

set -euo pipefail

JOB="${JOB:-$HOME/signfold/jobs/fermion-pair-coulomb.toml}"
SIGNFOLD="${SIGNFOLD:-$HOME/signfold/target/release/signfold}"
MODULES="${MODULES:-}"          # e.g. "gcc/12 openmpi/4.1 hdf5-mpi/1.14"
OUT="${OUT:-/scratch/$USER/signfold-scaling}"
RANKS="${RANKS:-1,2,4,8,16,32,64,128}"
if [ -n "${PARTICLES:-}" ] && [ -z "${SAMPLES:-}" ]; then
    echo "warning: PARTICLES is the old name of SAMPLES (renamed in format version 2); use SAMPLES" >&2
fi
SAMPLES="${SAMPLES:-${PARTICLES:-1000000}}"
REPEAT="${REPEAT:-2}"

if [[ -n "$MODULES" ]]; then
    # shellcheck disable=SC2086
    module load $MODULES
fi
export OMP_NUM_THREADS=1

"$SIGNFOLD" scaling "$JOB" --ranks "$RANKS" --samples "$SAMPLES" --mode all \
    --repeat "$REPEAT" --out "$OUT" --launcher "srun --cpus-per-task=1"
