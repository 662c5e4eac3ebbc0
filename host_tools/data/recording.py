"""Recordings: read WAV, CSV and .npy accelerometer files with their sidecar JSON; write WAV.

Every recording file has a sidecar beside it: same stem, extension `.json` (`pump.wav` ->
`pump.json`), holding one JSON object:

    m_s2_per_unit   required  physical acceleration (m/s^2) per sample unit of the file
    sample_rate_hz  required for CSV without a time column and for .npy; optional for WAV
                    (WAV stores an integer rate; a sidecar value may refine it but must round to it)
    m_s2_per_count  optional  the device counts scale to convert to (see "Counts" below)
    full_scale      optional  the sensor's full scale in the file's units (e.g. 4095 for 13-bit
                    data stored as int16, 16.0 for float data in g)
    t0_s            optional  start time of the first frame, seconds on the gateway's clock
    rpm             optional  shaft speed, r/min (null when unknown or changing)
    vane_count      optional  impeller vanes (names the vane-pass line)
    axes            optional  one name per channel (default "x", "y", "z", then "a3", ...)
    plant, machine  optional  labels; a stream must not mix machines
Other keys are kept in `Recording.sidecar` untouched.

Formats
- WAV: RIFF/WAVE, little-endian, PCM int16 or int32, IEEE float32 or float64 (format code 3),
  or WAVE_FORMAT_EXTENSIBLE (0xFFFE) wrapping one of those. One channel per axis. Read with
  scipy.io.wavfile, memory-mapped: samples are read from disk only where asked for.
- CSV: comma-separated, one header row of column names, then one row per frame. A column named
  `t_s` (seconds) is an optional time column: it fixes the sample rate (and t0_s when the sidecar
  has none); every other column is an axis, in order. Numbers written without '.', 'e' or
  'nan'/'inf' throughout make integer data; anything else is float data.
- .npy: a 1-D (one axis) or 2-D (frames x axes) array of an integer or float dtype, memory-mapped.

Streaming: open_recording / open_stream give RecordingFile objects (the header, the sidecar and
a memory map of the samples, no counts yet); RecordingFile.read_counts(start, stop) converts
only that stretch. read_recording / read_stream convert a whole file (a view of the file, not a
copy, for int16 data kept at its own scale). The checks of the conversion (finite values, int16
range) run on each stretch as it is read, so a long file is refused where its first bad sample is.

Counts: the device works on int16 counts (frames x axes) and a scale `m_s2_per_count`. The
counts scale is, in order of precedence: the caller's `m_s2_per_count` (for example the scale a
parameter set was trained on), the sidecar's `m_s2_per_count`, for integer data the file's own
unit (counts = samples unchanged), for float data the sidecar's `full_scale` (full scale = 32767
counts). Float data with none of these is refused, since there is no
honest way to guess a sensor's resolution. Conversion is counts = round-half-even(sample *
m_s2_per_unit / m_s2_per_count); a value that would fall outside -32768..32767 is refused (not
saturated), because silently clipped data would pass for a sensor at full scale.

Every error is an EdgevibError with one line that names the file; nothing is ever written to or
next to an input.
"""
from __future__ import annotations

import io
import json
import math
import os
import re
import struct
import tempfile
import threading
import warnings
from dataclasses import dataclass, field, fields
from pathlib import Path
from contextlib import contextmanager
from typing import Any, BinaryIO, Iterable, Iterator

import numpy as np
from scipy.io import wavfile

from host_tools.errors import EdgevibError

RECORDING_SUFFIXES = (".wav", ".csv", ".npy")
TIME_COLUMN = "t_s"
_INT16_MIN, _INT16_MAX = -32768, 32767
_WAV_DTYPES = ("int16", "int32", "float32", "float64")
_RATE_REL_TOL = 1e-6


@dataclass(frozen=True, kw_only=True)
class RecordingHeader:
    """What Recording and RecordingFile both know of a recording: its file, the counts scale
    (m/s^2 per count), sample rate, axis names and the sidecar's labels (t0_s is None when the
    sidecar gives no start time). Keyword-only, so that each subclass adds its samples by name."""

    path: Path
    m_s2_per_count: float
    sample_rate_hz: float
    axes: tuple[str, ...]
    t0_s: float | None = None
    rpm: float | None = None
    vane_count: int | None = None
    plant: str | None = None
    machine: str | None = None
    sidecar: dict[str, Any] = field(default_factory=dict)

    @property
    def duration_s(self) -> float:
        return self.n_frames / self.sample_rate_hz


