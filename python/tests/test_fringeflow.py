"""The Python package against the command line on the same captures: the
same bits, the same errors, the same measurements; zero-copy input, the GIL
released while Rust computes, h5py in the same process.

The CLI is `$FRINGEFLOW_BIN` (make test points it at target/release/fringeflow).
Files the CLI writes are read with h5py (an independent reader).
"""
import json
import os
import subprocess
import sys
import threading
import time
from pathlib import Path

import numpy as np
import pytest

import fringeflow as ff

ROOT = Path(__file__).resolve().parents[2]
BIN = os.environ.get("FRINGEFLOW_BIN", str(ROOT / "target" / "release" / "fringeflow"))
SAMPLE = ROOT / "sample-data" / "layered-phantom.h5"
ENV = dict(os.environ, HDF5_USE_FILE_LOCKING="FALSE")


def cli(*args, check=True):
    o = subprocess.run([BIN, *map(str, args)], capture_output=True, text=True, env=ENV)
    if check and o.returncode != 0:
        raise AssertionError(f"{args}: {o.stderr}")
    return o


def cli_error(*args):
    o = cli(*args, check=False)
    assert o.returncode != 0
    line = [l for l in o.stderr.splitlines() if l.startswith("fringeflow: error: ")][0]
    return o.returncode, line[len("fringeflow: error: "):]


PIPELINES = {
    "default": "",
    "linear-hamming": '[k_linearization]\nmethod = "linear"\n[window]\nkind = "hamming"\n',
    "cubic-dispersion-blackman": '[dispersion]\na2 = 25.0\na3 = -6.0\n[window]\nkind = "blackman"\n',
    "median-tukey-padded": '[background]\nmethod = "median"\n[window]\nkind = "tukey"\n[fft]\nzero_padding = 2\n',
    "gaussian-none-bg": '[background]\nmethod = "mean"\n[window]\nkind = "gaussian"\n',
    "no-window": '[window]\nkind = "none"\n',
}


@pytest.mark.parametrize("name", sorted(PIPELINES))
def test_reconstruction_equals_the_cli_bit_for_bit(tmp_path, name):
    import h5py
    p = tmp_path / f"{name}.toml"
    p.write_text(PIPELINES[name])
    cli("run", SAMPLE, "--pipeline", p, "--out", tmp_path / "out", "--quiet")
    with h5py.File(tmp_path / "out" / "layered-phantom" / "volume.h5", "r") as f:
        vol = f["volume_db"][...]
        depth_um = f["depth_um"][...]
    cap = ff.Capture(SAMPLE)
    rec = ff.Reconstructor(ff.Pipeline.from_file(p), capture=cap)
    stack = rec.db_stack(np.stack([cap.frame(i) for i in range(cap.frames)]))
    assert stack.dtype == np.float32 and stack.shape == vol.shape
    assert np.array_equal(stack, vol), f"{name}: max |diff| {np.abs(stack - vol).max()}"
    assert np.array_equal(rec.depth_um, depth_um)
    # One frame at a time gives the same bits.
    assert np.array_equal(rec.db(cap.frame(1)), vol[1])


def test_a_contiguous_uint16_frame_is_not_copied_and_other_layouts_still_work():
    cap = ff.Capture(SAMPLE)
    frame = cap.frame(0)
    assert frame.dtype == np.uint16 and frame.flags.c_contiguous
    assert ff._native._input_address(frame) == frame.ctypes.data, "the core saw a copy"
    rec = ff.Reconstructor(capture=cap)
    want = rec.db(frame)
    fortran = np.asfortranarray(frame)
    assert not fortran.flags.c_contiguous
    assert np.array_equal(rec.db(fortran), want)
    big = frame.astype(">u2")
    assert big.dtype.byteorder == ">"
    assert np.array_equal(rec.db(big), want)
    strided = np.zeros((frame.shape[0], frame.shape[1] * 2), np.uint16)
    strided[:, ::2] = frame
    assert np.array_equal(rec.db(strided[:, ::2]), want)
    # Every supported dtype of the same counts gives (nearly) the same image.
    for dt in (np.float32, np.float64, np.uint32):
        assert np.allclose(rec.db(frame.astype(dt)), want, atol=1e-3)


