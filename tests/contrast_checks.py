#!/usr/bin/env python3
"""Checks of fringeflow's complex output, Doppler flow, registration and
angiography, computed independently with NumPy/SciPy from what the run
wrote (read with h5py) and the simulator's ground truth.

Usage: contrast_checks.py CHECK ARGS...   (see each function)
Prints `measured: ...` lines with the figures; exits 1 when a check fails.
"""
import json
import sys

import h5py
import numpy as np
from scipy.ndimage import binary_dilation


def fail(msg):
    print(f"FAIL {msg}")
    sys.exit(1)


def load_log(outdir):
    return json.load(open(f"{outdir}/log.json"))


def complex_profile(outdir):
    with h5py.File(f"{outdir}/volume.h5", "r") as f:
        ds = f["complex_depth_profile"]
        # h5py maps the compound {r, i} of float32 to NumPy complex64.
        if ds.dtype != np.complex64:
            fail(f"complex_depth_profile has dtype {ds.dtype}, expected complex64")
        return ds[...]


def phase_convention(near_dir, far_dir, depth_um, step_um):
    """Mirror at depth_um (far) and depth_um - step_um (near, closer to the
    probe): the phase at the peak is 2·k_c·z (mod 2π), and moving towards the
    probe lowers it by 2·k_c·step."""
    near_dir, far_dir = near_dir, far_dir
    depth_um, step_um = float(depth_um), float(step_um)
    log = load_log(far_dir)
    d = log["derived"]
    kc = 0.5 * (d["k_min_per_um"] + d["k_max_per_um"])
    phases = []
    for outdir, z in [(far_dir, depth_um), (near_dir, depth_um - step_um)]:
        c = complex_profile(outdir)[0].astype(np.complex128)  # depth × A-lines
        amp = np.abs(c).mean(axis=1)
        pk = int(np.argmax(amp[5:])) + 5
        phi = np.angle(c[pk].mean())
        want = np.angle(np.exp(1j * 2 * kc * z))
        err = np.angle(np.exp(1j * (phi - want)))
        print(f"measured: mirror at {z:.3f} um, peak bin {pk}: phase {phi:+.4f} rad, 2*k_c*z mod 2pi {want:+.4f}, difference {err:+.4f} rad")
        if abs(err) > 0.1:
            fail(f"phase at the peak differs from 2*k_c*z by {err:.3f} rad")
        phases.append(phi)
    step = np.angle(np.exp(1j * (phases[1] - phases[0])))
    want = -2 * kc * step_um
    print(f"measured: moving {step_um} um towards the probe changes the phase by {step:+.4f} rad (expected {want:+.4f})")
    if abs(step - want) > 0.02 or np.sign(step) != np.sign(want):
        fail("phase step for motion towards the probe has the wrong size or sign")


def phase_noise(depth_um, *outdirs):
    """Static mirrors at several SNRs: standard deviation of the A-line to
    A-line phase difference against sqrt(2)/sqrt(SNR), SNR = |A|^2/sigma^2
    with sigma^2 the noise variance per quadrature."""
    depth_um = float(depth_um)
    rows = []
    for outdir in outdirs:
        c = complex_profile(outdir)[0].astype(np.complex128)
        sp = load_log(outdir)["derived"]["depth_spacing_um"]
        pk = int(round(depth_um / sp))
        amp = np.abs(c).mean(axis=1)
        pk = pk - 2 + int(np.argmax(amp[pk - 2:pk + 3]))
        a = c[pk]
        dphi = np.angle(a[1:] * np.conj(a[:-1]))
        noise = np.concatenate([c[pk + 40:pk + 120].ravel(), c[pk - 120:pk - 40].ravel()])
        sigma2 = np.mean(np.abs(noise) ** 2) / 2
        snr = np.mean(np.abs(a) ** 2) / sigma2
        theory = np.sqrt(2 / snr)
        rows.append((10 * np.log10(snr), dphi.std(), theory))
        print(f"measured: SNR {10 * np.log10(snr):5.1f} dB: phase-difference sd {dphi.std():.5f} rad, sqrt(2/SNR) {theory:.5f}, ratio {dphi.std() / theory:.3f}")
    span = max(r[0] for r in rows) - min(r[0] for r in rows)
    if span < 20:
        fail(f"SNR range {span:.1f} dB < 20 dB")
    for peak_over_noise_sd_db, sd, theory in rows:
        if abs(sd / theory - 1) > 0.2:
            fail(f"at {peak_over_noise_sd_db:.1f} dB the phase noise is {sd / theory:.3f} of sqrt(2/SNR)")


