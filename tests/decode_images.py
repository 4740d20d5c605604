#!/usr/bin/env python3
"""Decodes every image fringeflow wrote with Pillow (an independent PNG
decoder) and checks it against the numbers it was made from.

Usage:
  decode_images.py bscans OUTPUT_DIR      B-scan PNGs and en-face.png against
                                          volume.h5 (h5py) under the grey
                                          levels log.json records
  decode_images.py sheet SWEEP_DIR        contact-sheet.png against sweep.json
  decode_images.py doppler OUTPUT_DIR     Doppler images against the velocity
                                          dataset and matplotlib's coolwarm
  decode_images.py plot PNG [PNG...]      plots: decode, RGB, not blank, with
                                          their provenance chunks
  decode_images.py calplot PNG CAL.json   the wavelength-calibration plot
                                          against its calibration file
  decode_images.py axes OUTPUT_DIR        volume.h5's dimension scales (h5py)
  decode_images.py scaled OUTPUT_DIR      bscan-NNNN-scaled.png: physical
                                          aspect, pHYs, scale bar, interface
                                          depth against volume.h5
  decode_images.py ome OUTPUT_DIR         volume.ome.tif (tifffile) against
                                          volume.h5: data and physical sizes

Every image's tEXt chunks (tool version, pipeline hash, depth spacing, dB
range) and pHYs pixel size are read with Pillow and checked against log.json.

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


def close(a, b, rel=1e-9):
    return abs(float(a) - float(b)) <= rel * max(abs(float(a)), abs(float(b)), 1e-300)


def check_provenance(im, name, log, black=None, white=None, pixel_um=None):
    """tEXt chunks (PNG specification 1.2, section 4.2.3.1) and pHYs
    (4.2.4.3): Pillow exposes the first in im.info by keyword and the
    second as im.info["dpi"] in dots per inch (pixels per metre x 0.0254)."""
    info = im.info
    want_sw = f"fringeflow {log['tool']['version']}"
    if info.get("Software") != want_sw:
        fail(f"{name}: Software chunk {info.get('Software')!r}, expected {want_sw!r}")
    if info.get("pipeline_sha256") != log["pipeline_sha256"]:
        fail(f"{name}: pipeline_sha256 chunk {info.get('pipeline_sha256')!r}, log.json {log['pipeline_sha256']!r}")
    if not close(info.get("depth_spacing_um", "nan"), log["derived"]["depth_spacing_um"]):
        fail(f"{name}: depth_spacing_um chunk {info.get('depth_spacing_um')!r}, log.json {log['derived']['depth_spacing_um']}")
    if not info.get("Description"):
        fail(f"{name}: no Description chunk")
    if black is not None and not (abs(float(info["black_db"]) - black) <= 5e-4 and abs(float(info["white_db"]) - white) <= 5e-4):
        fail(f"{name}: dB range chunks {info.get('black_db')}..{info.get('white_db')}, log.json {black}..{white}")
    lateral = pixel_of(log, 1.0)
    if lateral is None:
        if info.get("aline_spacing_um") != "unknown":
            fail(f"{name}: aline_spacing_um chunk {info.get('aline_spacing_um')!r}, expected 'unknown'")
    elif not close(info.get("aline_spacing_um", "nan"), lateral[0]):
        fail(f"{name}: aline_spacing_um chunk {info.get('aline_spacing_um')!r}, expected {lateral[0]}")
    if pixel_um is None:
        if "dpi" in info or "aspect" in info:
            fail(f"{name}: pHYs written though a step is unknown")
    else:
        if "dpi" not in info:
            fail(f"{name}: no pHYs chunk in metres")
        ppm = [d / 0.0254 for d in info["dpi"]]
        want = [1e6 / pixel_um[0], 1e6 / pixel_um[1]]
        # pHYs holds whole pixels per metre: within 0.5 of the exact value.
        if any(abs(g - w) > 0.5 + 1e-6 for g, w in zip(ppm, want)):
            fail(f"{name}: pHYs {ppm} px/m, expected {want} for {pixel_um} um pixels")


def pixel_of(log, down_um):
    across = log["pipeline"]["input"].get("aline_spacing_um") or log["input"].get("scan", {}).get("aline_spacing_um")
    return None if across is None or down_um is None else (across, down_um)


def en_face_pixel(log):
    """(A-line step, step between stored frames): frames that average
    `average` input frames, at `repeats_per_position` repeats a position,
    step by frame_spacing x average / repeats when repeats divides average."""
    scan = log["input"].get("scan", {})
    spacing, repeats = scan.get("frame_spacing_um"), round(scan.get("repeats_per_position", 1))
    average = log["pipeline"]["volume"]["average"]
    down = None if spacing is None or average % repeats else spacing * (average // repeats)
    return pixel_of(log, down)


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
    # The raw-pixel B-scans (the -scaled.png figures are checked by check_scaled).
    pngs = [o for o in log["outputs"] if o.endswith(".png") and o != "en-face.png" and not o.endswith("-scaled.png")]
    if len(pngs) != vol.shape[0]:
        fail(f"{len(pngs)} B-scan PNGs for {vol.shape[0]} frames")
    for rec, name in zip(log["frames"], pngs):
        im = decode(f"{outdir}/{name}")
        got = grey_array(im, bit_depth)
        want = expected_grey(vol[rec["index"]], rec["black_db"], rec["white_db"], max_grey)
        if got.shape != want.shape:
            fail(f"{name}: shape {got.shape}, volume frame {want.shape}")
        # The 8-bit writer maps in f32: a value on a rounding boundary may
        # land one level away; a packed volume is off by up to half its
        # step. Anything more is a format error.
        allowed = 1 + np.ceil(packing_db * max_grey / (rec["white_db"] - rec["black_db"]))
        worst = np.max(np.abs(got - want))
        if worst > allowed:
            fail(f"{name}: worst grey difference {worst} (bit depth {bit_depth})")
        check_provenance(im, name, log, rec["black_db"], rec["white_db"], pixel_of(log, log["derived"]["depth_spacing_um"]))
        print(f"ok {name}: {im.mode} {im.size}, worst grey difference {worst:g} of {max_grey}")
    if en_face is not None:
        rec = log["en_face"]
        im = decode(f"{outdir}/en-face.png")
        got = grey_array(im, bit_depth)
        want = expected_grey(en_face, rec["black_db"], rec["white_db"], max_grey)
        if got.shape != want.shape:
            fail(f"en-face.png: shape {got.shape}, /en_face_db {want.shape}")
        worst = np.max(np.abs(got - want))
        if worst > 1:
            fail(f"en-face.png: worst grey difference {worst}")
        check_provenance(im, "en-face.png", log, rec["black_db"], rec["white_db"], en_face_pixel(log))
        print(f"ok en-face.png: {im.mode} {im.size}, worst grey difference {worst:g}")


def check_sheet(sweepdir):
    report = json.load(open(f"{sweepdir}/sweep.json"))
    im = decode(f"{sweepdir}/contact-sheet.png")
    if im.mode != "RGB":
        fail(f"contact-sheet.png: mode {im.mode}")
    plot_provenance(im, "contact-sheet.png", report["pipeline_sha256"])
    crop = report["tile_crop"]
    zoom = crop["zoom"]
    if not close(im.text.get("depth_spacing_um", "nan"), crop["depth_spacing_um"] / zoom, 1e-6):
        fail(f"contact-sheet.png: depth_spacing_um {im.text.get('depth_spacing_um')} is not the crop's {crop['depth_spacing_um']} / {zoom}")
    # The tiles show the crop enlarged, not shrunk: zoom >= 1 screen pixel per
    # pixel, and the crop's depth range is what its pixels say.
    if zoom < 1:
        fail(f"tile zoom {zoom} shrinks the B-scan")
    span = crop["last_depth_um"] - crop["first_depth_um"]
    if not close(span, (crop["depth_pixels"] - 1) * crop["depth_spacing_um"], 1e-9):
        fail(f"crop depth range {span} um for {crop['depth_pixels']} pixels of {crop['depth_spacing_um']} um")
    if not (crop["first_depth_um"] <= crop["interface_depth_um"] <= crop["last_depth_um"]):
        fail(f"crop {crop['first_depth_um']}-{crop['last_depth_um']} um misses the interface at {crop['interface_depth_um']} um")
    a = np.asarray(im).astype(int)
    for i, row in enumerate(report["rows"]):
        x, y, w, h = row["tile"]
        if (w, h) != (crop["alines"] * zoom, crop["depth_pixels"] * zoom):
            fail(f"tile {i}: {w}x{h} is not the crop {crop['alines']}x{crop['depth_pixels']} at {zoom}x")
        if x + w > im.size[0] or y + h > im.size[1]:
            fail(f"tile {i} {row['tile']} outside the {im.size} sheet")
        tile = a[y:y + h, x:x + w]
        # Thumbnails are grey (R = G = B) and show a B-scan, not a blank.
        if np.any(tile[..., 0] != tile[..., 1]) or np.any(tile[..., 1] != tile[..., 2]):
            fail(f"tile {i}: not grey")
        if tile[..., 0].std() < 1.0:
            fail(f"tile {i}: blank (sd {tile[..., 0].std():.2f})")
    # In the best (sharpest) tile the brightest row, column by column, lies
    # near the interface the crop is centred on (within a sixth of the crop:
    # the surface is curved across the A-lines).
    x, y, w, h = report["rows"][report["best"]]["tile"]
    tile = a[y:y + h, x:x + w, 0].astype(float)
    want = (crop["interface_depth_um"] - crop["first_depth_um"]) / crop["depth_spacing_um"] * zoom
    got = float(np.median(np.argmax(tile[:, 20:], axis=0)))
    if abs(got - want) > h / 6:
        fail(f"best tile: brightest row {got} px, interface expected at {want:.1} px")
    # The best tile is framed in red just outside its edge.
    edge = a[y - 2, x:x + w]
    red = np.mean((edge[:, 0] > 200) & (edge[:, 1] < 60) & (edge[:, 2] < 60))
    if red < 0.9:
        fail(f"best tile {report['best']} not framed in red ({red:.2f} of its top edge)")
    print(f"ok contact-sheet.png: {im.size}, {len(report['rows'])} tiles at {zoom}x, interface row {got:.0f} (expected {want:.0f}), best framed")


def check_doppler(outdir):
    """Doppler PNGs against /doppler_velocity_mm_s under the logged range
    and matplotlib's "coolwarm" (Moreland 2009) as the independent map;
    masked (NaN) pixels black; the colour bar beside the B-scan."""
    import matplotlib
    cmap = matplotlib.colormaps["coolwarm"]
    log = json.load(open(f"{outdir}/log.json"))
    lim = log["contrast"]["doppler"]["velocity_range_mm_s"]
    with h5py.File(f"{outdir}/volume.h5", "r") as v:
        vel = v["doppler_velocity_mm_s"][...]
    worst = worst_bar = 0
    for p in range(vel.shape[0]):
        im = decode(f"{outdir}/doppler-{p:04d}.png")
        if im.mode != "RGB":
            fail(f"doppler-{p:04d}.png: mode {im.mode}")
        a = np.asarray(im).astype(int)
        depth, alines = vel[p].shape
        if a.shape[0] != depth or a.shape[1] <= alines:
            fail(f"doppler-{p:04d}.png: size {a.shape} for a {depth} x {alines} image")
        check_provenance(im, f"doppler-{p:04d}.png", log, pixel_um=pixel_of(log, log["derived"]["depth_spacing_um"]))
        part = a[:, :alines]
        nan = np.isnan(vel[p])
        if np.any(part[nan] != 0):
            fail("masked pixels are not black")
        # Our map indexes a 256-entry table; matplotlib's is the same map.
        idx = np.clip(np.round((vel[p][~nan] + lim) / (2 * lim) * 255), 0, 255) / 255
        want = (np.asarray(cmap(idx))[:, :3] * 255).round()
        worst = max(worst, np.abs(part[~nan] - want).max() if want.size else 0)
        # The bar: a column 12 pixels right of the B-scan, +lim at the top.
        bar = a[:, alines + 12]
        t = 1 - np.arange(depth) / (depth - 1)
        want_bar = (np.asarray(cmap(np.round(t * 255) / 255))[:, :3] * 255).round()
        worst_bar = max(worst_bar, np.abs(bar - want_bar).max())
    print(f"ok doppler PNGs: {vel.shape[0]} images, worst colour difference {worst:g} (B-scan), {worst_bar:g} (colour bar) of 255 against matplotlib coolwarm")
    # matplotlib's coolwarm linearly interpolates Moreland's 33-entry
    # table; ours evaluates his construction at every level, so a few
    # levels of difference are expected, more would be another map.
    if worst > 5 or worst_bar > 5:
        fail("colours differ from the cool-warm map")


def check_angiography(outdir):
    """Angiography PNGs against their datasets: 0 black, the logged white
    level (99.5th percentile) white, NaN black."""
    log = json.load(open(f"{outdir}/log.json"))
    a = log["contrast"]["angiography"]
    with h5py.File(f"{outdir}/volume.h5", "r") as v:
        for method, whites in a["white"]:
            data = v[f"angiography_{method}"][...]
            for p, white in enumerate(whites):
                im = decode(f"{outdir}/angiography-{method}-{p:04d}.png")
                got = grey_array(im, 8)
                d = data[p]
                want = np.where(np.isnan(d), 0, np.clip(np.round(np.nan_to_num(d) * 255 / white), 0, 255))
                worst = np.abs(got - want).max()
                if worst > 1:
                    fail(f"angiography-{method}-{p:04d}.png: worst grey difference {worst}")
                check_provenance(im, f"angiography-{method}-{p:04d}.png", log, pixel_um=pixel_of(log, log["derived"]["depth_spacing_um"]))
                if not close(im.info["white"], white, 1e-5):
                    fail(f"angiography-{method}-{p:04d}.png: white chunk {im.info['white']}, log.json {white}")
            en = decode(f"{outdir}/angiography-{method}-en-face.png")
            if en.size != (data.shape[2], data.shape[0]):
                fail(f"en face size {en.size}")
            check_provenance(en, f"angiography-{method}-en-face.png", log, pixel_um=en_face_pixel(log))
            print(f"ok angiography-{method}: {len(whites)} images and the en face decode to the dataset")


def plot_provenance(im, name, pipeline_sha256=None):
    t = im.text
    if not t.get("Software", "").startswith("fringeflow "):
        fail(f"{name}: Software chunk {t.get('Software')!r}")
    if not t.get("Description"):
        fail(f"{name}: no Description chunk")
    h = t.get("pipeline_sha256", "")
    if len(h) != 64 or any(c not in "0123456789abcdef" for c in h):
        fail(f"{name}: pipeline_sha256 {h!r}")
    if pipeline_sha256 is not None and h != pipeline_sha256:
        fail(f"{name}: pipeline_sha256 {h} but the report says {pipeline_sha256}")


def check_plots(paths):
    for p in paths:
        im = decode(p)
        if im.mode != "RGB":
            fail(f"{p}: mode {im.mode}")
        a = np.asarray(im)
        if a.std() < 5:
            fail(f"{p}: nearly blank")
        plot_provenance(im, p)
        print(f"ok {p}: {im.size}, {im.text['Description']!r}")


def check_calibration_plot(path, cal_path):
    cal = json.load(open(cal_path))
    im = decode(path)
    check_plots([path])
    if not close(im.text.get("fit_residual_rms_nm", "nan"), cal["fit_residual_rms_nm"], 1e-5):
        fail(f"{path}: fit_residual_rms_nm {im.text.get('fit_residual_rms_nm')} vs {cal['fit_residual_rms_nm']} in {cal_path}")
    # Three panels (map, change from nominal, residual) drawn: the picture
    # is taller than wide and ink reaches each third.
    a = np.asarray(im).astype(int)
    h = a.shape[0]
    for k in range(3):
        part = a[k * h // 3:(k + 1) * h // 3]
        if np.mean(part < 128) < 0.002:
            fail(f"{path}: panel {k + 1} is empty")
    print(f"ok {path}: residual RMS {im.text['fit_residual_rms_nm']} nm as in {cal_path}")


def check_axes(outdir):
    """volume.h5's axes as HDF5 dimension scales (HDF5 Dimension Scale
    Specification, The HDF Group 2005), read through h5py's `dims`: every
    image stack's dimensions are labelled and carry the axis datasets, each
    with a `units` attribute, and the axes' values follow log.json."""
    log = json.load(open(f"{outdir}/log.json"))
    dz = log["derived"]["depth_spacing_um"]
    lateral = pixel_of(log, 1.0)
    frame_step = en_face_pixel(log)
    with h5py.File(f"{outdir}/volume.h5", "r") as v:
        stacks = [n for n in v if v[n].ndim == 3]
        if "volume_db" not in stacks:
            fail("no /volume_db")
        for n in stacks:
            ds = v[n]
            labels = [d.label for d in ds.dims]
            # Labelled as the dataset's `axes` attribute names its axes
            # (per-position contrast stacks: position, depth, aline).
            axes = ds.attrs.get("axes", "frame,depth,aline")
            want = (axes.decode() if isinstance(axes, bytes) else axes).split(",")
            if labels != want or want[1:] != ["depth", "aline"]:
                fail(f"/{n}: dimension labels {labels}, axes attribute {want}")
            depth_scales = {s.name: s for s in ds.dims[1].values()}
            if "/depth_um" not in depth_scales:
                fail(f"/{n}: /depth_um not attached to its depth dimension")
            z = depth_scales["/depth_um"][...]
            if z.shape[0] != ds.shape[1] or depth_scales["/depth_um"].attrs["units"] != "um" or np.max(np.abs(np.diff(z) - dz)) > 1e-6 * dz:
                fail(f"/{n}: depth scale {z.shape} units {depth_scales['/depth_um'].attrs.get('units')} not {dz} um steps")
            aline_scales = {s.name: s for s in ds.dims[2].values()}
            if "/aline_index" not in aline_scales:
                fail(f"/{n}: /aline_index not attached")
            if lateral is not None:
                x = aline_scales.get("/aline_um")
                if x is None or x.attrs["units"] != "um" or np.max(np.abs(x[...] - np.arange(ds.shape[2]) * lateral[0])) > 1e-9:
                    fail(f"/{n}: lateral scale missing or not {lateral[0]} um steps")
            elif "/aline_um" in v:
                fail("/aline_um written though the lateral step is unknown")
            frame_scales = {s.name: s for s in ds.dims[0].values()}
            if ds.shape[0] == v["frame_index"].shape[0]:
                if "/frame_index" not in frame_scales:
                    fail(f"/{n}: /frame_index not attached")
                if frame_step is not None:
                    y = frame_scales.get("/position_um")
                    if y is None or np.max(np.abs(y[...] - np.arange(ds.shape[0]) * frame_step[1])) > 1e-9:
                        fail(f"/{n}: slow-axis scale missing or not {frame_step[1]} um steps")
            print(f"ok /{n}: dims {labels} with scales {[list(d.keys()) for d in ds.dims]}")
        for n in [n for n in v if v[n].ndim == 2]:
            axes = v[n].attrs.get("axes", "frame,aline")
            want = (axes.decode() if isinstance(axes, bytes) else axes).split(",")
            if [d.label for d in v[n].dims] != want or want[1] != "aline" or "/aline_index" not in [s.name for s in v[n].dims[1].values()]:
                fail(f"/{n}: en face dimensions not labelled as its axes attribute {want} or not scaled")
            print(f"ok /{n}: en face dims labelled")


