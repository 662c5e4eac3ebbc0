"""Recordings: WAV against scipy.io.wavfile, CSV and .npy, sidecars, streams, errors, the writer."""
import hashlib
import json
import struct
from pathlib import Path

import numpy as np
import pytest
import scipy.io.wavfile as wavfile

from host_tools.errors import EdgevibError
from host_tools.data.recording import read_recording, read_stream, sidecar_path, write_wav

FS = 3200
RNG = np.random.default_rng(7)


def _sidecar(path, **meta):
    sidecar_path(path).write_text(json.dumps(meta))


def _scipy_wav(tmp_path, name, data, **meta):
    p = tmp_path / name
    wavfile.write(p, FS, data)
    _sidecar(p, **meta)
    return p


def _snapshot(folder):
    """Names, sizes, mtimes and SHA-256 of every file under folder (to prove nothing changed)."""
    return {
        str(q): (q.stat().st_size, q.stat().st_mtime_ns, hashlib.sha256(q.read_bytes()).hexdigest())
        for q in sorted(Path(folder).rglob("*"))
        if q.is_file()
    }


# --- WAV against scipy.io.wavfile (reference reader and writer) -------------------------------

def test_int16_multichannel_matches_scipy(tmp_path):
    data = RNG.integers(-32768, 32768, size=(1000, 3), dtype=np.int16)
    p = _scipy_wav(tmp_path, "a.wav", data, m_s2_per_unit=0.0048, t0_s=100.0, rpm=1480, vane_count=6)
    rate, ref = wavfile.read(p)
    r = read_recording(p)
    assert r.sample_rate_hz == rate == FS
    assert r.counts.dtype == np.int16 and r.counts.shape == (1000, 3)
    np.testing.assert_array_equal(r.counts, ref)
    assert r.m_s2_per_count == 0.0048 and r.axes == ("x", "y", "z")
    assert (r.t0_s, r.rpm, r.vane_count) == (100.0, 1480, 6)
    np.testing.assert_allclose(r.accel_m_s2(), ref * 0.0048)


def test_int32_in_int16_range_keeps_counts(tmp_path):
    data = RNG.integers(-32768, 32768, size=(500, 2)).astype(np.int32)
    p = _scipy_wav(tmp_path, "b.wav", data, m_s2_per_unit=0.01, axes=["h", "v"])
    _, ref = wavfile.read(p)
    assert ref.dtype == np.int32
    r = read_recording(p)
    np.testing.assert_array_equal(r.counts, ref)
    assert r.axes == ("h", "v") and r.m_s2_per_count == 0.01


def test_int32_rescaled_to_counts_scale(tmp_path):
    data = RNG.integers(-2**31, 2**31, size=(400, 1)).astype(np.int32)
    unit = 16 * 9.80665 / 2**31
    p = _scipy_wav(tmp_path, "c.wav", data, m_s2_per_unit=unit, m_s2_per_count=16 * 9.80665 / 32768)
    _, ref = wavfile.read(p)
    r = read_recording(p)
    expect = np.rint(ref.astype(np.float64).reshape(-1, 1) * unit / r.m_s2_per_count)
    np.testing.assert_array_equal(r.counts, expect)


def test_float32_mapped_to_counts(tmp_path):
    data = (RNG.standard_normal((800, 3)) * 0.5).astype(np.float32)  # in g
    p = _scipy_wav(tmp_path, "d.wav", data, m_s2_per_unit=9.80665, m_s2_per_count=0.0048)
    _, ref = wavfile.read(p)
    assert ref.dtype == np.float32
    r = read_recording(p)
    np.testing.assert_array_equal(r.counts, np.rint(ref.astype(np.float64) * 9.80665 / 0.0048))
    # The caller's counts scale takes precedence over the sidecar's.
    r2 = read_recording(p, m_s2_per_count=0.01)
    np.testing.assert_array_equal(r2.counts, np.rint(ref.astype(np.float64) * 9.80665 / 0.01))