def profile_bins(v, t, vp):
    """Measured velocity v against the truth field t (same shape, NaN
    outside vessels) in ten bins of r^2/R^2 = 1 - t/vp: bin centres and means."""
    m = ~np.isnan(t) & ~np.isnan(v)
    u = 1 - t[m] / vp
    meas = v[m]
    idx = np.clip((u * 10).astype(int), 0, 9)
    xb = np.array([u[idx == b].mean() for b in range(10) if (idx == b).sum() > 5])
    yb = np.array([meas[idx == b].mean() for b in range(10) if (idx == b).sum() > 5])
    return xb, yb


def vessel_profile(outdir, truth_h5, truth_json):
    """Doppler of a simulated vessel against the Poiseuille truth: bins of
    r^2/R^2 (from the truth field), a line fit v = v0 + b*r^2/R^2."""
    with h5py.File(f"{outdir}/volume.h5", "r") as f:
        v = f["doppler_velocity_mm_s"][...]
    t = h5py.File(truth_h5, "r")["axial_velocity_mm_s"][...]
    vp = json.load(open(truth_json))["scan"]["vessels"][0]["peak_axial_velocity_mm_s"]
    d = min(v.shape[1], t.shape[1])
    xb, yb = profile_bins(v[:, :d], t[:, :d], vp)
    design = np.vstack([np.ones_like(xb), xb]).T
    coef = np.linalg.lstsq(design, yb, rcond=None)[0]
    pred = design @ coef
    r2 = 1 - ((yb - pred) ** 2).sum() / ((yb - yb.mean()) ** 2).sum()
    inner = xb < 0.5
    peak = np.linalg.lstsq(design[inner], yb[inner], rcond=None)[0][0]
    return vp, peak, r2, xb, yb


def doppler_vessel(outdir, truth_h5, truth_json):
    """Peak within 5 % with the right sign; parabolic profile, R^2 >= 0.95.
    The peak is the intercept of the fit over the inner half of r^2/R^2,
    where the blur of the resolution volume across the wall does not reach."""
    vp, peak, r2, xb, yb = vessel_profile(outdir, truth_h5, truth_json)
    log = load_log(outdir)
    lim = log["contrast"]["doppler"]["scale"]["aliasing_limit_mm_s"]
    print(f"measured: truth peak axial velocity {vp:+.4f} mm/s ({abs(vp) / lim:.3f} of the aliasing limit {lim:.3f} mm/s)")
    print(f"measured: recovered peak {peak:+.4f} mm/s, error {100 * (peak / vp - 1):+.2f} %; parabolic fit R^2 {r2:.4f}")
    print("measured: profile (r^2/R^2 : mm/s) " + " ".join(f"{x:.2f}:{y:+.2f}" for x, y in zip(xb, yb)))
    if np.sign(peak) != np.sign(vp):
        fail("wrong sign")
    if abs(peak / vp - 1) > 0.05:
        fail(f"peak off by {100 * (peak / vp - 1):.1f} %")
    if r2 < 0.95:
        fail(f"R^2 {r2:.3f} < 0.95")