def test_errors_are_the_documented_classes_with_the_cli_messages(tmp_path):
    bad = tmp_path / "bad.toml"
    bad.write_text('[window]\nkind = "hann"\nwidht = 3\n')
    code, message = cli_error("run", SAMPLE, "--pipeline", bad, "--out", tmp_path / "o")
    assert code == 2
    with pytest.raises(ff.PipelineError) as e:
        ff.Pipeline.from_file(bad)
    assert str(e.value) == message
    assert isinstance(e.value, ValueError) and isinstance(e.value, ff.FringeflowError)
    with pytest.raises(ff.PipelineError, match="fft.zero_padding"):
        ff.Pipeline.from_dict({"fft": {"zero_padding": 0}})
    with pytest.raises(ff.PipelineError, match="unknown key"):
        ff.Pipeline.from_dict({"fft": {"zero_pading": 2}})
    missing = tmp_path / "missing.h5"
    code, message = cli_error("run", missing, "--out", tmp_path / "o")
    with pytest.raises(ff.CaptureError) as e:
        ff.Capture(missing)
    assert str(e.value) == message and isinstance(e.value, OSError)
    rec = ff.Reconstructor(capture=ff.Capture(SAMPLE))
    with pytest.raises(ff.ArrayError, match="pixels per spectrum"):
        rec.db(np.zeros((16, 100), np.uint16))
    with pytest.raises(ff.ArrayError, match="uint8, uint16"):
        rec.db(np.zeros((16, 2048), np.complex64))
    with pytest.raises(ff.ArrayError, match="2-D"):
        rec.db(np.zeros((2, 16, 2048), np.uint16))
    nan = np.ones((8, 2048), np.float32)
    nan[5, 17] = np.nan
    with pytest.raises(ff.ArrayError, match=r"NaN or infinite value in the frame \(A-line 5, pixel 17\)"):
        rec.db(nan)


def test_the_gil_is_released_while_rust_computes():
    cap = ff.Capture(SAMPLE)
    rec = ff.Reconstructor(capture=cap)
    frames = np.stack([cap.frame(0)] * 4)
    ticks = [0]
    running = threading.Event()

    def count():
        running.set()
        while running.is_set():
            ticks[0] += 1

    t = threading.Thread(target=count)
    t.start()
    running.wait()
    # Let the counter settle into its loop, then measure during a long call.
    time.sleep(0.05)
    before = ticks[0]
    start = time.perf_counter()
    rec.time_in_memory(frames, 200)
    busy = time.perf_counter() - start
    during = ticks[0] - before
    running.clear()
    t.join()
    print(f"python thread counted {during} during {busy:.2f} s of reconstruction")
    assert busy > 0.2, "the call was too short to tell"
    # With the GIL held the counter would stand still for the whole call.
    assert during > 1000, during


@pytest.mark.parametrize("order", ["h5py-first", "fringeflow-first"])
def test_works_with_h5py_in_one_process(tmp_path, order):
    imports = "import h5py, fringeflow" if order == "h5py-first" else "import fringeflow, h5py"
    script = f"""
{imports}
import numpy as np
out = {str(tmp_path)!r}
fringeflow.run({str(SAMPLE)!r}, out)
with h5py.File(out + '/layered-phantom/volume.h5', 'r') as f:
    vol = f['volume_db'][...]
cap = fringeflow.Capture({str(SAMPLE)!r})
assert np.array_equal(fringeflow.Reconstructor(capture=cap).db(cap.frame(0)), vol[0])
# A capture h5py wrote, read by fringeflow.
with h5py.File(out + '/mine.h5', 'w') as f:
    f['fringes'] = cap.frame(0)[None]
    f['wavelength_nm'] = cap.wavelength_nm
print(fringeflow.Capture(out + '/mine.h5').frames)
"""
    o = subprocess.run([sys.executable, "-c", script], capture_output=True, text=True, env=ENV)
    assert o.returncode == 0, o.stderr
    assert o.stdout.strip() == "1"