@dataclass(frozen=True, kw_only=True)
class Recording(RecordingHeader):
    """One recording as the device would see it.

    counts: int16 array, frames x axes (C order). Physical acceleration in m/s^2 is
    counts * m_s2_per_count.
    """

    counts: np.ndarray

    @property
    def n_frames(self) -> int:
        return int(self.counts.shape[0])

    def read_counts(self, start: int = 0, stop: int | None = None) -> np.ndarray:
        """counts[start:stop], as RecordingFile.read_counts gives them."""
        return self.counts[start:stop]

    def accel_m_s2(self) -> np.ndarray:
        """Acceleration in m/s^2 (float64, frames x axes)."""
        return self.counts.astype(np.float64) * self.m_s2_per_count


def sidecar_path(path: str | os.PathLike) -> Path:
    """The sidecar JSON of a recording file: same folder and stem, `.json`."""
    return Path(path).with_suffix(".json")


def open_recording(
    path: str | os.PathLike,
    expected_rate_hz: float | None = None,
    m_s2_per_count: float | None = None,
) -> "RecordingFile":
    """Open one recording and its sidecar without converting its samples (see read_recording)."""
    p = Path(path)
    suffix = p.suffix.lower()
    if not p.exists():
        raise EdgevibError(f"{p}: no such file or folder")
    if suffix not in RECORDING_SUFFIXES:
        raise EdgevibError(f"{p}: unknown recording format {p.suffix!r} (use .wav, .csv or .npy)")
    if not p.is_file():
        raise EdgevibError(f"{p}: not a file")
    meta = _read_sidecar(p)
    rate: float | None
    if suffix == ".wav":
        data, rate, is_float = _read_wav(p)
    elif suffix == ".csv":
        data, rate, is_float, t_first = _read_csv(p)
        if t_first is not None and "t0_s" not in meta:
            meta["t0_s"] = t_first
    else:
        data, rate, is_float = _read_npy(p)
    rate = _resolve_rate(p, rate, meta.get("sample_rate_hz"), from_wav=suffix == ".wav")
    if expected_rate_hz is not None and not math.isclose(rate, expected_rate_hz, rel_tol=_RATE_REL_TOL):
        raise EdgevibError(f"{p}: sample rate {rate:g} Hz does not match the expected {expected_rate_hz:g} Hz")
    if data.shape[0] == 0:
        raise EdgevibError(f"{p}: recording holds no samples")
    axes = _axis_names(p, meta.get("axes"), data.shape[1])
    scale = m_s2_per_count if m_s2_per_count is not None else meta.get("m_s2_per_count")
    if scale is None:
        if not is_float:
            scale = meta["m_s2_per_unit"]
        elif meta.get("full_scale") is not None:
            scale = meta["full_scale"] * meta["m_s2_per_unit"] / _INT16_MAX
        else:
            raise EdgevibError(f"{p}: float samples need full_scale or m_s2_per_count (the counts scale) in the sidecar")
    return RecordingFile(
        path=p, samples=data, is_float=is_float, m_s2_per_unit=float(meta["m_s2_per_unit"]),
        m_s2_per_count=float(scale), sample_rate_hz=rate, axes=axes, t0_s=meta.get("t0_s"),
        rpm=meta.get("rpm"), vane_count=meta.get("vane_count"), plant=meta.get("plant"),
        machine=meta.get("machine"), sidecar=meta)


def read_recording(
    path: str | os.PathLike,
    expected_rate_hz: float | None = None,
    m_s2_per_count: float | None = None,
) -> Recording:
    """Read one recording and its sidecar.

    expected_rate_hz: if given, a recording at another rate is refused (relative tolerance 1e-6).
    m_s2_per_count: if given, counts are produced at this scale (m/s^2 per count).
    """
    return open_recording(path, expected_rate_hz, m_s2_per_count).load()


