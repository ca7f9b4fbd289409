#!/usr/bin/env bash
# Pulse trains: cost against the pulse count, the steady state of a continuous rate, and the
# full report of a long Poisson train. Builds release and prints wall and CPU seconds (best of
# three) for:
#   - `dynode train bench/train-chain.ron --train-only` at 1 000, 10 000 and 100 000 pulses
#     (periodic, 1 MHz; the steady state of the rate is part of every run);
#   - the same with one pulse: the steady state of a continuous 1 MHz rate and one pulse;
#   - `dynode report bench/spectroscopy.ron` (12 stages, 500 Poisson pulses at 5 kHz).
set -euo pipefail
cd "$(dirname "$0")/.."
cargo build --release --quiet
bin=target/release/dynode
best() {
  local best_wall="" best_cpu=""
  for _ in $(seq "${reps:-3}"); do
    local out
    out=$( { /usr/bin/time -f '%e %U %S' "$@" > /dev/null; } 2>&1 | tail -1)
    local wall cpu
    wall=$(echo "$out" | awk '{ print $1 }')
    cpu=$(echo "$out" | awk '{ print $2 + $3 }')
    best_wall=$(awk -v a="$wall" -v b="${best_wall:-1e99}" 'BEGIN { print (a < b) ? a : b }')
    best_cpu=$(awk -v a="$cpu" -v b="${best_cpu:-1e99}" 'BEGIN { print (a < b) ? a : b }')
  done
  printf '%-58s %8s s wall %8s s CPU\n' "$label" "$best_wall" "$best_cpu"
}
for n in 1 1000 10000 100000; do
  reps=3; [ "$n" -ge 100000 ] && reps=1
  label="train-chain, $n periodic pulses at 1 MHz (--train-only)"
  best "$bin" train bench/train-chain.ron --pulses "$n" --train-only --format json
done
reps=3
label="spectroscopy, full report (500 Poisson pulses at 5 kHz)"
best "$bin" report bench/spectroscopy.ron --format json
label="spectroscopy, check (no train)"
best "$bin" check bench/spectroscopy.ron
