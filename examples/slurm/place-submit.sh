#!/bin/bash
# Places the rows of a large table into a finished nightjar map on a Slurm
# cluster: prepares the reference's neighbour index once (here, before any
# shard starts), submits SHARDS array tasks of place-shards.sh and a merge
# (place-merge.sh) that runs only when all of them succeeded.
#
#   REF=/maps/atlas INPUT=/data/week12.parquet OUT=/scratch/$USER/week12 SHARDS=32 \
#     bash examples/slurm/place-submit.sh --id cell_id --label cell_type
#
# Options go to every 'nightjar place' task. Extra sbatch options for the
# tasks (a partition, an account) go in SBATCH_TASK_OPTIONS, for the merge
# in SBATCH_MERGE_OPTIONS. It prints the
# two job ids: the array's and the merge's.
set -euo pipefail
here=$(cd "$(dirname "$0")" && pwd)
nightjar=${NIGHTJAR:-nightjar}
: "${REF:?set REF to the finished reference run directory}" "${INPUT:?set INPUT to the table of new rows}" "${OUT:?set OUT to the placement directory}"
shards=${SHARDS:-4}

# The index is saved in the reference directory; shards only read it. A
# reference of at most 20,000 rows needs none (its neighbours are found
# exactly), and preparing it again only rewrites the same index.
"$nightjar" place --prepare "$REF" --quiet

export NIGHTJAR="$nightjar" REF INPUT OUT SHARDS="$shards"
# shellcheck disable=SC2086
array=$(sbatch --parsable --array=0-$((shards - 1)) ${SBATCH_TASK_OPTIONS:-} "$here/place-shards.sh" "$@")
array=${array%%;*}
# shellcheck disable=SC2086
merge=$(sbatch --parsable --dependency=afterok:"$array" --kill-on-invalid-dep=yes ${SBATCH_MERGE_OPTIONS:-} "$here/place-merge.sh")
merge=${merge%%;*}
echo "array $array"
echo "merge $merge"