def doppler_bulk(outdir, truth_h5):
    """With bulk axial motion: the mean residual phase of static tissue
    (pixels well away from the vessel, allowing for the drift) < 0.05 rad."""
    with h5py.File(f"{outdir}/volume.h5", "r") as f:
        v = f["doppler_velocity_mm_s"][...]
    t = h5py.File(truth_h5, "r")["axial_velocity_mm_s"][...]
    s = load_log(outdir)["contrast"]["doppler"]
    d = min(v.shape[1], t.shape[1])
    v, t = v[:, :d], t[:, :d]
    far = ~binary_dilation(~np.isnan(t), structure=np.ones((1, 61, 17), bool))
    static = far & ~np.isnan(v)
    sc = s["scale"]
    phase = v[static] * 4 * np.pi * sc["group_index"] * sc["period_us"] / sc["wavelength_nm"]
    removed = np.mean([np.mean(b) for b in s["bulk_phase_rad"]])
    print(f"measured: bulk phase removed {removed:+.4f} rad per A-line pair; static tissue residual mean {phase.mean():+.4f} rad (sd {phase.std():.3f}, {static.sum()} pixels)")
    if abs(phase.mean()) >= 0.05:
        fail(f"residual {phase.mean():.3f} rad")


def registration(outdir, truth_json, tolerance):
    """Every repeat's measured shift against the simulator's displacement."""
    tolerance = float(tolerance)
    log = load_log(outdir)
    sp = log["derived"]["depth_spacing_um"]
    frames = json.load(open(truth_json))["scan"]["frames"]
    worst = 0.0
    biggest = 0.0
    for s, tr in zip(log["contrast"]["registration"], frames):
        if s["repeat_peak"] is None:
            continue
        want = (tr["axial_um"] / sp, tr["lateral_px"])
        err = max(abs(s["axial_px"] - want[0]), abs(s["lateral_px"] - want[1]))
        worst = max(worst, err)
        biggest = max(biggest, abs(want[0]), abs(want[1]))
    print(f"measured: registration, largest true shift {biggest:.2f} px, worst error {worst:.3f} px")
    if biggest < 5:
        fail("the test's shifts are too small to mean anything")
    if worst > tolerance:
        fail(f"worst registration error {worst:.3f} px > {tolerance}")


def interface_width(outdir):
    """Median over the A-lines of every position of the brightest
    interface's equivalent width (pixels): the area of its amplitude over
    ±20 pixels around the peak, the noise mean removed, divided by the peak.
    A blurred or doubled interface is wider."""
    with h5py.File(f"{outdir}/volume.h5", "r") as f:
        db = f["volume_db"][...].astype(np.float64)
    amp = 10 ** (db / 20)
    widths = []
    for frame in amp:
        floor = np.median(frame)
        for a in range(5, frame.shape[1] - 5):
            p = frame[:, a] - floor
            i = int(np.argmax(p[25:-25])) + 25
            widths.append(p[i - 20:i + 21].clip(0).sum() / p[i])
    return float(np.median(widths))


def averaging(registered_dir, unregistered_dir):
    """Averaging 4 registered repeats lowers the noise sd by 10*log10(4) +- 1
    dB; without registration the interface is measurably wider."""
    rec = load_log(registered_dir)["averaging"]
    red = rec["noise_sd_reduction_db"]
    w_reg, w_raw = interface_width(registered_dir), interface_width(unregistered_dir)
    print(f"measured: noise sd reduction {red:.2f} dB with {rec['frames_per_position']} registered repeats (10*log10 N = {10 * np.log10(rec['frames_per_position']):.2f} dB)")
    print(f"measured: interface equivalent width {w_reg:.2f} px registered, {w_raw:.2f} px without registration")
    if abs(red - 10 * np.log10(rec["frames_per_position"])) > 1:
        fail("noise reduction off")
    if w_raw < 1.5 * w_reg:
        fail("the unregistered average is not measurably blurred")