def check_scaled(outdir):
    import glob
    log = json.load(open(f"{outdir}/log.json"))
    f = h5py.File(f"{outdir}/volume.h5", "r")
    v = f["volume_db"][()].astype(np.float64)
    dz = float(f["volume_db"].attrs["depth_spacing_um"])
    dx = float(f["aline_um"][1] - f["aline_um"][0])
    paths = sorted(glob.glob(f"{outdir}/bscan-*-scaled.png"))
    if len(paths) != v.shape[0]:
        fail(f"{len(paths)} scaled PNGs for {v.shape[0]} frames")
    for k, p in enumerate(paths):
        im = decode(p)
        t = im.text
        px = float(t["pixel_um"] if "pixel_um" in t else t["depth_spacing_um"])
        w, h = (int(n) for n in t["bscan_size_px"].split("x"))
        # Physical aspect: the B-scan part spans the volume's width and depth.
        if abs(w * px - v.shape[2] * dx) > px or abs(h * px - v.shape[1] * dz) > px:
            fail(f"{p}: {w}x{h} px of {px} um is not {v.shape[2]} x {dx} um by {v.shape[1]} x {dz} um")
        # pHYs: pixels per metre, the same across and down (Pillow gives dpi).
        dpi = im.info.get("dpi")
        if dpi is None or abs(dpi[0] / 0.0254 - 1e6 / px) > 1 or abs(dpi[1] / 0.0254 - 1e6 / px) > 1:
            fail(f"{p}: pHYs {dpi} dpi, expected {1e6 / px:.1f} px/m")
        a = np.asarray(im.convert("RGB")).astype(int)
        # The scale bar: white pixels along its row for its length in pixels.
        bx, by, n = (int(s) for s in t["scale_bar_px"].split(","))
        run = np.sum(np.all(a[by, bx:bx + n + 1] == 255, axis=1))
        if abs(run - n) > 1 or abs(n * px - float(t["scale_bar_um"])) > 0.02 * float(t["scale_bar_um"]):
            fail(f"{p}: scale bar {run} white px of {n}, {n * px:.1f} um for a label of {t['scale_bar_um']} um")
        # The brightest row of the B-scan part lies where the volume's
        # brightest depth is, under the same levels.
        r = log["frames"][k]
        grey = expected_grey(v[k], r["black_db"], r["white_db"], 255)
        z_volume = np.argmax(grey.mean(axis=1)) * dz
        z_image = np.argmax(a[:h - 24, :w, 0].mean(axis=1)) * px
        if abs(z_volume - z_image) > 3 * max(dz, px):
            fail(f"{p}: brightest depth {z_image:.1f} um in the image, {z_volume:.1f} um in the volume")
        print(f"ok {p}: {w}x{h} px of {px:.3f} um, scale bar {t['scale_bar_um']} um, brightest depth {z_image:.1f} um (volume {z_volume:.1f})")