@dataclass(frozen=True, kw_only=True)
class RecordingFile(RecordingHeader):
    """One recording file opened for streaming: its header, sidecar and samples in the file's own
    numbers (frames x channels; a memory map for WAV and .npy), is_float and m_s2_per_unit as the
    file stores them. m_s2_per_count is the counts scale read_counts converts to (rules in the
    module docstring)."""

    samples: np.ndarray
    is_float: bool
    m_s2_per_unit: float

    @property
    def n_frames(self) -> int:
        return int(self.samples.shape[0])

    @property
    def sample_format(self) -> str:
        """The samples' type in the file: int16, int32, float32, ..."""
        return self.samples.dtype.name

    def read_counts(self, start: int = 0, stop: int | None = None) -> np.ndarray:
        """int16 counts (frames x axes) of frames start..stop-1; refused where the conversion
        would clip or meets a NaN (EdgevibError naming the file and frame)."""
        start, stop, _ = slice(start, stop).indices(self.n_frames)
        return _to_counts(self.path, self._frames(start, stop), self.is_float, self.m_s2_per_unit,
                          self.m_s2_per_count, start)

    def _frames(self, start: int, stop: int) -> np.ndarray:
        """Samples of frames start..stop-1. From a file, they are read into a new array rather
        than touched through the memory map: pages touched in a map stay in the process's resident
        memory, which would then grow with the length read."""
        s = self.samples
        if isinstance(s, np.memmap) and s.filename and s.flags.c_contiguous and stop > start:
            cols = s.shape[1]
            with open(s.filename, "rb") as f:
                f.seek(s.offset + start * cols * s.dtype.itemsize)
                return np.fromfile(f, dtype=s.dtype, count=(stop - start) * cols).reshape(-1, cols)
        return s[start:stop]

    def load(self) -> Recording:
        """The whole recording, converted."""
        return Recording(counts=self.read_counts(), **{f.name: getattr(self, f.name) for f in fields(RecordingHeader)})


def open_stream(
    sources: str | os.PathLike | Iterable[str | os.PathLike],
    expected_rate_hz: float | None = None,
    m_s2_per_count: float | None = None,
) -> list[RecordingFile]:
    """Open the recordings of one gateway as one stream, ordered by t0_s (see read_stream)."""
    if isinstance(sources, (str, os.PathLike)):
        sources = [sources]
    files: list[Path] = []
    for s in sources:
        s = Path(s)
        if s.is_dir():
            found = sorted(q for q in s.iterdir() if q.suffix.lower() in RECORDING_SUFFIXES and q.is_file())
            if not found:
                raise EdgevibError(f"{s}: folder holds no .wav, .csv or .npy recordings")
            files.extend(found)
        elif not s.exists():
            raise EdgevibError(f"{s}: no such file or folder")
        else:
            files.append(s)
    recs = [open_recording(f, expected_rate_hz, m_s2_per_count) for f in files]
    if len(recs) == 1:
        return recs
    starts: list[float] = []
    for r in recs:
        if r.t0_s is None:
            raise EdgevibError(f"{r.path}: sidecar has no t0_s, needed to order a stream of {len(recs)} recordings")
        starts.append(r.t0_s)
    order = sorted(range(len(recs)), key=starts.__getitem__)
    recs = [recs[i] for i in order]
    starts = [starts[i] for i in order]
    first = recs[0]
    for i in range(1, len(recs)):
        prev, r = recs[i - 1], recs[i]
        if not math.isclose(r.sample_rate_hz, first.sample_rate_hz, rel_tol=_RATE_REL_TOL):
            raise EdgevibError(f"{r.path}: sample rate {r.sample_rate_hz:g} Hz differs from {first.path} ({first.sample_rate_hz:g} Hz)")
        if r.axes != first.axes:
            raise EdgevibError(f"{r.path}: axes {list(r.axes)} differ from {first.path} {list(first.axes)}")
        if not math.isclose(r.m_s2_per_count, first.m_s2_per_count, rel_tol=1e-9):
            raise EdgevibError(f"{r.path}: counts scale {r.m_s2_per_count:g} m/s^2 differs from {first.path} ({first.m_s2_per_count:g})")
        if r.machine is not None and first.machine is not None and r.machine != first.machine:
            raise EdgevibError(f"{r.path}: machine {r.machine!r} differs from {first.path} ({first.machine!r}); one stream is one gateway")
        if starts[i] < starts[i - 1] + prev.duration_s - 0.5 / r.sample_rate_hz:
            raise EdgevibError(f"{r.path}: starts at t0_s={starts[i]:g} s, before {prev.path} ends")
    return recs


def read_stream(
    sources: str | os.PathLike | Iterable[str | os.PathLike],
    expected_rate_hz: float | None = None,
    m_s2_per_count: float | None = None,
) -> list[Recording]:
    """Read the recordings of one gateway as one stream, ordered by t0_s.

    sources: a folder (every .wav/.csv/.npy file in it, not recursive), one file, or a list of
    files and folders. With more than one recording every one needs t0_s; all must share the
    sample rate, axis names and counts scale, must not overlap in time, and must not name
    different machines.
    """
    return [f.load() for f in open_stream(sources, expected_rate_hz, m_s2_per_count)]


