#!/usr/bin/env bash
# What stress outputs add to an order map on the 12-megapixel benchmark photo: whole `isotint`
# processes, alternated — the order map alone (orders to NPY), the same with the σ1 − σ2 map
# (`--stress-out`, NPY), and boundary stress (which maps the photo too) — ROUNDS rounds (default
# 9), outputs on /dev/shm so that disk writes do not blur the comparison. Prints each round and
# the medians and paired ratios.
#
# Needs `cargo build --release` and the benchmark photos: run
# `cargo bench -p isotint-core --bench order_map_speed` once (writes target/bench-data/).
set -euo pipefail
cd "$(dirname "$0")/.."
bin=target/release/isotint
data=target/bench-data
out=$(mktemp -d -p /dev/shm)
trap 'rm -rf "$out"' EXIT
common=(--calibration "$data/bench-calibration.json" --photo "$data/disc-12mp.jpg"
        --mask "$data/disc-12mp-mask.png")
law=(--fringe-value-n-per-mm 10.5 --thickness-mm 6)
seconds() {
  local start end
  start=$(date +%s.%N)
  "$@" >/dev/null 2>&1
  end=$(date +%s.%N)
  echo "$end - $start" | bc
}
rows=()
for round in $(seq 1 "${ROUNDS:-9}"); do
  rm -f "$out"/*
  map=$(seconds "$bin" map "${common[@]}" --out "$out/orders.npy")
  rm -f "$out"/*
  stress=$(seconds "$bin" map "${common[@]}" --out "$out/orders.npy" "${law[@]}" --stress-out "$out/stress.npy")
  boundary=$(seconds "$bin" boundary "${common[@]}" "${law[@]}" --json)
  echo "round $round: map $map s, map + stress map $stress s, boundary $boundary s"
  rows+=("$map $stress $boundary")
done
printf '%s\n' "${rows[@]}" | python3 -c '
import statistics as st, sys
r = [list(map(float, l.split())) for l in sys.stdin]
m, s, b = zip(*r)
print(f"median: map {st.median(m):.3f} s, map + stress map {st.median(s):.3f} s, boundary {st.median(b):.3f} s")
print(f"paired ratio, median: stress map {st.median([y / x for x, y in zip(m, s)]):.3f}, boundary {st.median([y / x for x, y in zip(m, b)]):.3f}")
'
