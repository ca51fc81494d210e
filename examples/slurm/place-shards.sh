#!/bin/bash
# One task of a Slurm job array that places the rows of a new table into a
# finished nightjar map: task I of N places the I-th of N contiguous row
# ranges and writes OUT/parts/part-IIIII-of-NNNNN.parquet. Submit it with
# place-submit.sh (which also prepares the reference and queues the merge),
# or by hand:
#
#   REF=/maps/atlas INPUT=/data/week12.parquet OUT=/scratch/$USER/week12 \
#     sbatch --array=0-3 examples/slurm/place-shards.sh --id cell_id --label cell_type
#
# Options after the script name go to 'nightjar place'. The number of shards
# is the array's size (SHARDS overrides it; the array must be 0..SHARDS-1).
# Set NIGHTJAR to the binary's path if it is not on PATH.
#
# A task only reads the reference; it writes into OUT/shards/IIIII-of-NNNNN
# (its saved rows and report) and its part. Re-running a task runs the same
# command, which continues from the rows it saved: a requeued or pre-empted
# task loses at most one chunk of rows.
#
#SBATCH --job-name=nightjar-place
#SBATCH --cpus-per-task=2
#SBATCH --mem=8G
#SBATCH --time=02:00:00
#SBATCH --requeue
# SIGTERM to this script 5 minutes before the time limit: nightjar stops
# after saving its rows, exits 143, and the task requeues itself.
#SBATCH --signal=B:TERM@300
#SBATCH --open-mode=append
#SBATCH --output=nightjar-place-%A_%a.log

set -u
nightjar=${NIGHTJAR:-nightjar}
: "${REF:?set REF to the finished reference run directory}" "${INPUT:?set INPUT to the table of new rows}" "${OUT:?set OUT to the placement directory}"
: "${SLURM_ARRAY_TASK_ID:?submit this script as a job array (sbatch --array=0-N)}"
shards=${SHARDS:-${SLURM_ARRAY_TASK_COUNT:?set SHARDS to the number of array tasks}}

echo "$(date -Is) shard $SLURM_ARRAY_TASK_ID of $shards, job ${SLURM_JOB_ID:-} restart ${SLURM_RESTART_COUNT:-0} on $(hostname)"
"$nightjar" place "$REF" --input "$INPUT" --out "$OUT" \
  --shard "$SLURM_ARRAY_TASK_ID" --shards "$shards" \
  --threads "${SLURM_CPUS_PER_TASK:-1}" --quiet "$@" &
pid=$!
# The warning signal reaches only this script: pass it on.
trap 'kill -TERM "$pid" 2>/dev/null' TERM
wait "$pid"; rc=$?
while [ "$rc" -gt 128 ] && kill -0 "$pid" 2>/dev/null; do
  wait "$pid"; rc=$?
done
case $rc in
  0) echo "$(date -Is) shard $SLURM_ARRAY_TASK_ID finished"; exit 0 ;;
  143) echo "$(date -Is) stopped after saving its rows; requeueing"
       scontrol requeue "${SLURM_JOB_ID}" 2>/dev/null || true
       exit 0 ;;
  *) echo "$(date -Is) nightjar exited with $rc"; exit "$rc" ;;
esac
