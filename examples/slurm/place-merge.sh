#!/bin/bash
# The merge of a sharded placement: checks that every part is in
# OUT/parts exactly once and writes OUT/placed.parquet, OUT/map.png and
# OUT/report.json. Queue it behind the job array of place-shards.sh so that
# it starts only when every task finished well:
#
#   sbatch --dependency=afterok:<array job id> examples/slurm/place-merge.sh
#
# (place-submit.sh does both.) Set NIGHTJAR to the binary's path if it is not
# on PATH.
#
#SBATCH --job-name=nightjar-merge
#SBATCH --cpus-per-task=2
#SBATCH --mem=8G
#SBATCH --time=01:00:00
#SBATCH --output=nightjar-merge-%j.log

set -eu
nightjar=${NIGHTJAR:-nightjar}
: "${OUT:?set OUT to the placement directory the shards wrote into}"
echo "$(date -Is) merging the parts in $OUT/parts"
"$nightjar" merge "$OUT" --threads "${SLURM_CPUS_PER_TASK:-1}" --quiet
echo "$(date -Is) merged"
