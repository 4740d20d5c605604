#!/usr/bin/env python3
"""Decodes every image fringeflow wrote with Pillow (an independent PNG
decoder) and checks it against the numbers it was made from.

Usage:
  decode_images.py bscans OUTPUT_DIR      B-scan PNGs and en-face.png against
                                          volume.h5 (h5py) under the grey
                                          levels log.json records
  decode_images.py sheet SWEEP_DIR        contact-sheet.png against sweep.json
  decode_images.py plot PNG [PNG...]      plots: decode, RGB, not blank

Prints one line per image; exits 1 on the first mismatch.
"""
import json
import sys

import h5py
import numpy as np
from PIL import Image


def fail(msg):
    print(f"FAIL {msg}")
    sys.exit(1)


def expected_grey(db, black, white, max_grey):
    # dB -> [black, white] -> [0, max_grey], rounded, clamped: the mapping
    # log.json documents (docs/pipeline-reference.md, [log_compression]).
    g = np.round((db.astype(np.float64) - black) * (max_grey / (white - black)))
    return np.clip(g, 0, max_grey)


def decode(path):
    im = Image.open(path)
    im.load()
    return im


def grey_array(im, bit_depth):
    if bit_depth == 8:
        if im.mode != "L":
            fail(f"{im.filename}: mode {im.mode}, expected L (8-bit grey)")
        return np.asarray(im, dtype=np.float64)
    # Pillow decodes 16-bit grey PNGs as mode I;16 (or I); the values must
    # be the big-endian samples PNG stores.
    if im.mode not in ("I;16", "I;16B", "I"):
        fail(f"{im.filename}: mode {im.mode}, expected 16-bit grey")
    return np.asarray(im, dtype=np.float64)


def check_bscans(outdir):
    log = json.load(open(f"{outdir}/log.json"))
    bit_depth = log["pipeline"]["log_compression"]["bit_depth"]
    max_grey = 255 if bit_depth == 8 else 65535
    with h5py.File(f"{outdir}/volume.h5", "r") as v:
        ds = v["volume_db"]
        vol = ds[...].astype(np.float64)
        packing_db = 0.0
        if "scale_factor" in ds.attrs:  # CF packed data (CF conventions 8.1)
            vol = vol * ds.attrs["scale_factor"] + ds.attrs["add_offset"]
            packing_db = 0.5 * float(ds.attrs["scale_factor"])
        en_face = v["en_face_db"][...] if "en_face_db" in v else None
    pngs = [o for o in log["outputs"] if o.endswith(".png") and o != "en-face.png"]
    if len(pngs) != vol.shape[0]:
        fail(f"{len(pngs)} B-scan PNGs for {vol.shape[0]} frames")
    for rec, name in zip(log["frames"], pngs):
        im = decode(f"{outdir}/{name}")
        got = grey_array(im, bit_depth)
        want = expected_grey(vol[rec["index"]], rec["grey_black_db"], rec["grey_white_db"], max_grey)
        if got.shape != want.shape:
            fail(f"{name}: shape {got.shape}, volume frame {want.shape}")
        # The 8-bit writer maps in f32: a value on a rounding boundary may
        # land one level away; a packed volume is off by up to half its
        # step. Anything more is a format error.
        allowed = 1 + np.ceil(packing_db * max_grey / (rec["grey_white_db"] - rec["grey_black_db"]))
        worst = np.max(np.abs(got - want))
        if worst > allowed:
            fail(f"{name}: worst grey difference {worst} (bit depth {bit_depth})")
        print(f"ok {name}: {im.mode} {im.size}, worst grey difference {worst:g} of {max_grey}")
    if en_face is not None:
        rec = log["en_face"]
        im = decode(f"{outdir}/en-face.png")
        got = grey_array(im, bit_depth)
        want = expected_grey(en_face, rec["grey_black_db"], rec["grey_white_db"], max_grey)
        if got.shape != want.shape:
            fail(f"en-face.png: shape {got.shape}, /en_face_db {want.shape}")
        worst = np.max(np.abs(got - want))
        if worst > 1:
            fail(f"en-face.png: worst grey difference {worst}")
        print(f"ok en-face.png: {im.mode} {im.size}, worst grey difference {worst:g}")


def check_sheet(sweepdir):
    report = json.load(open(f"{sweepdir}/sweep.json"))
    im = decode(f"{sweepdir}/contact-sheet.png")
    if im.mode != "RGB":
        fail(f"contact-sheet.png: mode {im.mode}")
    a = np.asarray(im).astype(int)
    for i, row in enumerate(report["rows"]):
        x, y, w, h = row["tile"]
        if x + w > im.size[0] or y + h > im.size[1]:
            fail(f"tile {i} {row['tile']} outside the {im.size} sheet")
        tile = a[y:y + h, x:x + w]
        # Thumbnails are grey (R = G = B) and show a B-scan, not a blank.
        if np.any(tile[..., 0] != tile[..., 1]) or np.any(tile[..., 1] != tile[..., 2]):
            fail(f"tile {i}: not grey")
        if tile[..., 0].std() < 1.0:
            fail(f"tile {i}: blank (sd {tile[..., 0].std():.2f})")
    # The best tile is framed in red just outside its edge.
    x, y, w, h = report["rows"][report["best"]]["tile"]
    edge = a[y - 2, x:x + w]
    red = np.mean((edge[:, 0] > 200) & (edge[:, 1] < 60) & (edge[:, 2] < 60))
    if red < 0.9:
        fail(f"best tile {report['best']} not framed in red ({red:.2f} of its top edge)")
    print(f"ok contact-sheet.png: {im.size}, {len(report['rows'])} tiles, best framed")


def check_plots(paths):
    for p in paths:
        im = decode(p)
        if im.mode != "RGB":
            fail(f"{p}: mode {im.mode}")
        a = np.asarray(im)
        if a.std() < 5:
            fail(f"{p}: nearly blank")
        print(f"ok {p}: {im.size}")


if __name__ == "__main__":
    kind = sys.argv[1]
    if kind == "bscans":
        check_bscans(sys.argv[2])
    elif kind == "sheet":
        check_sheet(sys.argv[2])
    elif kind == "plot":
        check_plots(sys.argv[2:])
    else:
        fail(f"unknown kind {kind}")