def _to_extensible(src: Path, dst: Path):
    """Rewrite a scipy-written WAV's fmt chunk as WAVE_FORMAT_EXTENSIBLE (same samples)."""
    raw = src.read_bytes()
    code, n_ch, rate, byte_rate, block, bits = struct.unpack("<HHIIHH", raw[20:36])
    assert raw[12:16] == b"fmt "
    fmt_len = struct.unpack("<I", raw[16:20])[0]
    rest = raw[20 + fmt_len:]
    # GUID: format code then 00000000-0010-8000-00aa00389b71 (KSDATAFORMAT_SUBTYPE_*; common practice)
    guid = struct.pack("<H", code) + bytes.fromhex("000000001000800000aa00389b71")
    body = struct.pack("<HHIIHHHHI", 0xFFFE, n_ch, rate, byte_rate, block, bits, 22, bits, 0) + guid
    out = b"WAVE" + b"fmt " + struct.pack("<I", len(body)) + body + rest
    dst.write_bytes(b"RIFF" + struct.pack("<I", len(out)) + out)


@pytest.mark.parametrize("dtype", [np.int16, np.float32])
def test_extensible_matches_scipy(tmp_path, dtype):
    data = (RNG.standard_normal((300, 2)) * 1000).astype(dtype)
    plain = tmp_path / "plain.wav"
    wavfile.write(plain, FS, data)
    p = tmp_path / "ext.wav"
    _to_extensible(plain, p)
    _sidecar(p, m_s2_per_unit=0.002, m_s2_per_count=0.002)
    rate, ref = wavfile.read(p)
    r = read_recording(p)
    assert r.sample_rate_hz == rate
    np.testing.assert_array_equal(r.counts, np.rint(ref.astype(np.float64)))


def test_sidecar_rate_refines_wav_rate(tmp_path):
    p = _scipy_wav(tmp_path, "e.wav", np.zeros((10, 1), np.int16), m_s2_per_unit=1.0, sample_rate_hz=3199.8)
    assert read_recording(p).sample_rate_hz == 3199.8


# --- CSV and .npy ------------------------------------------------------------------------------

def test_csv_with_time_column(tmp_path):
    p = tmp_path / "f.csv"
    t = 50.0 + np.arange(6) / 400.0
    rows = ["t_s,x,y"] + [f"{ti:.6f},{i},{-2 * i}" for i, ti in enumerate(t)]
    p.write_text("\n".join(rows) + "\n")
    _sidecar(p, m_s2_per_unit=0.01)
    r = read_recording(p, expected_rate_hz=400.0)
    assert r.sample_rate_hz == pytest.approx(400.0)
    assert r.t0_s == pytest.approx(50.0)
    assert r.axes == ("x", "y")
    np.testing.assert_array_equal(r.counts, [[i, -2 * i] for i in range(6)])


def test_csv_float_without_time_column(tmp_path):
    p = tmp_path / "g.csv"
    text = [[f"{v:.5f}" for v in row] for row in RNG.standard_normal((20, 3))]
    p.write_text("x,y,z\n" + "\n".join(",".join(row) for row in text) + "\n")
    _sidecar(p, m_s2_per_unit=1.0, m_s2_per_count=0.001, sample_rate_hz=FS)
    r = read_recording(p)
    vals = np.array([[float(v) for v in row] for row in text])
    np.testing.assert_array_equal(r.counts, np.rint(vals * 1.0 / 0.001))


def test_npy_int_and_float(tmp_path):
    a = RNG.integers(-100, 100, size=50, dtype=np.int16)
    p = tmp_path / "h.npy"
    np.save(p, a)
    _sidecar(p, m_s2_per_unit=0.5, sample_rate_hz=FS)
    r = read_recording(p)
    assert r.counts.shape == (50, 1)
    np.testing.assert_array_equal(r.counts[:, 0], a)
    b = RNG.standard_normal((30, 2))
    q = tmp_path / "i.npy"
    np.save(q, b)
    _sidecar(q, m_s2_per_unit=2.0, m_s2_per_count=0.01, sample_rate_hz=FS)
    np.testing.assert_array_equal(read_recording(q).counts, np.rint(b * 2.0 / 0.01))


