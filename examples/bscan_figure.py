#!/usr/bin/env python3
"""From a capture to a figure of a B-scan with physical axes, with
fringeflow's Python package and matplotlib.

    python3 examples/bscan_figure.py [CAPTURE] [FIGURE.png]

Defaults: sample-data/layered-phantom.h5 and out/bscan.png. The lateral
axis is in µm when the capture records `aline_spacing_um`, else in A-lines.
"""
import sys
from pathlib import Path

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt

import fringeflow as ff

capture = Path(sys.argv[1] if len(sys.argv) > 1 else "sample-data/layered-phantom.h5")
figure = Path(sys.argv[2] if len(sys.argv) > 2 else "out/bscan.png")

cap = ff.Capture(capture)
rec = ff.Reconstructor(ff.Pipeline.from_file("pipelines/default.toml"), capture=cap)
bscan = rec.db(cap.frame(0))                      # depth × A-lines, dB
depth_um = rec.depth_um
spacing = cap.scan.get("aline_spacing_um")
width = cap.alines * spacing if spacing else cap.alines
floor = float(sorted(bscan.ravel())[bscan.size // 2])  # noise floor: the median dB

fig, ax = plt.subplots(figsize=(7, 4))
im = ax.imshow(bscan, cmap="gray", vmin=floor + 3, vmax=floor + 48, aspect="auto",
               extent=[0, width, depth_um[-1], depth_um[0]])
ax.set_xlabel("lateral position (µm)" if spacing else "A-line")
ax.set_ylabel("depth in air (µm)")
ax.set_title(f"{capture.name}, frame 0")
fig.colorbar(im, ax=ax, label="dB")
figure.parent.mkdir(parents=True, exist_ok=True)
fig.savefig(figure, dpi=120, bbox_inches="tight")
print(f"wrote {figure}")