def gap_free_groups(items: Iterable[Any], continuous: Any, fs_hz: float) -> list[list[Any]]:
    """Items in time order (t0_s, duration_s, s) grouped as replay joins them: a continuous one
    (continuous(item) true) that starts within half a sample of where the continuous one before it
    ends joins its group (host_tools.twin.replay, plan_chunks); every other item stands alone."""
    out: list[list[Any]] = []
    for r in items:
        last = out[-1][-1] if out else None
        if (last is not None and continuous(r) and continuous(last)
                and abs(last.t0_s + last.duration_s - r.t0_s) < 0.5 / fs_hz):
            out[-1].append(r)
        else:
            out.append([r])
    return out


def write_wav(path: str | os.PathLike, counts: np.ndarray, sample_rate_hz: float, sidecar: dict[str, Any]) -> Path:
    """Write int16 counts (frames x axes) as PCM WAV plus its sidecar, each atomically.

    The sidecar must hold m_s2_per_unit (m/s^2 per count here); sample_rate_hz is added (exact,
    while the WAV header holds it rounded to an integer). Each file goes to a temporary name in
    the same folder and is moved into place with os.replace, sidecar first: a reader never sees a
    half-written file, and a new WAV never appears without its sidecar. Returns the WAV path.
    """
    p = Path(path)
    if p.suffix.lower() != ".wav":
        raise EdgevibError(f"{p}: write_wav writes .wav files only")
    c = np.asarray(counts)
    if c.ndim == 1:
        c = c[:, None]
    if c.dtype != np.int16 or c.ndim != 2 or c.shape[0] == 0:
        raise EdgevibError(f"{p}: counts must be a non-empty int16 array, frames x axes (got {c.dtype}, shape {c.shape})")
    rate_int = int(round(sample_rate_hz))
    if rate_int < 1:
        raise EdgevibError(f"{p}: sample rate must be at least 1 Hz, got {sample_rate_hz}")
    meta = dict(sidecar)
    meta["sample_rate_hz"] = float(sample_rate_hz)
    _validate_sidecar(sidecar_path(p), meta)
    _axis_names(p, meta.get("axes"), c.shape[1])
    buf = io.BytesIO()
    wavfile.write(buf, rate_int, np.ascontiguousarray(c))
    atomic_write(sidecar_path(p), (json.dumps(meta, indent=1, sort_keys=True) + "\n").encode())
    atomic_write(p, buf.getvalue())
    return p


def atomic_write(path: Path, data: bytes) -> None:
    """Write data to path whole (see atomic_open)."""
    with atomic_open(path) as f:
        f.write(data)


@contextmanager
def atomic_open(path: str | os.PathLike) -> Iterator[BinaryIO]:
    """A binary file to write into, which appears at path whole when the block ends without an
    error: a temporary file in the same folder, fsync, then os.replace (an error removes it).
    The file gets the mode a plain open() would give it (0666 less the umask), not mkstemp's 0600."""
    path = Path(path)
    fd, tmp = tempfile.mkstemp(dir=path.parent, prefix="." + path.name + ".", suffix=".tmp")
    try:
        os.fchmod(fd, 0o666 & ~current_umask())
        with os.fdopen(fd, "wb") as f:
            yield f
            f.flush()
            os.fsync(f.fileno())
        os.replace(tmp, path)
    except BaseException:
        os.unlink(tmp)
        raise


def current_umask() -> int:
    """The process's umask (read by setting it and putting it back at once)."""
    mask = os.umask(0o022)
    os.umask(mask)
    return mask


# --- sidecar -----------------------------------------------------------------------------------

def _read_sidecar(p: Path) -> dict[str, Any]:
    sp = sidecar_path(p)
    if not sp.is_file():
        raise EdgevibError(f"{p}: missing sidecar {sp.name} (needs at least m_s2_per_unit)")
    try:
        meta = json.loads(sp.read_text(encoding="utf-8"))
    except (ValueError, UnicodeDecodeError) as e:
        raise EdgevibError(f"{sp}: sidecar is not valid JSON ({e})") from None
    if not isinstance(meta, dict):
        raise EdgevibError(f"{sp}: sidecar must be a JSON object")
    _validate_sidecar(sp, meta)
    return meta