# --- streams -----------------------------------------------------------------------------------

def test_folder_is_ordered_by_t0(tmp_path):
    for name, t0 in (("a.wav", 30.0), ("b.wav", 10.0), ("c.wav", 20.0)):
        _scipy_wav(tmp_path, name, np.full((FS, 1), int(t0), np.int16), m_s2_per_unit=1.0, t0_s=t0, machine="P-101")
    (tmp_path / "notes.txt").write_text("ignored")
    recs = read_stream(tmp_path)
    assert [r.t0_s for r in recs] == [10.0, 20.0, 30.0]
    assert [int(r.counts[0, 0]) for r in recs] == [10, 20, 30]


# --- errors: one line naming the file, nothing written or changed -----------------------------

def _wav_bytes(data):
    import io
    buf = io.BytesIO()
    wavfile.write(buf, FS, data)
    return buf.getvalue()


def _case_missing_sidecar(d):
    p = d / "r.wav"
    p.write_bytes(_wav_bytes(np.zeros((10, 1), np.int16)))
    return p, {}


def _case_truncated(d):
    p = d / "r.wav"
    p.write_bytes(_wav_bytes(np.zeros((100, 2), np.int16))[:-7])
    _sidecar(p, m_s2_per_unit=1.0)
    return p, {}


def _case_nan(d):
    p = d / "r.wav"
    x = np.zeros((10, 1), np.float32)
    x[4] = np.nan
    p.write_bytes(_wav_bytes(x))
    _sidecar(p, m_s2_per_unit=1.0, m_s2_per_count=0.01)
    return p, {}


def _case_inf_npy(d):
    p = d / "r.npy"
    np.save(p, np.array([0.0, np.inf]))
    _sidecar(p, m_s2_per_unit=1.0, m_s2_per_count=0.01, sample_rate_hz=FS)
    return p, {}


def _case_rate_mismatch(d):
    p = d / "r.wav"
    p.write_bytes(_wav_bytes(np.zeros((10, 1), np.int16)))
    _sidecar(p, m_s2_per_unit=1.0)
    return p, {"expected_rate_hz": 1600.0}


def _case_unknown_format(d):
    p = d / "r.txt"
    p.write_text("1,2,3\n")
    _sidecar(p, m_s2_per_unit=1.0)
    return p, {}


def _case_not_wav(d):
    p = d / "r.wav"
    p.write_bytes(b"ID3\x03 this is not a wave file at all")
    _sidecar(p, m_s2_per_unit=1.0)
    return p, {}


def _case_float_without_scale(d):
    p = d / "r.wav"
    p.write_bytes(_wav_bytes(np.zeros((10, 1), np.float32)))
    _sidecar(p, m_s2_per_unit=1.0)
    return p, {}


def _case_would_clip(d):
    p = d / "r.wav"
    p.write_bytes(_wav_bytes(np.array([[0.0], [20.0]], np.float32)))  # 20 g
    _sidecar(p, m_s2_per_unit=9.80665, m_s2_per_count=16 * 9.80665 / 32768)
    return p, {}


def _case_int32_beyond_int16(d):
    p = d / "r.wav"
    p.write_bytes(_wav_bytes(np.array([[0], [40000]], np.int32)))
    _sidecar(p, m_s2_per_unit=0.001)  # integer data kept as counts: 40000 does not fit int16
    return p, {}


def _case_csv_short_row(d):
    p = d / "r.csv"
    p.write_text("x,y\n1,2\n3\n")
    _sidecar(p, m_s2_per_unit=1.0, sample_rate_hz=FS)
    return p, {}