def test_measurements_agree_with_the_cli_json(tmp_path):
    scene = (ROOT / "sample-data" / "bench-mirror.toml").read_text()
    truth = ff.simulate(scene, tmp_path / "mirror.h5")
    assert truth["coherence_length_um"] > 0
    psf_cli = json.loads(cli("measure", "psf", tmp_path / "mirror.h5", "--json", "--plot", tmp_path / "psf.png").stdout)
    psf = ff.measure_psf(tmp_path / "mirror.h5")
    for key in ("fwhm_um_air", "fwhm_um_medium", "peak_depth_um", "peak_over_noise_sd_db", "fwhm_over_limit"):
        assert psf[key] == psf_cli[key], key
    design_cli = json.loads(cli("design", "--centre-nm", 840, "--fwhm-nm", 50, "--span-nm", 150, "--pixels", 2048, "--json").stdout)
    assert ff.design(840, 50, 150, 2048) == design_cli
    est_cli = json.loads(cli("dispersion", "estimate", SAMPLE, "--json").stdout)
    est = ff.estimate_dispersion(SAMPLE)
    for key in ("a2_rad", "a3_rad", "entropy", "frame"):
        assert est[key] == est_cli[key], key


def test_simulate_from_a_dict_and_read_lazily(tmp_path):
    scene = {
        "seed": 3, "frames": 3, "alines": 16, "background_lines": 4,
        "spectrometer": {"pixels": 256, "start_nm": 800.0, "stop_nm": 880.0},
        "reflector": [{"depth_um": 200.0, "reflectivity": 1e-4}],
    }
    ff.simulate(scene, tmp_path / "d.h5")
    cap = ff.Capture(tmp_path / "d.h5")
    assert (cap.frames, cap.alines, cap.pixels, cap.dtype) == (3, 16, 256, "u16")
    assert len(list(cap)) == 3 and cap[-1].shape == (16, 256)
    with pytest.raises(IndexError):
        cap.frame(3)
    assert cap.background.shape == (256,)
    with pytest.raises(ff.SceneError, match="frames"):
        ff.simulate({"frames": 0}, tmp_path / "e.h5")


def test_flow_images_equal_the_cli_angiography(tmp_path):
    import h5py
    scene = (ROOT / "sample-data" / "flow-phantom.toml").read_text().replace("frames = 32", "frames = 8")
    ff.simulate(scene, tmp_path / "flow.h5")
    p = tmp_path / "flow.toml"
    p.write_text('[volume]\naverage = 4\n[doppler]\nenabled = true\n[angiography]\nmethods = ["decorrelation", "speckle_variance"]\n')
    cli("run", tmp_path / "flow.h5", "--pipeline", p, "--out", tmp_path / "out", "--quiet")
    cap = ff.Capture(tmp_path / "flow.h5")
    rec = ff.Reconstructor(ff.Pipeline.from_file(p), capture=cap)
    with h5py.File(tmp_path / "out" / "flow" / "volume.h5", "r") as f:
        for position in range(2):
            r = rec.position(np.stack([cap.frame(position * 4 + i) for i in range(4)]))
            assert np.array_equal(r.structure_db, f["volume_db"][position])
            for m in ("decorrelation", "speckle_variance"):
                assert np.array_equal(r.angiography[m], f[f"angiography_{m}"][position], equal_nan=True), m
            assert np.array_equal(r.doppler_mm_s, f["doppler_velocity_mm_s"][position], equal_nan=True)
    cpx = rec.complex(cap.frame(0))
    assert cpx.dtype == np.complex64 and cpx.shape == (len(rec.depth_um), cap.alines)


