"""fringeflow: spectral-domain OCT reconstruction on NumPy arrays.

A thin binding over the fringeflow core (the library the ``fringeflow``
command runs): the same pipeline files and checks, the same numbers. The
computation releases the GIL and runs in parallel (rayon).

Typical use::

    import fringeflow as ff
    cap = ff.Capture("sample-data/layered-phantom.h5")
    rec = ff.Reconstructor(ff.Pipeline.from_file("pipelines/default.toml"), capture=cap)
    bscan_db = rec.db(cap.frame(0))          # depth × A-lines, float32 dB
    depth_um = rec.depth_um

Research tool, not a diagnostic device.
"""

from __future__ import annotations

import json as _json
import os as _os
from typing import Any, Dict, Iterable, List, Optional, Sequence, Union

import numpy as _np

from . import _native
from ._errors import ArrayError, CaptureError, FringeflowError, PipelineError, SceneError

__version__ = _native.version()
__all__ = [
    "Pipeline", "Capture", "Reconstructor", "PositionResult", "run", "simulate",
    "measure_psf", "measure_rolloff", "design", "calibrate_wavelength", "estimate_dispersion",
    "FringeflowError", "PipelineError", "CaptureError", "ArrayError", "SceneError",
]

PathLike = Union[str, "_os.PathLike[str]"]


def _native_order(a: Any) -> _np.ndarray:
    """The array in native byte order (a copy only when it is not)."""
    a = _np.asarray(a)
    if a.dtype.byteorder not in ("=", "|") and a.dtype.byteorder != ("<" if _np.little_endian else ">"):
        a = a.astype(a.dtype.newbyteorder("="))
    return a


class Pipeline:
    """Every stage's settings: from a TOML file, TOML text or a dict.

    Validation and errors are those of pipeline files (``PipelineError``,
    a ``ValueError``, naming the file, line and ``section.key``)."""

    def __init__(self, _native_pipeline: Optional[_native.Pipeline] = None):
        self._p = _native_pipeline if _native_pipeline is not None else _native.Pipeline()

    @classmethod
    def from_file(cls, path: PathLike) -> "Pipeline":
        return cls(_native.Pipeline.from_file(_os.fspath(path)))

    @classmethod
    def from_toml(cls, text: str, name: str = "<string>") -> "Pipeline":
        return cls(_native.Pipeline.from_toml(text, name))

    @classmethod
    def from_dict(cls, sections: Dict[str, Dict[str, Any]]) -> "Pipeline":
        return cls(_native.Pipeline.from_json(_json.dumps(sections)))

    def to_dict(self) -> Dict[str, Dict[str, Any]]:
        """Every setting, defaults filled in (as log.json records it)."""
        return _json.loads(self._p.to_json())

    @property
    def sha256(self) -> str:
        return self._p.sha256

    def __repr__(self) -> str:
        return f"Pipeline(sha256={self.sha256[:12]}…)"


def _pipeline(p: Union[None, Pipeline, PathLike, Dict[str, Any]]) -> Optional[_native.Pipeline]:
    if p is None:
        return None
    if isinstance(p, Pipeline):
        return p._p
    if isinstance(p, dict):
        return Pipeline.from_dict(p)._p
    return Pipeline.from_file(p)._p


class Capture:
    """A capture file, opened read-only and checked as ``fringeflow run``
    checks it (``CaptureError``, an ``OSError``, when it cannot be used).
    Frames are read one at a time, when asked for."""

    def __init__(self, path: PathLike, pipeline: Union[None, Pipeline, PathLike, Dict[str, Any]] = None):
        self._c = _native.Capture(_os.fspath(path), _pipeline(pipeline))

    path = property(lambda self: self._c.path)
    frames = property(lambda self: self._c.frames, doc="B-scans in the capture")
    alines = property(lambda self: self._c.alines, doc="A-lines per B-scan")
    pixels = property(lambda self: self._c.pixels, doc="camera pixels per spectrum")
    dtype = property(lambda self: self._c.dtype, doc="stored sample type")
    wavelength_nm = property(lambda self: self._c.wavelength_nm, doc="per-pixel wavelength, nm")
    background = property(lambda self: self._c.background, doc="mean blocked-arm spectrum, or None")

    @property
    def scan(self) -> Dict[str, float]:
        """Scan attributes (``aline_period_us``, ``frame_period_us``,
        ``aline_spacing_um``, ``frame_spacing_um``) the capture records."""
        return _json.loads(self._c.scan_json())

    def frame(self, index: int) -> _np.ndarray:
        """B-scan ``index`` as stored: A-lines × pixels."""
        return self._c.frame(index)

    def __len__(self) -> int:
        return self.frames

    def __getitem__(self, index: int) -> _np.ndarray:
        if index < 0:
            index += self.frames
        return self.frame(index)

    def __iter__(self):
        return (self.frame(i) for i in range(self.frames))

    def __repr__(self) -> str:
        return f"Capture({self.path!r}: {self.frames} × {self.alines} × {self.pixels} {self.dtype})"