def check_ome(outdir, expect=()):
    """expect: "AXIS=µm" pairs the scene set (X lateral, Z slow axis): those
    PhysicalSizes must be written and equal them."""
    import xml.etree.ElementTree as ET
    import tifffile
    f = h5py.File(f"{outdir}/volume.h5", "r")
    ds = f["volume_db"]
    v = ds[()].astype(np.float64)
    if "scale_factor" in ds.attrs:
        v = v * ds.attrs["scale_factor"] + ds.attrs["add_offset"]
    with tifffile.TiffFile(f"{outdir}/volume.ome.tif") as t:
        if not t.is_ome:
            fail("volume.ome.tif: not recognised as OME-TIFF by tifffile")
        s = t.series[0]
        if s.axes != "ZYX" or s.shape != v.shape:
            fail(f"volume.ome.tif: axes {s.axes} shape {s.shape}, volume.h5 {v.shape}")
        a = s.asarray().astype(np.float64)
        xml = ET.fromstring(t.ome_metadata)
    worst = float(np.max(np.abs(a - v) / np.maximum(np.abs(v), 1e-30)))
    if worst > 1e-6:
        fail(f"volume.ome.tif data differ from volume.h5 by {worst:.2e} relative")
    ns = {"o": "http://www.openmicroscopy.org/Schemas/OME/2016-06"}
    px = xml.find("o:Image/o:Pixels", ns)
    want = {"Y": float(ds.attrs["depth_spacing_um"])}
    for axis, name in (("X", "aline_um"), ("Z", "position_um")):
        if name in f:
            want[axis] = float(f[name][1] - f[name][0])
    for axis in "XYZ":
        got = px.get(f"PhysicalSize{axis}")
        unit = px.get(f"PhysicalSize{axis}Unit", "µm")
        if axis in want:
            if got is None or unit != "µm" or not close(got, want[axis], 1e-6):
                fail(f"PhysicalSize{axis} {got} {unit}, expected {want[axis]} µm")
        elif got is not None:
            fail(f"PhysicalSize{axis} {got} written though the step is unknown")
    for pair in expect:
        axis, um = pair.split("=")
        got = px.get(f"PhysicalSize{axis}")
        if got is None or not close(got, float(um), 1e-6):
            fail(f"PhysicalSize{axis} {got}, the scene's step is {um} µm")
    print(f"ok volume.ome.tif: {s.axes} {s.shape}, data within {worst:.1e}, sizes {want} µm")


if __name__ == "__main__":
    kind = sys.argv[1]
    if kind == "bscans":
        check_bscans(sys.argv[2])
    elif kind == "sheet":
        check_sheet(sys.argv[2])
    elif kind == "angiography":
        check_angiography(sys.argv[2])
    elif kind == "doppler":
        check_doppler(sys.argv[2])
    elif kind == "axes":
        check_axes(sys.argv[2])
    elif kind == "scaled":
        check_scaled(sys.argv[2])
    elif kind == "ome":
        check_ome(sys.argv[2], sys.argv[3:])
    elif kind == "plot":
        check_plots(sys.argv[2:])
    elif kind == "calplot":
        check_calibration_plot(sys.argv[2], sys.argv[3])
    else:
        fail(f"unknown kind {kind}")