def angiography(outdir, truth_h5, truth_json):
    """Decorrelation contrast (vessel / static tissue), en face vessel centre
    against the truth, and decorrelation and speckle variance recomputed
    with NumPy from the complex output and the structure image."""
    log = load_log(outdir)
    a = log["contrast"]["angiography"]
    thr = a["noise_bias_threshold_db"]
    t = h5py.File(truth_h5, "r")["axial_velocity_mm_s"][...]
    truth = json.load(open(truth_json))["scan"]["vessels"][0]
    with h5py.File(f"{outdir}/volume.h5", "r") as f:
        dec = f["angiography_decorrelation"][...]
        sv = f["angiography_speckle_variance"][...]
        en = f["angiography_decorrelation_en_face"][...]
        structure = f["volume_db"][...]
        c = f["complex_depth_profile"][...].astype(np.complex128)
    d = min(dec.shape[1], t.shape[1])
    vessel = ~np.isnan(t[:, :d])
    far = ~binary_dilation(vessel, structure=np.ones((1, 21, 9), bool))
    dv, ds = dec[:, :d], dec[:, :d]
    inside = np.nanmean(np.where(vessel, dv, np.nan))
    static = np.nanmean(np.where(far, ds, np.nan))
    print(f"measured: decorrelation mean {inside:.4f} in the vessel, {static:.4f} in static tissue: contrast {inside / static:.2f}x")
    if inside < 5 * static:
        fail("contrast below 5x")

    # En face: per position, centroid of the half-maximum region of the
    # row (baseline removed, 9-point moving average), then a straight line
    # through the positions (the simulated vessel is straight).
    centres, truths = [], []
    for p, row in enumerate(en):
        r = np.nan_to_num(row - np.nanmedian(row))
        r = np.convolve(r, np.ones(9) / 9, "same")
        pk = int(np.argmax(r))
        lo, hi = pk, pk
        while lo > 0 and r[lo - 1] > 0.5 * r[pk]:
            lo -= 1
        while hi < len(r) - 1 and r[hi + 1] > 0.5 * r[pk]:
            hi += 1
        x = np.arange(lo, hi + 1)
        centres.append((x * r[lo:hi + 1]).sum() / r[lo:hi + 1].sum())
        truths.append(truth["centre_per_position"][p]["aline"])
    pos = np.arange(len(centres))
    line = np.polyval(np.polyfit(pos, centres, 1), pos)
    err = np.abs(line - np.array(truths))
    print("measured: en face centre per position (fit / truth, A-lines) " + " ".join(f"{l:.2f}/{tt:.2f}" for l, tt in zip(line, truths)) + f"; worst {err.max():.2f} px")
    if err.max() > 1:
        fail("en face centre more than 1 px from the truth")

    # Independent recomputation (NumPy, float64) from the complex profiles.
    n = a["repeats_per_position"]
    worst_d = worst_s = 0.0
    for p in range(dec.shape[0]):
        amps = np.abs(c[p * n:(p + 1) * n])
        x, y = amps[:-1], amps[1:]
        ref_d = 1 - np.mean(x * y / (0.5 * (x ** 2 + y ** 2)), axis=0)
        ref_s = np.var(10 * np.log10(np.maximum(amps ** 2, 1e-24)), axis=0)
        level = a["noise_floor_db"][p] + thr
        mask = structure[p] < level
        # The log rounds the floor to 1e-6 dB: pixels that close to the
        # threshold may fall either way. Registration is off here, so there
        # is no wrapped margin.
        sure = np.abs(structure[p] - level) > 1e-5
        for ours, ref, name in [(dec[p], ref_d, "decorrelation"), (sv[p], ref_s, "speckle variance")]:
            if not np.array_equal(np.isnan(ours)[sure], mask[sure]):
                fail(f"{name}: masked pixels differ from the threshold's")
            ok = ~np.isnan(ours)
            rel = np.abs(ours[ok] - ref[ok]) / np.maximum(np.abs(ref[ok]), 1e-3)
            if name == "decorrelation":
                worst_d = max(worst_d, rel.max())
            else:
                worst_s = max(worst_s, rel.max())
    print(f"measured: NumPy recomputation, worst relative difference: decorrelation {worst_d:.2e}, speckle variance {worst_s:.2e}")
    if max(worst_d, worst_s) > 1e-4:
        fail("disagrees with the NumPy computation")


