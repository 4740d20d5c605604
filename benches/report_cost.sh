#!/bin/sh
# What report.html adds to `run`: RUNS runs each way, alternating, three
# rounds, as separate processes (what a user sees). Run from the
# repository root after `cargo build --release`. CAPTURE defaults to the
# sample capture; e.g. CAPTURE=out/demo/flow-phantom.h5 RUNS=5 for the
# 32-frame demo capture that `make demo` simulates.
set -e
BIN=${BIN:-target/release/fringeflow}
CAPTURE=${CAPTURE:-sample-data/layered-phantom.h5}
RUNS=${RUNS:-20}
OUT=$(mktemp -d)
trap 'rm -rf "$OUT"' EXIT
echo "$CAPTURE, $RUNS runs per figure"
for round in 1 2 3; do
  for report in true false; do
    start=$(date +%s%N)
    for i in $(seq 1 "$RUNS"); do
      "$BIN" run "$CAPTURE" --out "$OUT/$report-$round-$i" -q --set output.report=$report
    done
    end=$(date +%s%N)
    echo "report=$report: $(( (end - start) / (RUNS * 1000000) )) ms per run"
  done
done
