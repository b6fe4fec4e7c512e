#!/usr/bin/env bash
# signfold strong, weak and threads scaling series under PBS.
#
# EDIT BEFORE USE:
#   - the #PBS lines: project, queue, select (nodes : cores : MPI ranks per node; ask for
#     whole nodes so that the timings mean something), walltime;
#   - JOB, SIGNFOLD, MODULES, OUT (results; the runs themselves go to OUT/runs and are
#     deleted after reading), RANKS (the rank counts, at most the MPI ranks of the job),
#     SAMPLES (Monte Carlo samples; strong: total; weak: per rank; PARTICLES is its old name), REPEAT (runs per point; the shortest counts),
#     LAUNCH (the launcher and its options; `-n P` follows).
#
# The driver runs in the batch shell itself and launches `LAUNCH -n P signfold run …` for
# every point; it writes OUT/<job>-strong.csv, -weak.csv, -threads.csv, PNG pictures and
# OUT/machine.txt (see scaling-results/README.md for the columns).
#PBS -N signfold-scaling
#PBS -l select=4:ncpus=32:mpiprocs=32
#PBS -l place=excl
#PBS -l walltime=02:00:00
#PBS -j oe
##PBS -P EDIT
##PBS -q EDIT

set -euo pipefail
cd "${PBS_O_WORKDIR:-.}"

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
LAUNCH="${LAUNCH:-mpirun --hostfile $PBS_NODEFILE}"

if [[ -n "$MODULES" ]]; then
    # shellcheck disable=SC2086
    module load $MODULES
fi
export OMP_NUM_THREADS=1

"$SIGNFOLD" scaling "$JOB" --ranks "$RANKS" --samples "$SAMPLES" --mode all \
    --repeat "$REPEAT" --out "$OUT" --launcher "$LAUNCH"
