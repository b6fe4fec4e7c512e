#!/usr/bin/env bash
# signfold production run under PBS (PBS Pro / OpenPBS / Torque) that continues itself
# until the run is finished.
#
# EDIT BEFORE USE:
#   - the #PBS lines: project, queue, select (nodes : cores : MPI ranks per node), walltime;
#   - JOB (the job file), DIR (the run directory, on a scratch file system), SIGNFOLD (the
#     binary), SELF (the path of this script, for resubmission), MODULES (the modules the
#     binary was built against), THREADS (cores per rank = ncpus / mpiprocs), and if needed
#     LAUNCH (mpirun or the site's mpiexec), MARGIN_MIN and MAX_CHAIN.
#
# Submit once with `qsub jobs/pbs-run.sh`. Each job does one of:
#   - DIR holds the marker file `signfold-finished`   -> nothing (the run is complete);
#   - DIR holds a checkpoint-*.h5                      -> signfold resume DIR --walltime W;
#   - otherwise                                        -> signfold run JOB --out DIR --walltime W.
# W is the job's remaining walltime (qstat: Resource_List.walltime − resources_used.walltime)
# minus MARGIN_MIN, so signfold stops at a synchronisation time with a checkpoint before
# PBS ends the job.
#
# Stopping early and cleanly: send SIGUSR1 to mpirun (`qsig -s USR1 <job id>`): Open MPI's
# mpirun forwards it, every rank checkpoints at the next synchronisation time and all exit
# 0. PBS itself (qdel, the walltime limit) sends SIGTERM, which Open MPI's mpirun cannot
# forward: it aborts, SIGKILLs the ranks odls_base_sigkill_timeout seconds later and exits
# 1. The ranks take the SIGTERM as a stop request too, so the timeout is raised below to
# give them time to finish their checkpoint; the job then ends with status 1 and is not
# resubmitted (submit again to continue).
#
# Completion: when signfold's log of this job has the line "signfold: finished at … wrote DIR/observables.h5 …"
# (printed only when the last step is done) the script writes DIR/signfold-finished and stops.
# When it printed "signfold: stopped at … checkpoint written" and a newer checkpoint exists
# than at the start of this job, the script resubmits itself. Anything else (an error, no
# progress, MAX_CHAIN reached) stops the chain with a message; fix the cause and submit
# again: the run continues from its last checkpoint.
#PBS -N signfold
#PBS -l select=2:ncpus=64:mpiprocs=16
#PBS -l walltime=12:00:00
#PBS -j oe
##PBS -P EDIT
##PBS -q EDIT

set -uo pipefail
cd "${PBS_O_WORKDIR:-.}" || exit 1

JOB="${JOB:-$HOME/signfold/jobs/fermion-pair-coulomb.toml}"
DIR="${DIR:-/scratch/$USER/signfold-run1}"
SIGNFOLD="${SIGNFOLD:-$HOME/signfold/target/release/signfold}"
SELF="${SELF:-$HOME/signfold/jobs/pbs-run.sh}"
MODULES="${MODULES:-}"          # e.g. "gcc/12 openmpi/4.1 hdf5-mpi/1.14"
THREADS="${THREADS:-4}"
LAUNCH="${LAUNCH:-mpirun}"
MARGIN_MIN="${MARGIN_MIN:-10}"
MAX_CHAIN="${MAX_CHAIN:-50}"
CHAIN="${SIGNFOLD_CHAIN:-0}"

if [[ -n "$MODULES" ]]; then
    # shellcheck disable=SC2086
    module load $MODULES
fi
export OMP_NUM_THREADS=1
# Seconds Open MPI's mpirun waits between SIGTERM and SIGKILL to the ranks (default 1).
export OMPI_MCA_odls_base_sigkill_timeout="${OMPI_MCA_odls_base_sigkill_timeout:-120}"
NP="$(wc -l <"$PBS_NODEFILE")"

if [[ -e "$DIR/signfold-finished" ]]; then
    echo "signfold-run: $DIR is finished; nothing to do"
    exit 0
fi

to_minutes() {  # HH:MM:SS -> minutes
    local h m s
    IFS=: read -r h m s <<<"$1"
    echo $(( 10#${h:-0} * 60 + 10#${m:-0} ))
}
INFO="$(qstat -f "$PBS_JOBID")"
ASKED="$(sed -n 's/^ *Resource_List.walltime = //p' <<<"$INFO" | head -n 1)"
USED="$(sed -n 's/^ *resources_used.walltime = //p' <<<"$INFO" | head -n 1)"
if [[ -z "$ASKED" ]]; then
    echo "signfold-run: cannot read Resource_List.walltime from qstat" >&2
    exit 1
fi
RUN_MIN=$(( $(to_minutes "$ASKED") - $(to_minutes "${USED:-00:00:00}") - MARGIN_MIN ))
if (( RUN_MIN < 5 )); then
    echo "signfold-run: walltime $ASKED leaves less than MARGIN_MIN + 5 minutes" >&2
    exit 1
fi
WALL="$(printf '%02d:%02d' $(( RUN_MIN / 60 )) $(( RUN_MIN % 60 )))"

newest_checkpoint() {
    # Particle files only (checkpoint-NNNNNNNNNN.h5); names sort by step.
    find "$DIR" -maxdepth 1 -name 'checkpoint-??????????.h5' 2>/dev/null | sort | tail -n 1
}
BEFORE="$(newest_checkpoint)"
LOG="$DIR/signfold-${PBS_JOBID%%.*}.log"
mkdir -p "$DIR"

if [[ -n "$BEFORE" ]]; then
    "$LAUNCH" -np "$NP" "$SIGNFOLD" resume "$DIR" --walltime "$WALL" --threads "$THREADS" >"$LOG" 2>&1
else
    "$LAUNCH" -np "$NP" "$SIGNFOLD" run "$JOB" --out "$DIR" --walltime "$WALL" --threads "$THREADS" >"$LOG" 2>&1
fi
RC=$?
cat "$LOG"

if (( RC != 0 )); then
    echo "signfold-run: signfold exited with status $RC; not resubmitting (see $LOG)" >&2
    exit "$RC"
fi
if grep -q '^signfold: finished at ' "$LOG"; then
    date >"$DIR/signfold-finished"
    echo "signfold-run: finished after $(( CHAIN + 1 )) job(s)"
    exit 0
fi
AFTER="$(newest_checkpoint)"
if ! grep -q '^signfold: stopped at ' "$LOG" || [[ -z "$AFTER" || "$AFTER" == "$BEFORE" ]]; then
    echo "signfold-run: no new checkpoint in this job; not resubmitting" >&2
    exit 1
fi
if (( CHAIN + 1 >= MAX_CHAIN )); then
    echo "signfold-run: MAX_CHAIN=$MAX_CHAIN jobs used; not resubmitting" >&2
    exit 1
fi
qsub -v "SIGNFOLD_CHAIN=$(( CHAIN + 1 )),JOB=$JOB,DIR=$DIR,SIGNFOLD=$SIGNFOLD,SELF=$SELF" "$SELF"
