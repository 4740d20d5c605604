#!/usr/bin/env python3
"""Independent re-implementation of fringeflow's stages with NumPy/SciPy.

Reads a capture with h5py, takes every setting from the run's log.json (so it
also checks that the log is enough to reproduce the output), applies
background subtraction, k-linearization (numpy.interp or
scipy.interpolate.CubicSpline with natural end conditions), dispersion
phase, window (scipy.signal.windows), numpy.fft and the 2/sum(w) amplitude
scaling, then compares with volume.h5 in linear amplitude.

Usage: crosscheck.py CAPTURE OUTPUT_DIR [TOLERANCE]
Prints the worst difference relative to the peak; exits 1 above tolerance.
"""
import json
import sys

import h5py
import numpy as np
from scipy.interpolate import CubicSpline
from scipy.signal import windows


def window(kind, n, gaussian_fwhm, tukey_alpha):
    if kind == "none":
        return np.ones(n)
    if kind == "hann":
        return windows.hann(n, sym=True)
    if kind == "hamming":
        return windows.hamming(n, sym=True)
    if kind == "blackman":
        return windows.blackman(n, sym=True)
    if kind == "tukey":
        return windows.tukey(n, alpha=tukey_alpha, sym=True)
    if kind == "gaussian":
        std = gaussian_fwhm * (n - 1) / (2.0 * np.sqrt(2.0 * np.log(2.0)))
        return windows.gaussian(n, std, sym=True)
    raise ValueError(kind)


def main():
    capture, outdir = sys.argv[1], sys.argv[2]
    tol = float(sys.argv[3]) if len(sys.argv) > 3 else 1e-3
    log = json.load(open(f"{outdir}/log.json"))
    p, derived = log["pipeline"], log["derived"]

    with h5py.File(capture, "r") as f:
        fringes = f[p["input"]["fringes"]][...].astype(np.float64)
        if fringes.ndim == 2:
            fringes = fringes[None]
        wl = f[p["input"]["wavelength"]][...].astype(np.float64)
        background = f[p["input"]["background"]][...].astype(np.float64) if p["input"]["background"] in f else None

    n_pix = wl.size
    n_k = p["k_linearization"]["samples"] or n_pix
    k = 2 * np.pi / (wl * 1e-3)
    order = np.argsort(k)
    ks = k[order]
    grid = np.linspace(ks[0], ks[-1], n_k)
    x = np.linspace(-0.5, 0.5, n_k)
    a2, a3 = p["dispersion"]["a2"], p["dispersion"]["a3"]
    phase = np.exp(-1j * (a2 * x**2 + a3 * x**3))
    w = window(p["window"]["kind"], n_k, p["window"]["gaussian_fwhm_fraction"], p["window"]["tukey_alpha"])
    m = n_k * p["fft"]["zero_padding"]
    first, depth = derived["first_depth_bin"], derived["depth_pixels"]

    with h5py.File(f"{outdir}/volume.h5", "r") as v:
        vol_db = v["volume_db"][...].astype(np.float64)  # (frames, depth, alines)
        depth_um = v["depth_um"][...]
    K = ks[-1] - ks[0]
    expect_depth = (first + np.arange(depth)) * np.pi * (n_k - 1) / (m * K)
    depth_err = np.max(np.abs(depth_um - expect_depth))

    worst = 0.0
    peak = 0.0
    for fi, frame in enumerate(fringes):
        method = derived["background_method"]
        if method == "recorded":
            bg = background.reshape(-1, n_pix).mean(axis=0)
        elif method == "mean":
            bg = frame.mean(axis=0)
        elif method == "median":
            bg = np.median(frame, axis=0)
        else:
            bg = np.zeros(n_pix)
        y = (frame - bg)[:, order]
        if p["k_linearization"]["method"] == "linear":
            res = np.stack([np.interp(grid, ks, row) for row in y])
        else:
            res = CubicSpline(ks, y, axis=1, bc_type="natural")(grid)
        field = res * phase * w
        spec = np.fft.fft(field, n=m, axis=1)[:, first:first + depth]
        amp = np.abs(spec) * 2.0 / w.sum()
        ours = 10 ** (vol_db[fi].T / 20.0)
        peak = max(peak, amp.max())
        worst = max(worst, np.max(np.abs(ours - amp)))
    rel = worst / peak
    print(f"crosscheck {p['k_linearization']['method']} {p['window']['kind']}: "
          f"max |dA|/peak = {rel:.3e}, depth axis error = {depth_err:.2e} um")
    ok = rel <= tol and depth_err < 1e-6
    sys.exit(0 if ok else 1)


if __name__ == "__main__":
    main()
