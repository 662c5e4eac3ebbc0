"""Any recording, no hand-made profile: analysis settings built from the file (host_tools.data.analysis).

References: scipy.io.wavfile and numpy (the samples written), Python's float arithmetic for the
counts scale; the window rule's bin count comes from the Hann window's main lobe (Harris 1978,
"On the use of windows for harmonic analysis with the DFT", main lobe +-2 bins); 2.56 x the top
of the band as the least sample rate is common practice for anti-alias margin.
"""
import json
import math
import stat

import numpy as np
import pytest
from scipy.io import wavfile

import firmware_py  # noqa: F401
from firmware_py.run import board
from host_tools.cli import main
from host_tools.data.analysis import MIN_RATE_HZ, RESOLVE_BINS, desk_profile, profile_for_set, scale_of
from host_tools.data.recording import atomic_write, open_recording, open_stream, write_wav
from host_tools.errors import EdgevibError
from tests.test_training import BOARD, COUNTS_PER_G, M_S2_PER_COUNT, PROFILE, healthy_stream

G = 9.80665   # ISO 80000-3 standard gravity, m/s^2
RNG = np.random.default_rng(21)


def _wav(tmp_path, name, data, fs, **side):
    p = tmp_path / name
    wavfile.write(p, fs, data)                       # the reference writer
    (tmp_path / (p.stem + ".json")).write_text(json.dumps(side))
    return p


@pytest.mark.parametrize("dtype, unit, full", [
    (np.int16, 16 * G / 32768, None),                # 16 g full scale in int16
    (np.int16, G / 256, 4095),                       # 13-bit data stored as int16 (sidecar full_scale)
    (np.int32, 16 * G / 2**31, None),                # int32: full scale from the format
    (np.float32, G, 16.0),                           # float in g, 16 g sensor (sidecar full_scale)
])
def test_settings_come_from_the_file(tmp_path, dtype, unit, full):
    fs = 3200
    frames = 4 * fs
    if np.dtype(dtype).kind == "f":
        data = (RNG.standard_normal((frames, 2)) * 0.5).astype(dtype)
    else:
        top = 4095 if full else np.iinfo(dtype).max // 8
        data = RNG.integers(-top, top, size=(frames, 2)).astype(dtype)
    side = {"m_s2_per_unit": unit, "rpm": 1480.0}
    if full is not None:
        side["full_scale"] = full
    p = _wav(tmp_path, "r.wav", data, fs, **side)
    prof = desk_profile([open_recording(p)])
    assert prof is board.check(prof)                  # a profile a gateway could run
    assert prof["axes"] == 2 and prof["sample_rate_hz"] == fs
    scale = scale_of(prof)
    assert prof["sensor"]["counts_per_g"] == round(G / scale)
    # never finer than the file's own resolution, and the full scale fits in int16 counts
    finest = unit if dtype == np.int16 else (full or np.iinfo(dtype).max) * unit / 32767
    assert scale >= finest * (1 - 1e-12)
    full_m_s2 = (full or (np.iinfo(dtype).max if np.dtype(dtype).kind == "i" else 0)) * unit
    assert full_m_s2 / scale <= 32767 + 1e-6
    assert prof["sensor"]["adc_max"] <= math.floor(full_m_s2 / scale + 1e-9)
    # 1x at 1480 r/min sits at bin RESOLVE_BINS or above: fs / n <= (1480 / 60) / RESOLVE_BINS
    assert fs / prof["window_n"] <= 1480 / 60 / RESOLVE_BINS
    # the counts are the file's samples at that scale (scipy's reading is the reference)
    _, ref = wavfile.read(p)
    got = open_stream(p, fs, scale)[0].read_counts()
    np.testing.assert_array_equal(got, np.rint(ref.astype(np.float64) * unit / scale))