def _case_unsupported_pcm8(d):
    p = d / "r.wav"
    p.write_bytes(_wav_bytes(np.zeros((10, 1), np.uint8)))
    _sidecar(p, m_s2_per_unit=1.0)
    return p, {}


def _case_bad_sidecar(d):
    p = d / "r.wav"
    p.write_bytes(_wav_bytes(np.zeros((10, 1), np.int16)))
    sidecar_path(p).write_text('{"m_s2_per_unit": -1}')
    return p, {}


@pytest.mark.parametrize(
    "make",
    [_case_missing_sidecar, _case_truncated, _case_nan, _case_inf_npy, _case_rate_mismatch,
     _case_unknown_format, _case_not_wav, _case_float_without_scale, _case_would_clip,
     _case_int32_beyond_int16, _case_csv_short_row, _case_unsupported_pcm8, _case_bad_sidecar],
)
def test_errors_name_the_file_and_touch_nothing(tmp_path, make):
    p, kwargs = make(tmp_path)
    before = _snapshot(tmp_path)
    with pytest.raises(EdgevibError) as e:
        read_recording(p, **kwargs)
    msg = str(e.value)
    assert "\n" not in msg and (p.name in msg or sidecar_path(p).name in msg)
    assert _snapshot(tmp_path) == before


def test_stream_errors(tmp_path):
    a = _scipy_wav(tmp_path, "a.wav", np.zeros((FS, 1), np.int16), m_s2_per_unit=1.0, t0_s=0.0, machine="P-101")
    b = _scipy_wav(tmp_path, "b.wav", np.zeros((FS, 1), np.int16), m_s2_per_unit=1.0, t0_s=0.5, machine="P-101")
    before = _snapshot(tmp_path)
    with pytest.raises(EdgevibError, match="b.wav.*before"):
        read_stream([a, b])
    _sidecar(b, m_s2_per_unit=1.0, t0_s=5.0, machine="P-102")
    with pytest.raises(EdgevibError, match="b.wav.*machine"):
        read_stream(tmp_path)
    _sidecar(b, m_s2_per_unit=2.0, t0_s=5.0)
    with pytest.raises(EdgevibError, match="b.wav.*counts scale"):
        read_stream(tmp_path)
    _sidecar(b, m_s2_per_unit=1.0)
    with pytest.raises(EdgevibError, match="b.wav.*t0_s"):
        read_stream(tmp_path)
    assert set(_snapshot(tmp_path)) == set(before)


# --- writer ------------------------------------------------------------------------------------

def test_write_wav_round_trip(tmp_path):
    counts = RNG.integers(-32768, 32768, size=(2000, 3), dtype=np.int16)
    p = write_wav(tmp_path / "snap.wav", counts, 3200.0, {"m_s2_per_unit": 0.0048, "t0_s": 12.5, "machine": "P-101"})
    rate, ref = wavfile.read(p)  # reference reader
    assert rate == 3200
    np.testing.assert_array_equal(ref, counts)
    meta = json.loads(sidecar_path(p).read_text())
    assert meta["sample_rate_hz"] == 3200.0 and meta["t0_s"] == 12.5
    r = read_recording(p)
    np.testing.assert_array_equal(r.counts, counts)
    assert sorted(q.name for q in tmp_path.iterdir()) == ["snap.json", "snap.wav"]  # no temp files


def test_write_wav_refuses_bad_input_and_writes_nothing(tmp_path):
    with pytest.raises(EdgevibError, match="int16"):
        write_wav(tmp_path / "x.wav", np.zeros((10, 2), np.float32), 3200, {"m_s2_per_unit": 1.0})
    with pytest.raises(EdgevibError, match="m_s2_per_unit"):
        write_wav(tmp_path / "x.wav", np.zeros((10, 2), np.int16), 3200, {})
    assert list(tmp_path.iterdir()) == []
