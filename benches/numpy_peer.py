#!/usr/bin/env python3
"""NumPy/SciPy peer of `fringeflow bench`'s pipeline: the same stages written
the way a lab would in Python, vectorised over the A-lines of a frame
(float64, NumPy's default): median background over the frame's A-lines,
natural cubic spline onto a uniform wavenumber grid (SciPy CubicSpline),
dispersion phase a2·x² + a3·x³ and Hann window, FFT, 20·log10|A|, 8-bit
mapping from the frame's median dB. Times it on the same capture and, given
the Rust report, prints the speed-up.

    python3 benches/numpy_peer.py out/bench/throughput-v2.h5 --report out/bench/report.json
"""
import argparse
import json
import time

import h5py
import numpy as np
from scipy.interpolate import CubicSpline

A2, A3 = 20.0, -5.0  # as pipelines/throughput.toml


def make_plan(wavelength_nm):
    k = 2 * np.pi / (wavelength_nm * 1e-3)
    order = np.argsort(k)
    ks = k[order]
    n = len(ks)
    grid = np.linspace(ks[0], ks[-1], n)
    x = np.linspace(-0.5, 0.5, n)
    window = np.hanning(n)
    factor = window * np.exp(-1j * (A2 * x**2 + A3 * x**3))
    return order, ks, grid, factor, 2.0 / window.sum()


def reconstruct(frame, plan):
    order, ks, grid, factor, scale = plan
    spectra = frame.astype(np.float64)
    spectra -= np.median(spectra, axis=0)
    resampled = CubicSpline(ks, spectra[:, order], axis=1, bc_type="natural")(grid)
    depth = np.fft.fft(resampled * factor, axis=1)[:, : len(grid) // 2]
    db = 20 * np.log10(np.maximum(np.abs(depth) * scale, 1e-12))
    black = np.median(db) + 3.0
    grey = np.clip(np.round((db.T - black) * (255.0 / 45.0)), 0, 255).astype(np.uint8)
    return grey


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("capture")
    ap.add_argument("--frames", type=int, default=16, help="frames to time (each is all of a B-scan's A-lines)")
    ap.add_argument("--report", help="fringeflow bench --json report to compare with")
    args = ap.parse_args()
    with h5py.File(args.capture, "r") as f:
        wavelength = f["wavelength_nm"][:]
        fringes = f["fringes"]
        frames = [fringes[i] for i in range(min(args.frames, fringes.shape[0]))]
    plan = make_plan(wavelength)
    reconstruct(frames[0], plan)  # warm up
    times = []
    for frame in frames:
        t = time.perf_counter()
        reconstruct(frame, plan)
        times.append(time.perf_counter() - t)
    alines = frames[0].shape[0]
    rate = alines / float(np.median(times))
    print(f"NumPy {np.__version__} / SciPy peer: {rate:,.0f} A-lines/s (median of {len(times)} frames of {alines} A-lines, in memory)")
    if args.report:
        with open(args.report) as f:
            r = json.load(f)
        rust = r["pipeline_alines_per_second"]
        rust_capture = r["capture_background_alines_per_second"]
        print(f"fringeflow fused pipeline: {rust:,.0f} A-lines/s -> speed-up {rust / rate:.1f}x")
        print(f"fringeflow, capture background: {rust_capture:,.0f} A-lines/s -> speed-up {rust_capture / rate:.1f}x over the same NumPy peer")


if __name__ == "__main__":
    main()