def _is_number(v: Any) -> bool:
    return isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v)


def _validate_sidecar(sp: Path, meta: dict[str, Any]) -> None:
    if "m_s2_per_unit" not in meta:
        raise EdgevibError(f"{sp}: sidecar lacks m_s2_per_unit (m/s^2 per sample unit)")
    for key in ("m_s2_per_unit", "sample_rate_hz", "m_s2_per_count", "full_scale"):
        v = meta.get(key)
        if v is not None and not (_is_number(v) and v > 0):
            raise EdgevibError(f"{sp}: {key} must be a positive number, got {v!r}")
    if meta.get("t0_s") is not None and not _is_number(meta["t0_s"]):
        raise EdgevibError(f"{sp}: t0_s must be a number of seconds, got {meta['t0_s']!r}")
    if meta.get("rpm") is not None and not (_is_number(meta["rpm"]) and meta["rpm"] >= 0):
        raise EdgevibError(f"{sp}: rpm must be a number >= 0 or null, got {meta['rpm']!r}")
    vc = meta.get("vane_count")
    if vc is not None and not (isinstance(vc, int) and not isinstance(vc, bool) and vc > 0):
        raise EdgevibError(f"{sp}: vane_count must be a positive integer, got {vc!r}")
    for key in ("plant", "machine"):
        if meta.get(key) is not None and not isinstance(meta[key], str):
            raise EdgevibError(f"{sp}: {key} must be a string, got {meta[key]!r}")
    axes = meta.get("axes")
    if axes is not None and not (isinstance(axes, list) and all(isinstance(a, str) and a for a in axes)):
        raise EdgevibError(f"{sp}: axes must be a list of names, got {axes!r}")


def _axis_names(p: Path, names: list[str] | None, n: int) -> tuple[str, ...]:
    if names is None:
        return tuple(["x", "y", "z"][:n] + [f"a{i}" for i in range(3, n)])
    if len(names) != n:
        raise EdgevibError(f"{p}: sidecar names {len(names)} axes but the file holds {n} channels")
    if len(set(names)) != n:
        raise EdgevibError(f"{p}: sidecar axis names repeat: {names}")
    return tuple(names)


def _resolve_rate(p: Path, file_rate: float | None, side_rate: float | None, from_wav: bool) -> float:
    if file_rate is None:
        if side_rate is None:
            raise EdgevibError(f"{p}: sample rate unknown: give sample_rate_hz in the sidecar")
        return float(side_rate)
    if side_rate is None:
        return float(file_rate)
    # A WAV header holds an integer rate; the sidecar may carry the exact one.
    agrees = round(side_rate) == file_rate if from_wav else math.isclose(side_rate, file_rate, rel_tol=1e-4)
    if not agrees:
        raise EdgevibError(f"{p}: sample rate {file_rate:g} Hz in the file disagrees with sidecar sample_rate_hz {side_rate:g}")
    return float(side_rate)


def _to_counts(p: Path, data: np.ndarray, is_float: bool, unit: float, scale: float, first: int = 0) -> np.ndarray:
    """int16 counts of samples `data` (frames first..), at `scale` m/s^2 per count."""
    if is_float and not np.all(np.isfinite(data)):
        bad = first + int(np.argmax(~np.isfinite(data).all(axis=1)))
        raise EdgevibError(f"{p}: NaN or infinite sample at frame {bad}")
    if data.dtype == np.int16 and scale == unit:
        return data          # the file's own numbers are the counts: a view, no copy
    if not is_float and scale == unit:
        values = data
    else:
        values = np.rint(data.astype(np.float64) * unit / scale)
    if len(values):
        lo, hi = values.min(), values.max()
        if lo < _INT16_MIN or hi > _INT16_MAX:
            worst = float(hi if hi > -lo else lo)
            raise EdgevibError(
                f"{p}: a sample of {worst * scale:g} m/s^2 is {worst:g} counts at {scale:g} m/s^2 per count, "
                "outside the int16 range (would clip; use a coarser m_s2_per_count)"
            )
    return np.ascontiguousarray(values, dtype=np.int16)


# --- WAV ---------------------------------------------------------------------------------------

_WAV_FILTER_LOCK = threading.Lock()


