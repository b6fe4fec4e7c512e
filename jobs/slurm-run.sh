#!/usr/bin/env bash
# signfold production run under Slurm that continues itself until the run is finished.
#
# EDIT BEFORE USE:
#   - the #SBATCH lines: account, partition, nodes, tasks per node, cores per task, time;
#   - JOB (the job file), DIR (the run directory, on a scratch file system), SIGNFOLD (the
#     binary), MODULES (the modules the binary was built against), and if needed
#     MARGIN_MIN (minutes kept free at the end of the allocation) and MAX_CHAIN (how many
#     times the job may resubmit itself).
#
# Submit once with `sbatch jobs/slurm-run.sh`. Each allocation does one of:
#   - DIR holds the marker file `signfold-finished`   -> nothing (the run is complete);
#   - DIR holds a checkpoint-*.h5                      -> signfold resume DIR --walltime W;
#   - otherwise                                        -> signfold run JOB --out DIR --walltime W.
# W is the allocation's remaining time (squeue %L) minus MARGIN_MIN, so signfold stops at a
# synchronisation time with a checkpoint before Slurm ends the job. Slurm also sends USR1
# MARGIN_MIN/2 minutes before the end (--signal); the script passes it on, and signfold
# checkpoints and stops at the next synchronisation time.
#
# Completion: when signfold's log of this allocation ends with the line
# "signfold: finished at … wrote DIR/observables.h5 …" (printed only when the last step is done) the script
# writes DIR/signfold-finished and stops. When it printed "signfold: stopped at … checkpoint
# written" and a newer checkpoint exists than at the start of this allocation, the script
# resubmits itself. Anything else (an error, no progress, MAX_CHAIN reached) stops the chain
# with a message in the job's output; fix the cause and submit again: the run continues from
# its last checkpoint.
#SBATCH --job-name=signfold
#SBATCH --nodes=2
#SBATCH --ntasks-per-node=16
#SBATCH --cpus-per-task=4
#SBATCH --time=12:00:00
#SBATCH --signal=B:USR1@300
#SBATCH --output=signfold-%j.out
##SBATCH --account=EDIT
##SBATCH --partition=EDIT

set -uo pipefail

JOB="${JOB:-$HOME/signfold/jobs/fermion-pair-coulomb.toml}"
DIR="${DIR:-/scratch/$USER/signfold-run1}"
SIGNFOLD="${SIGNFOLD:-$HOME/signfold/target/release/signfold}"
MODULES="${MODULES:-}"          # e.g. "gcc/12 openmpi/4.1 hdf5-mpi/1.14"
MARGIN_MIN="${MARGIN_MIN:-10}"
MAX_CHAIN="${MAX_CHAIN:-50}"
CHAIN="${SIGNFOLD_CHAIN:-0}"

if [[ -n "$MODULES" ]]; then
    # shellcheck disable=SC2086
    module load $MODULES
fi
export OMP_NUM_THREADS=1
THREADS="${SLURM_CPUS_PER_TASK:-1}"

if [[ -e "$DIR/signfold-finished" ]]; then
    echo "signfold-run: $DIR is finished; nothing to do"
    exit 0
fi

# Minutes left in this allocation, from squeue's [D-]HH:MM:SS (or MM:SS).
left_minutes() {
    local l d=0 h=0 m=0 s=0
    l="$(squeue -h -j "$SLURM_JOB_ID" -o %L 2>/dev/null)" || return 1
    [[ "$l" == *-* ]] && { d="${l%%-*}"; l="${l#*-}"; }
    IFS=: read -r -a f <<<"$l"
    case "${#f[@]}" in
        3) h="${f[0]}"; m="${f[1]}"; s="${f[2]}" ;;
        2) m="${f[0]}"; s="${f[1]}" ;;
        *) return 1 ;;
    esac
    echo $(( (10#$d * 24 + 10#$h) * 60 + 10#$m ))
}
LEFT="$(left_minutes)" || LEFT=""
if [[ -z "$LEFT" ]]; then
    echo "signfold-run: cannot read the remaining time from squeue" >&2
    exit 1
fi
RUN_MIN=$(( LEFT - MARGIN_MIN ))
if (( RUN_MIN < 5 )); then
    echo "signfold-run: only $LEFT minutes left, less than MARGIN_MIN + 5" >&2
    exit 1
fi
WALL="$(printf '%02d:%02d' $(( RUN_MIN / 60 )) $(( RUN_MIN % 60 )))"

newest_checkpoint() {
    # Particle files only (checkpoint-NNNNNNNNNN.h5); names sort by step.
    find "$DIR" -maxdepth 1 -name 'checkpoint-??????????.h5' 2>/dev/null | sort | tail -n 1
}
BEFORE="$(newest_checkpoint)"
LOG="$DIR/signfold-$SLURM_JOB_ID.log"
mkdir -p "$DIR"

if [[ -n "$BEFORE" ]]; then
    srun "$SIGNFOLD" resume "$DIR" --walltime "$WALL" --threads "$THREADS" >"$LOG" 2>&1 &
else
    srun "$SIGNFOLD" run "$JOB" --out "$DIR" --walltime "$WALL" --threads "$THREADS" >"$LOG" 2>&1 &
fi
PID=$!
trap 'kill -USR1 "$PID" 2>/dev/null' USR1 TERM
# wait returns early when a trapped signal arrives; wait again until srun has ended.
while true; do
    wait "$PID"
    RC=$?
    kill -0 "$PID" 2>/dev/null || break
done
trap - USR1 TERM
cat "$LOG"

if (( RC != 0 )); then
    echo "signfold-run: signfold exited with status $RC; not resubmitting (see $LOG)" >&2
    exit "$RC"
fi
if grep -q '^signfold: finished at ' "$LOG"; then
    date >"$DIR/signfold-finished"
    echo "signfold-run: finished after $(( CHAIN + 1 )) allocation(s)"
    exit 0
fi
AFTER="$(newest_checkpoint)"
if ! grep -q '^signfold: stopped at ' "$LOG" || [[ -z "$AFTER" || "$AFTER" == "$BEFORE" ]]; then
    echo "signfold-run: no new checkpoint in this allocation; not resubmitting" >&2
    exit 1
fi
if (( CHAIN + 1 >= MAX_CHAIN )); then
    echo "signfold-run: MAX_CHAIN=$MAX_CHAIN allocations used; not resubmitting" >&2
    exit 1
fi
SELF="${SIGNFOLD_SELF:-$(scontrol show job "$SLURM_JOB_ID" | sed -n 's/^ *Command=//p' | head -n 1)}"
sbatch --export=ALL,SIGNFOLD_CHAIN=$(( CHAIN + 1 )),SIGNFOLD_SELF="$SELF",JOB="$JOB",DIR="$DIR",SIGNFOLD="$SIGNFOLD" "$SELF"