def test_reconstruction_runs_near_the_rust_in_memory_rate():
    """Reported, not a speed target (speed targets live in the benchmark):
    Python calling `db` frame by frame against the same loop inside Rust."""
    cap = ff.Capture(SAMPLE)
    rec = ff.Reconstructor(capture=cap)
    frames = [cap.frame(i) for i in range(cap.frames)]
    rust = rec.time_in_memory(np.stack(frames), 10)
    start = time.perf_counter()
    for _ in range(10):
        for fr in frames:
            rec.db(fr)
    py = 10 * len(frames) * cap.alines / (time.perf_counter() - start)
    print(f"python {py:.0f} A-lines/s, rust in memory {rust:.0f} A-lines/s, ratio {py / rust:.3f}")
    assert py > 0 and rust > 0


def test_rolloff_and_wavelength_calibration_agree_with_the_cli_json(tmp_path):
    mirrors = []
    base = (ROOT / "sample-data" / "bench-mirror.toml").read_text()
    for d in (300, 700, 1100):
        ff.simulate(base.replace("depth_um = 300.0", f"depth_um = {d}.0"), tmp_path / f"m{d}.h5")
        mirrors.append(tmp_path / f"m{d}.h5")
    r_cli = json.loads(cli("measure", "rolloff", *mirrors, "--json", "--plot", tmp_path / "r.png").stdout)
    r = ff.measure_rolloff(mirrors)
    assert r["fit"] == r_cli["fit"]
    cal = ROOT / "sample-data" / "calibration"
    for s in ("mirror-250um", "mirror-700um"):
        ff.simulate(cal / f"{s}.toml", tmp_path / f"{s}.h5")
    caps = [tmp_path / "mirror-250um.h5", tmp_path / "mirror-700um.h5"]
    c_cli = json.loads(cli("calibrate", "wavelength", *caps, "--centre-nm", "838.0", "--span-nm", "150", "--out", tmp_path / "cal.json", "--json").stdout)
    c = ff.calibrate_wavelength(caps, centre_nm=838.0, span_nm=150)
    assert c["wavelength_nm"] == c_cli["wavelength_nm"] and c["fit_residual_rms_nm"] == c_cli["fit_residual_rms_nm"]