def _windows(n_out, k, n, lo):
    """Inclusive-exclusive ranges of k elements from lo[i], shifted inwards
    to fit in n (all of n when k > n): the kernel rule of docs/contrast.md."""
    lo = np.asarray(lo)
    hi = np.minimum(lo + k, n)
    lo = np.minimum(np.maximum(hi - k, 0), lo)
    return lo, hi


def kasai_numpy(c, kd, ka, bulk=None):
    """Kasai velocity phase (rad) of one position's repeats c (R, depth,
    A-lines), pairs of neighbouring A-lines, as documented: the value on
    A-line a sums the ka pairs (m, m+1) from m = a - ka//2, the depth
    kernel the kd pixels from d - (kd-1)//2, every repeat's pairs together;
    `bulk` (R, pairs) is removed from each pair first. Returns the phase
    and the kernel-mean power."""
    c = c.astype(np.complex128)
    R, depth, alines = c.shape
    p = c[:, :, 1:] * np.conj(c[:, :, :-1])
    if bulk is not None:
        p = p * np.exp(-1j * bulk)[:, None, :]
    w = 0.5 * (np.abs(c[:, :, 1:]) ** 2 + np.abs(c[:, :, :-1]) ** 2)
    p, w = p.sum(0), w.sum(0)
    slots = alines - 1
    d0, d1 = _windows(depth, kd, depth, np.maximum(np.arange(depth) - (kd - 1) // 2, 0))
    s0, s1 = _windows(alines, ka, slots, np.maximum(np.arange(alines) - ka // 2, 0))
    def box(x):
        cd = np.concatenate([np.zeros((1, slots), x.dtype), np.cumsum(x, axis=0)])
        xd = cd[d1] - cd[d0]
        cs = np.concatenate([np.zeros((depth, 1), x.dtype), np.cumsum(xd, axis=1)], axis=1)
        return cs[:, s1] - cs[:, s0]
    n = (d1 - d0)[:, None] * (s1 - s0)[None, :] * R
    return np.angle(box(p)), box(w) / n


def position_inputs(outdir):
    log = load_log(outdir)
    d = log["contrast"]["doppler"]
    per = log["pipeline"]["volume"]["average"]
    cfg = log["pipeline"]["doppler"]
    return log, d, per, cfg


def doppler_numpy(outdir):
    """fringeflow's velocity (bulk correction off) against the NumPy Kasai
    above on the run's own complex64 output: within 1e-5 of the aliasing
    limit on every pixel fringeflow did not mask."""
    log, d, per, cfg = position_inputs(outdir)
    if cfg["bulk_correction"]:
        fail("run with doppler.bulk_correction = false")
    sc = d["scale"]
    c = complex_profile(outdir)
    with h5py.File(f"{outdir}/volume.h5", "r") as f:
        v = f["doppler_velocity_mm_s"][...]
    k = sc["wavelength_nm"] / (4 * np.pi * sc["group_index"] * sc["period_us"])
    worst, compared = 0.0, 0
    for pos in range(v.shape[0]):
        phase, _ = kasai_numpy(c[pos * per:(pos + 1) * per], cfg["kernel_depth_px"], cfg["kernel_alines"])
        ok = ~np.isnan(v[pos])
        diff = np.abs(v[pos][ok] - k * phase[ok])
        # A phase of ±π may land on either side.
        diff = np.minimum(diff, np.abs(diff - 2 * np.pi * k))
        worst = max(worst, diff.max() / sc["aliasing_limit_mm_s"])
        compared += ok.sum()
    # The same with the window one A-line later (the old placement) must not agree.
    phase_late, _ = kasai_numpy(c[0:per][:, :, 1:], cfg["kernel_depth_px"], cfg["kernel_alines"])
    ok = ~np.isnan(v[0][:, :-1])
    late = np.abs(v[0][:, :-1][ok] - k * phase_late[ok]).max() / sc["aliasing_limit_mm_s"]
    print(f"measured: velocity vs NumPy Kasai on {compared} unmasked pixels: worst difference {worst:.2e} of the aliasing limit; "
          f"against a window one A-line later {late:.2e}")
    if worst > 1e-5:
        fail(f"differs from the NumPy Kasai by {worst:.2e} of the aliasing limit")
    if late < 1e-3:
        fail("a window one A-line later agrees as well: the check cannot tell the placement")


def static_only_bulk(c, truth_static, min_weight, pool):
    """Bulk phase per (repeat, pair): arg of the sum of P over the bright
    pixels that the simulator's truth calls static, pooled over `pool` pairs
    centred on each (clipped at the ends)."""
    p = c[:, :, 1:].astype(np.complex128) * np.conj(c[:, :, :-1].astype(np.complex128))
    static = truth_static[:, 1:] & truth_static[:, :-1]
    keep = (np.abs(p) >= min_weight) & static[None]
    per_pair = np.where(keep, p, 0).sum(axis=1)  # (R, pairs)
    half = pool // 2
    cs = np.concatenate([np.zeros((p.shape[0], 1), complex), np.cumsum(per_pair, axis=1)], axis=1)
    idx = np.arange(per_pair.shape[1])
    lo, hi = np.maximum(idx - half, 0), np.minimum(idx + half + 1, per_pair.shape[1])
    return np.angle(cs[:, hi] - cs[:, lo])


def _peak(v, t, vp):
    """The vessel's peak as doppler_vessel takes it: the intercept of a
    line fit over the inner half of r^2/R^2."""
    xb, yb = profile_bins(v, t, vp)
    design = np.vstack([np.ones_like(xb), xb]).T
    inner = xb < 0.5
    return np.linalg.lstsq(design[inner], yb[inner], rcond=None)[0][0]


def bulk_static(outdir, truth_h5, truth_json, tolerance):
    """The bulk correction fringeflow applied against one voted by the
    static tissue alone (the simulator's truth: pixels outside every
    vessel), the same pool and threshold, recomputed with NumPy on the
    run's complex output: the vessel's recovered peak with each, and with
    no correction, must agree within `tolerance` (a fraction of the truth
    peak) between fringeflow's and the static-only one."""
    tolerance = float(tolerance)
    log, d, per, cfg = position_inputs(outdir)
    sc = d["scale"]
    c = complex_profile(outdir)
    with h5py.File(f"{outdir}/volume.h5", "r") as f:
        v = f["doppler_velocity_mm_s"][...]
    t = h5py.File(truth_h5, "r")["axial_velocity_mm_s"][...]
    vp = json.load(open(truth_json))["scan"]["vessels"][0]["peak_axial_velocity_mm_s"]
    depth = v.shape[1]
    t = t[:, :depth]
    k = sc["wavelength_nm"] / (4 * np.pi * sc["group_index"] * sc["period_us"])
    static_v = np.full(v.shape, np.nan)
    none_v = np.full(v.shape, np.nan)
    for pos in range(v.shape[0]):
        cp = c[pos * per:(pos + 1) * per]
        floor_power = 10 ** (log["frames"][pos]["noise_floor_db"] / 10)
        min_weight = floor_power * 10 ** (cfg["threshold_db"] / 10)
        bulk = static_only_bulk(cp, np.isnan(t[pos]), min_weight, cfg["bulk_pool_pairs"])
        ok = ~np.isnan(v[pos])
        ph, _ = kasai_numpy(cp, cfg["kernel_depth_px"], cfg["kernel_alines"], bulk)
        static_v[pos][ok] = k * ph[ok]
        ph, _ = kasai_numpy(cp, cfg["kernel_depth_px"], cfg["kernel_alines"])
        none_v[pos][ok] = k * ph[ok]
    ours, static, none = _peak(v, t, vp), _peak(static_v, t, vp), _peak(none_v, t, vp)
    gap = abs(ours - static) / abs(vp)
    print(f"measured: vessel peak (truth {vp:+.4f} mm/s): fringeflow's bulk correction {ours:+.4f}, static-only vote {static:+.4f}, "
          f"no correction {none:+.4f}; fringeflow vs static-only {100 * gap:.2f} % of the peak "
          f"(correction moves the peak {100 * (ours / none - 1):+.2f} %, static-only {100 * (static / none - 1):+.2f} %)")
    if gap > tolerance:
        fail(f"bulk correction differs from the static-only vote by {100 * gap:.2f} % of the peak")


def doppler_wavelength(outdir, centre_nm, fwhm_nm):
    """λ0 of the velocity scale against the power-weighted centroid of the
    simulated source (Gaussian in k, centre and FWHM as given) on the run's
    wavenumber grid times its Hann window, k = sum k F^2 / sum F^2: within 0.1 %."""
    centre_nm, fwhm_nm = float(centre_nm), float(fwhm_nm)
    log = load_log(outdir)
    der = log["derived"]
    k = np.linspace(der["k_min_per_um"], der["k_max_per_um"], der["k_samples"])
    k0 = 2 * np.pi / (centre_nm * 1e-3)
    dk = 2 * np.pi * fwhm_nm * 1e-3 / (centre_nm * 1e-3) ** 2
    f = np.exp(-4 * np.log(2) * ((k - k0) / dk) ** 2) * np.hanning(len(k))
    kbar = (k * f ** 2).sum() / (f ** 2).sum()
    want = 2 * np.pi / kbar * 1e3
    sc = log["contrast"]["doppler"]["scale"]
    got = sc["wavelength_nm"]
    middle = sc["band_centre_wavelength_nm"]
    print(f"measured: lambda0 used {got:.3f} nm, power-weighted centroid {want:.3f} nm ({100 * (got / want - 1):+.3f} %); band middle {middle:.3f} nm ({100 * (middle / want - 1):+.3f} %)")
    if abs(got / want - 1) > 1e-3:
        fail(f"lambda0 {got:.3f} nm is {100 * (got / want - 1):+.3f} % off the centroid")
    if abs(middle / want - 1) < 3e-3:
        fail("the source is not off the band's middle: the check cannot tell them apart")


def phase_slope(near_dir, far_dir, step_um):
    """A mirror moved by step_um towards the probe: the amplitude-weighted
    phase change summed over the point-spread function (a Kasai sum over
    depth, all A-lines) is -2*k*step; k must be 2*pi/lambda0 of the run's
    Doppler scale within 0.1 %."""
    step_um = float(step_um)
    far, near = complex_profile(far_dir)[0].astype(np.complex128), complex_profile(near_dir)[0].astype(np.complex128)
    amp = np.abs(far).mean(axis=1)
    pk = int(np.argmax(amp[5:])) + 5
    sl = slice(max(pk - 12, 0), pk + 13)
    dphi = np.angle((near[sl] * np.conj(far[sl])).sum())
    k_meas = -dphi / (2 * step_um)
    lam = 2 * np.pi / k_meas * 1e3
    got = load_log(far_dir)["contrast"]["doppler"]["scale"]["wavelength_nm"]
    print(f"measured: phase change {dphi:+.5f} rad for {step_um} um: effective wavelength {lam:.3f} nm; lambda0 logged {got:.3f} nm ({100 * (got / lam - 1):+.3f} %)")
    if abs(got / lam - 1) > 1e-3:
        fail(f"lambda0 {got:.3f} nm is {100 * (got / lam - 1):+.3f} % off the measured {lam:.3f} nm")


if __name__ == "__main__":
    checks = {
        "phase-convention": phase_convention,
        "phase-noise": phase_noise,
        "doppler-vessel": doppler_vessel,
        "doppler-bulk": doppler_bulk,
        "registration": registration,
        "averaging": averaging,
        "angiography": angiography,
        "doppler-numpy": doppler_numpy,
        "bulk-static": bulk_static,
        "doppler-wavelength": doppler_wavelength,
        "phase-slope": phase_slope,
    }
    checks[sys.argv[1]](*sys.argv[2:])
