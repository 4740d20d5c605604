#!/usr/bin/env python3
"""Reconstruction from NumPy arrays (the Python package, frame by frame)
against the same loop inside Rust (no Python between frames), in one run
on the same frames. Usage: python_speed.py [CAPTURE] [--repeats N]

Prints both rates in A-lines per second and their ratio, with the CPU.
"""
import argparse
import time
from pathlib import Path

import numpy as np

import fringeflow as ff

parser = argparse.ArgumentParser()
parser.add_argument("capture", nargs="?", default="out/bench/throughput-v2.h5")
parser.add_argument("--pipeline", default="pipelines/throughput.toml")
parser.add_argument("--repeats", type=int, default=5)
args = parser.parse_args()
if not Path(args.capture).exists():
    args.capture = "sample-data/layered-phantom.h5"

cpu = next((l.split(":", 1)[1].strip() for l in open("/proc/cpuinfo") if l.startswith("model name")), "unknown")
cap = ff.Capture(args.capture)
rec = ff.Reconstructor(ff.Pipeline.from_file(args.pipeline), capture=cap)
frames = [cap.frame(i) for i in range(min(cap.frames, 16))]
stack = np.stack(frames)
rec.time_in_memory(stack, 1)  # warm up
rust, py = [], []
for _ in range(args.repeats):
    rust.append(rec.time_in_memory(stack, 3))
    start = time.perf_counter()
    for _ in range(3):
        for f in frames:
            rec.db(f)
    py.append(3 * len(frames) * cap.alines / (time.perf_counter() - start))
r, p = float(np.median(rust)), float(np.median(py))
print(f"machine: {cpu}")
print(f"capture: {args.capture} ({len(frames)} frames of {cap.alines} A-lines x {cap.pixels} pixels), pipeline {args.pipeline}, median of {args.repeats}")
print(f"Rust in memory (FusedPlan, no Python between frames): {r:12.0f} A-lines/s")
print(f"Python, Reconstructor.db frame by frame:              {p:12.0f} A-lines/s")
print(f"ratio Python / Rust: {p / r:.3f}")