def _read_wav(p: Path) -> tuple[np.ndarray, float, bool]:
    """Samples (frames x channels, memory-mapped), rate and whether they are floats."""
    with open(p, "rb") as f:
        head = f.read(12)
    if len(head) < 12 or head[:4] != b"RIFF" or head[8:12] != b"WAVE":
        raise EdgevibError(f"{p}: not a RIFF/WAVE file (little-endian RIFF expected)")
    try:
        # a damaged file is refused, not guessed at. Warning filters are process-wide: the lock
        # keeps two reads in threads (a Dask worker) from restoring each other's filters midway
        with _WAV_FILTER_LOCK, warnings.catch_warnings():
            warnings.simplefilter("error", wavfile.WavFileWarning)
            rate, data = wavfile.read(p, mmap=True)
    except (ValueError, OSError, EOFError, struct.error, wavfile.WavFileWarning) as e:   # struct: a cut header
        raise EdgevibError(f"{p}: truncated or unreadable WAV ({_one_line(e)})") from None
    if data.dtype.name not in _WAV_DTYPES:
        raise EdgevibError(f"{p}: unsupported WAV sample format ({data.dtype.name}); use PCM int16/int32 or float32")
    if data.ndim == 1:
        data = data[:, None]
    return data, float(rate), data.dtype.kind == "f"


def _one_line(e: BaseException) -> str:
    return " ".join(str(e).split()) or type(e).__name__


# --- CSV and .npy ------------------------------------------------------------------------------

_FLOAT_MARK = re.compile(r"[.eEnNiI]")


def _read_csv(p: Path) -> tuple[np.ndarray, float | None, bool, float | None]:
    try:
        text = p.read_text(encoding="utf-8")
    except UnicodeDecodeError:
        raise EdgevibError(f"{p}: CSV is not UTF-8 text") from None
    lines = [ln for ln in text.splitlines() if ln.strip()]
    if len(lines) < 2:
        raise EdgevibError(f"{p}: CSV needs a header row and at least one data row")
    names = [c.strip() for c in lines[0].split(",")]
    if any(not c or _looks_numeric(c) for c in names):
        raise EdgevibError(f"{p}: CSV first row must name every column, got {lines[0]!r}")
    rows = [ln.split(",") for ln in lines[1:]]
    for i, fields in enumerate(rows, start=2):
        if len(fields) != len(names):
            raise EdgevibError(f"{p}: CSV line {i} has {len(fields)} fields, header has {len(names)} (truncated?)")
    try:
        table = np.array([[float(v) for v in fields] for fields in rows], dtype=np.float64)
    except ValueError as e:
        raise EdgevibError(f"{p}: CSV holds a value that is not a number ({e})") from None
    rate = t_first = None
    if TIME_COLUMN in names:
        ti = names.index(TIME_COLUMN)
        rate, t_first = _rate_from_times(p, table[:, ti])
        table = np.delete(table, ti, axis=1)
        names.pop(ti)
        rows = [fields[:ti] + fields[ti + 1:] for fields in rows]
    is_float = any(_FLOAT_MARK.search(v) for fields in rows for v in fields)
    if not names:
        raise EdgevibError(f"{p}: CSV has a time column but no axis columns")
    if is_float:
        return table, rate, True, t_first
    return table.astype(np.int64), rate, False, t_first


def _looks_numeric(s: str) -> bool:
    try:
        float(s)
        return True
    except ValueError:
        return False


def _rate_from_times(p: Path, t: np.ndarray) -> tuple[float | None, float]:
    if not np.all(np.isfinite(t)):
        raise EdgevibError(f"{p}: CSV time column holds NaN or infinity")
    if len(t) < 2:
        return None, float(t[0])
    dt = np.diff(t)
    step = (t[-1] - t[0]) / (len(t) - 1)
    if step <= 0 or np.max(np.abs(dt - step)) > 0.01 * step:
        raise EdgevibError(f"{p}: CSV time column is not evenly spaced and increasing")
    return 1.0 / step, float(t[0])


def _read_npy(p: Path) -> tuple[np.ndarray, None, bool]:
    try:
        a = np.load(p, allow_pickle=False, mmap_mode="r")
    except (ValueError, OSError, EOFError) as e:
        raise EdgevibError(f"{p}: cannot read .npy ({e})") from None
    if a.ndim == 1:
        a = a[:, None]
    if a.ndim != 2:
        raise EdgevibError(f"{p}: .npy array must be 1-D or 2-D (frames x axes), got shape {a.shape}")
    if a.dtype.kind in "iu":
        return a, None, False
    if a.dtype.kind == "f":
        return a, None, True
    raise EdgevibError(f"{p}: .npy dtype {a.dtype} is not an integer or float type")