class PositionResult:
    """One position's repeats through registration, averaging, Doppler and
    angiography: ``structure_db`` (depth × A-lines), ``doppler_mm_s`` (or
    None), ``angiography`` {method: image}, ``angiography_en_face``
    {method: row}, ``shifts`` (list of dicts), ``warnings``."""

    def __init__(self, structure_db, doppler_mm_s, angio, shifts_json, warnings):
        self.structure_db = structure_db
        self.doppler_mm_s = doppler_mm_s
        self.angiography = {m: img for m, img, _ in angio}
        self.angiography_en_face = {m: row for m, _, row in angio}
        self.shifts = _json.loads(shifts_json)
        self.warnings = list(warnings)


class Reconstructor:
    """A pipeline planned once for one spectrometer (resampling tables,
    dispersion phase, window), then applied to any number of frames.

    Plan from a ``capture`` (its wavelength map, background and scan
    timing; an ``auto`` dispersion is estimated from it) or from a bare
    ``wavelength_nm`` map (and ``background``)."""

    def __init__(self, pipeline: Union[None, Pipeline, PathLike, Dict[str, Any]] = None, capture: Optional[Capture] = None,
                 wavelength_nm: Optional[Sequence[float]] = None, background: Optional[Sequence[float]] = None):
        wl = None if wavelength_nm is None else [float(v) for v in _np.asarray(wavelength_nm, dtype=float)]
        bg = None if background is None else [float(v) for v in _np.asarray(background, dtype=float)]
        self._r = _native.Reconstructor(_pipeline(pipeline), capture._c if capture is not None else None, wl, bg)

    @property
    def depth_um(self) -> _np.ndarray:
        """Depth of each output row, µm (single pass, in air)."""
        return self._r.depth_um

    @property
    def summary(self) -> Dict[str, Any]:
        """What the planner derived (k range, FFT length, depth spacing…)."""
        return _json.loads(self._r.summary_json())

    @property
    def pipeline(self) -> Dict[str, Any]:
        """The pipeline as planned (an ``auto`` dispersion resolved)."""
        return _json.loads(self._r.pipeline_json())

    @property
    def dispersion_estimate(self) -> Optional[Dict[str, Any]]:
        t = self._r.dispersion_estimate_json()
        return None if t is None else _json.loads(t)

    def db(self, frame: Any) -> _np.ndarray:
        """One frame (A-lines × pixels; uint8, uint16, int16, uint32,
        float32 or float64) to its B-scan in dB, depth × A-lines, float32:
        the values ``fringeflow run`` writes to volume.h5. A C-contiguous
        native-order array is read in place, without a copy."""
        return self._r.db(_native_order(frame))

    def db_stack(self, frames: Any) -> _np.ndarray:
        """Frames × A-lines × pixels to frames × depth × A-lines dB."""
        frames = _native_order(frames)
        if frames.ndim != 3:
            raise ArrayError(f"a stack must be 3-D (frames × A-lines × pixels), got shape {frames.shape}")
        return self._r.db_stack(frames)

    def complex(self, frame: Any) -> _np.ndarray:
        """One frame to its complex depth profile (depth × A-lines,
        complex64). Phase referred to the band's centre wavenumber k_c: a
        reflector at optical depth z has phase 2·k_c·z, growing with depth."""
        return self._r.complex(_native_order(frame))

    def position(self, repeats: Any) -> PositionResult:
        """The repeated B-scans of one position (repeats × A-lines ×
        pixels; as many as the pipeline's ``volume.average``)."""
        return PositionResult(*self._r.position(_native_order(repeats)))

    def time_in_memory(self, frames: Any, repeats: int = 3) -> float:
        """A-lines per second of the same reconstruction run inside Rust
        (no Python between frames): the reference for ``db``'s speed."""
        return self._r.time_in_memory(_native_order(frames), repeats)


