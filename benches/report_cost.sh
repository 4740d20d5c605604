#!/bin/sh
# What report.html adds to `run` on the sample capture: 20 runs each way,
# alternating, as separate processes (what a user sees). Run from the
# repository root after `cargo build --release`.
set -e
BIN=${BIN:-target/release/fringeflow}
OUT=$(mktemp -d)
trap 'rm -rf "$OUT"' EXIT
for round in 1 2 3; do
  for report in true false; do
    start=$(date +%s%N)
    for i in $(seq 1 20); do
      "$BIN" run sample-data/layered-phantom.h5 --out "$OUT/$report-$round-$i" -q --set output.report=$report
    done
    end=$(date +%s%N)
    echo "report=$report: $(( (end - start) / 20000000 )) ms per run"
  done
done