def test_window_resolves_one_x_at_the_lowest_speed_of_the_sidecars(tmp_path):
    fs = 12800
    d = tmp_path / "s"
    d.mkdir()
    for i, rpm in enumerate((1480.0, 600.0)):
        _wav(d, f"r{i}.wav", np.zeros((fs, 3), np.int16), fs, m_s2_per_unit=G / 2048, rpm=rpm, t0_s=10.0 * i)
    prof = desk_profile(open_stream(d))
    f1x = 600 / 60
    n = prof["window_n"]
    assert fs / n <= f1x / RESOLVE_BINS < fs / (n // 2)     # the shortest power of two that does it
    fast = _wav(tmp_path, "fast.wav", np.zeros((25600, 1), np.int16), 25600, m_s2_per_unit=G / 2048, rpm=600.0)
    with pytest.raises(EdgevibError, match="longer than 4096 samples"):   # 7680 samples would be needed
        desk_profile([open_recording(fast)])


def test_rate_below_band_and_missing_folder_are_refused_clearly(tmp_path, capsys):
    p = _wav(tmp_path, "slow.wav", np.zeros((8000, 1), np.int16), 2000, m_s2_per_unit=G / 256)
    with pytest.raises(EdgevibError, match=f"too low.*{MIN_RATE_HZ}"):
        desk_profile([open_recording(p)])
    out = tmp_path / "p.msgpack"
    assert main(["train", str(tmp_path / "no_such_folder"), "--out", str(out)]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "no such recording or folder" in err and "format ''" not in err


def test_a_set_for_another_board_is_refused_with_the_reason():
    from firmware_py.run import params as pm
    p = pm.factory(PROFILE)
    with pytest.raises(EdgevibError, match="board 'desk' does not match board pico_adxl345"):
        profile_for_set(p, BOARD.parent / "pico_adxl345.json")
    with pytest.raises(EdgevibError, match="fs_hz 1600 does not match board desk"):
        profile_for_set(dict(p, fs_hz=1600), None)


def test_mono_int16_recording_trains_and_replays_without_a_profile(tmp_path, capsys):
    # The user's case: one axis, int16 at 3200 Hz, a sidecar; no board profile anywhere.
    folder = tmp_path / "mono"
    folder.mkdir()
    for r in healthy_stream(seed=8, per_point=6):
        write_wav(folder / r.path.name, np.ascontiguousarray(r.counts[:, 2:3]), 3200,
                  {"m_s2_per_unit": M_S2_PER_COUNT, "t0_s": r.t0_s, "rpm": r.rpm, "axes": ["z"]})
    out = tmp_path / "mono.msgpack"
    assert main(["--quiet", "train", str(folder), "--out", str(out)]) == 0
    import msgpack
    p = msgpack.unpackb(out.read_bytes(), raw=False)
    assert p["axes"] == 1 and p["board"] == "recording" and p["counts_per_g"] == COUNTS_PER_G
    capsys.readouterr()
    js = tmp_path / "r.json"
    assert main(["--quiet", "replay", str(folder), "--params", str(out), "--json", str(js)]) == 0
    assert json.loads(js.read_text())["summary"]["total"]["windows"] > 0


def test_outputs_follow_the_umask(tmp_path):
    import os
    old = os.umask(0o022)
    try:
        atomic_write(tmp_path / "a.bin", b"x")
        assert stat.S_IMODE((tmp_path / "a.bin").stat().st_mode) == 0o644
        os.umask(0o077)
        atomic_write(tmp_path / "b.bin", b"x")
        assert stat.S_IMODE((tmp_path / "b.bin").stat().st_mode) == 0o600
        os.umask(0o022)
        w = write_wav(tmp_path / "c.wav", np.zeros((10, 1), np.int16), 3200, {"m_s2_per_unit": 1.0})
        assert stat.S_IMODE(w.stat().st_mode) == 0o644
        assert stat.S_IMODE(w.with_suffix(".json").stat().st_mode) == 0o644
    finally:
        os.umask(old)