def run(captures: Union[PathLike, Iterable[PathLike]], out: PathLike, pipeline=None, resume: bool = False) -> Dict[str, Any]:
    """``fringeflow run``: the same outputs (PNGs, volume.h5, log.json) and
    the batch summary, returned as a dict."""
    if isinstance(captures, (str, _os.PathLike)):
        captures = [captures]
    return _json.loads(_native.run([_os.fspath(c) for c in captures], _os.fspath(out), _pipeline(pipeline), resume))


def simulate(scene: Union[PathLike, str, Dict[str, Any]], out: PathLike) -> Dict[str, Any]:
    """Simulates a scene (a TOML file, TOML text or a dict) into the capture
    ``out`` (and its truth file); returns the ground truth."""
    name = "<scene>"
    if isinstance(scene, dict):
        text = _toml_of(scene)
        name = "scene dict"
    elif _os.path.exists(_os.fspath(scene)) and not str(scene).lstrip().startswith(("[", "seed", "frames")):
        name = _os.fspath(scene)
        with open(name, encoding="utf-8") as f:
            text = f.read()
    else:
        text = str(scene)
    return _json.loads(_native.simulate(text, _os.fspath(out), name))


def _toml_of(d: Dict[str, Any], prefix: str = "") -> str:
    """A small TOML writer for scene dicts (tables and arrays of tables)."""
    lines, tables = [], []
    for k, v in d.items():
        if isinstance(v, dict):
            tables.append((k, v))
        elif isinstance(v, list) and v and all(isinstance(x, dict) for x in v):
            tables.extend((k, x, True) for x in v)  # type: ignore[misc]
        else:
            lines.append(f"{k} = {_json.dumps(v)}")
    out = "\n".join(lines) + "\n"
    for t in tables:
        name = f"{prefix}{t[0]}"
        out += (f"[[{name}]]\n" if len(t) == 3 else f"[{name}]\n") + _toml_of(t[1], name + ".")
    return out


def measure_psf(path: PathLike, pipeline=None, frame: int = 0, group_index: float = 1.38) -> Dict[str, Any]:
    """``fringeflow measure psf --json``: FWHM (µm in air and in the medium),
    the coherence-length limit, side lobe, SNR."""
    return _json.loads(_native.measure_psf(_os.fspath(path), _pipeline(pipeline), frame, group_index))


def measure_rolloff(paths: Sequence[PathLike], pipeline=None, attenuation_db: Optional[float] = None) -> Dict[str, Any]:
    """``fringeflow measure rolloff --json``."""
    return _json.loads(_native.measure_rolloff([_os.fspath(p) for p in paths], _pipeline(pipeline), attenuation_db))


def design(centre_nm: float, fwhm_nm: float, span_nm: float, pixels: int, group_index: float = 1.38, resolution_nm: Optional[float] = None) -> Dict[str, Any]:
    """``fringeflow design --json``."""
    return _json.loads(_native.design(centre_nm, fwhm_nm, span_nm, pixels, group_index, resolution_nm))


def calibrate_wavelength(paths: Sequence[PathLike], centre_nm: Optional[float] = None, span_nm: Optional[float] = None,
                         depths_um: Optional[Sequence[float]] = None, decreasing: bool = False, degree: int = 3,
                         pipeline=None, frame: int = 0) -> Dict[str, Any]:
    """``fringeflow calibrate wavelength --json`` (nothing written)."""
    return _json.loads(_native.calibrate_wavelength([_os.fspath(p) for p in paths], centre_nm, span_nm,
                                                    None if depths_um is None else list(depths_um), decreasing, degree, _pipeline(pipeline), frame))


def estimate_dispersion(path: PathLike, pipeline=None, frame: Optional[int] = None) -> Dict[str, Any]:
    """``fringeflow dispersion estimate --json``."""
    return _json.loads(_native.estimate_dispersion(_os.fspath(path), _pipeline(pipeline), frame))