def test_declared_sizes_larger_than_memory_raise_instead_of_killing_python(tmp_path):
    """Small files (chunked, nothing written) declaring a background of
    2·10¹⁰ values, a wavelength map of 10¹⁰, one frame of 10¹² and a
    5·10⁷-pixel plan: each raises CaptureError or PipelineError with the
    figures in an interpreter limited to 4 GB of address space, where an
    allocation would abort it. Run in a child interpreter so that a crash
    fails this test instead of ending pytest."""
    import h5py

    wl = 800 + 0.05 * np.arange(2048)
    with h5py.File(tmp_path / "background.h5", "w") as f:
        f.create_dataset("fringes", shape=(2, 64, 2048), dtype="u2", chunks=(1, 64, 2048))
        f["wavelength_nm"] = wl
        f.create_dataset("background", shape=(10_000_000, 2048), dtype="u2", chunks=(1, 2048))
    with h5py.File(tmp_path / "map.h5", "w") as f:
        f.create_dataset("fringes", shape=(2, 64, 2048), dtype="u2", chunks=(1, 64, 2048))
        f.create_dataset("wavelength_nm", shape=(10_000_000_000,), dtype="f8", chunks=(4096,))
    with h5py.File(tmp_path / "frame.h5", "w") as f:
        f.create_dataset("fringes", shape=(1, 1_000_000, 1_000_000), dtype="u2", chunks=(1, 1, 4096))
        f.create_dataset("wavelength_nm", shape=(1_000_000,), dtype="f8", chunks=(4096,))
    n = 50_000_000
    with h5py.File(tmp_path / "wide.h5", "w") as f:
        f.create_dataset("fringes", shape=(1, 2, n), dtype="u2", chunks=(1, 1, 1 << 20))
        f["wavelength_nm"] = 800 + (100.0 / n) * np.arange(n)
    script = f"""
import resource, sys
resource.setrlimit(resource.RLIMIT_AS, (4_000_000_000, 4_000_000_000))
import fringeflow as ff
d = {str(tmp_path)!r}
for name, make in [
    ("background", lambda: ff.Capture(d + "/background.h5")),
    ("map", lambda: ff.Capture(d + "/map.h5")),
    ("frame", lambda: ff.Capture(d + "/frame.h5").frame(0)),
    ("wide", lambda: ff.Reconstructor(capture=ff.Capture(d + "/wide.h5"))),
]:
    try:
        make()
        print(name, "NO ERROR")
    except ff.FringeflowError as e:
        print(name, type(e).__name__, str(e).replace(chr(10), " "))
"""
    o = subprocess.run([sys.executable, "-c", script], capture_output=True, text=True, env=ENV, timeout=300)
    assert o.returncode == 0, o.stderr
    lines = dict(l.split(" ", 1) for l in o.stdout.splitlines())
    assert lines["background"].startswith("CaptureError") and "20480000000 values" in lines["background"], o.stdout
    assert lines["map"].startswith("CaptureError") and "10000000000 values" in lines["map"], o.stdout
    assert lines["frame"].startswith("CaptureError") and "one frame of dataset" in lines["frame"], o.stdout
    assert lines["wide"].startswith("PipelineError") and "FFT of 50000000" in lines["wide"], o.stdout
    for name in ("background", "map", "frame", "wide"):
        assert "GB of memory" in lines[name] and "available" in lines[name], lines[name]


def test_captures_in_other_formats_open_as_in_the_cli(tmp_path):
    """A .npy (Fortran order, big-endian) and a raw dump with frame headers
    open through ff.Capture with a pipeline describing them: the same
    frames as the HDF5 original, and a reconstruction equal to the CLI's."""
    import h5py
    with h5py.File(SAMPLE, "r") as f:
        spectra, wl = f["/fringes"][...], f["/wavelength_nm"][...]
    np.save(tmp_path / "scan.npy", np.asfortranarray(spectra.astype(">u2")))
    np.savetxt(tmp_path / "wl.txt", wl, fmt="%.17g")
    with open(tmp_path / "dump.bin", "wb") as out:
        for frame in spectra:
            out.write(b"\x00" * 32)
            out.write(frame.astype("<u2").tobytes())
    npy = tmp_path / "npy.toml"
    npy.write_text('[background]\nmethod = "median"\n[input]\nwavelength_file = "wl.txt"\n')
    raw = tmp_path / "raw.toml"
    raw.write_text('[background]\nmethod = "median"\n[input]\nwavelength_file = "wl.txt"\nsample_type = "u16"\npixels = 2048\nalines_per_frame = 256\nframe_header_bytes = 32\n')
    for capture, pipeline in [(tmp_path / "scan.npy", npy), (tmp_path / "dump.bin", raw)]:
        p = ff.Pipeline.from_file(pipeline)
        cap = ff.Capture(capture, p)
        assert cap.frames == 2
        for i in range(2):
            assert np.array_equal(cap.frame(i), spectra[i])
        cli("run", capture, "--pipeline", pipeline, "--out", tmp_path / "out", "--quiet")
        with h5py.File(tmp_path / "out" / capture.stem / "volume.h5", "r") as f:
            vol = f["volume_db"][...]
        rec = ff.Reconstructor(p, capture=cap)
        assert np.array_equal(rec.db_stack(np.stack([cap.frame(i) for i in range(cap.frames)])), vol)
