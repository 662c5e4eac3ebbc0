"""Commissioning check: line names and levels, noise floor, ISO zones, clipping, flatline, offsets,
the command line end to end and its refusals of bad input."""
import json
import math
import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from host_tools.check.commission import CheckSettings, _zone_item, check_recording, longest_run, settings_from_board
from host_tools.commands.check import plot_png
from host_tools.data.demo_scenario import write_scenario
from host_tools.data.recording import Recording, write_wav

REPO = Path(__file__).resolve().parent.parent
FS, N = 3200, 512
DF = FS / N
G = 9.80665
SCALE = G / 256            # m/s^2 per count, ADXL345-like as on the desk board
DESK = CheckSettings(n=N, expected_rate_hz=FS, adc_min=-4096, adc_max=4095,
                     expected_m_s2_per_count=SCALE, board_name="desk")


def _rec(counts, scale=SCALE, fs=FS, axes=None, **meta):
    c = np.asarray(counts)
    if c.ndim == 1:
        c = c[:, None]
    axes = axes or ("x", "y", "z")[:c.shape[1]]
    return Recording(path=Path("synthetic.wav"), counts=c.astype(np.int16), m_s2_per_count=scale,
                     sample_rate_hz=float(fs), axes=tuple(axes),
                     rpm=meta.pop("rpm", None), vane_count=meta.pop("vane_count", None), sidecar=meta)


def _tones(freqs_amps, windows=40, noise_counts=1.0, seed=0, dc=0.0):
    """Counts of a sum of sines (amplitudes in m/s^2 peak) plus white noise (counts r.m.s.)."""
    rng = np.random.default_rng(seed)
    t = np.arange(windows * N) / FS
    x = dc + sum(a * np.sin(2 * np.pi * f * t + rng.uniform(0, 2 * np.pi)) for f, a in freqs_amps)
    return np.rint(x / SCALE + noise_counts * rng.standard_normal(len(t)))


def _item(result, name, axis="x"):
    return next(i for i in result.items if i.name == name and i.axis == axis)


# --- lines: names and levels ----------------------------------------------------------------------

def test_tones_at_1x_2x_and_vane_pass_get_their_names_and_frequencies():
    # 1x = rpm/60, nx its harmonics, vane pass = vane count x shaft speed, sidebands at +-1x
    # (pump vibration practice; common practice). Levels differ so every line is listed.
    rpm, vanes = 1470.0, 7
    f1 = rpm / 60.0
    truth = {"1x": f1, "2x": 2 * f1, "vane pass": vanes * f1, "vane pass + 1x": (vanes + 1) * f1,
             "unidentified": 1103.0}                  # 45.02 x: no nameable order there
    amps = [0.5, 0.3, 0.8, 0.2, 0.4]
    r = check_recording(_rec(_tones(zip(truth.values(), amps)), rpm=rpm, vane_count=vanes), DESK)
    got = {ln.name: ln for ln in r.spectra[0].lines}
    assert set(truth) <= set(got)
    for name, f in truth.items():
        assert abs(got[name].freq_hz - f) < DF, name          # within one bin
    assert got["vane pass"].order == pytest.approx(vanes, abs=DF / f1)
    assert r.spectra[0].lines[0].name == "vane pass"           # strongest first
    assert _item(r, "lines").verdict == "ok"


def test_without_rpm_lines_are_listed_but_not_named():
    r = check_recording(_rec(_tones([(150.0, 0.5)])), DESK)
    (ln,) = [x for x in r.spectra[0].lines if abs(x.freq_hz - 150.0) < DF]
    assert ln.name == "rpm unknown" and ln.order is None


def test_strongest_line_unidentified_asks_for_a_look():
    r = check_recording(_rec(_tones([(1103.0, 1.0), (24.5, 0.1)]), rpm=1470.0, vane_count=7), DESK)
    assert r.spectra[0].lines[0].name == "unidentified"
    assert _item(r, "lines").verdict == "check"


@pytest.mark.parametrize("bin_pos, amp_counts", [(20.0, 1000), (20.5, 1000), (50.3, 37), (100.0, 3000)])
def test_tone_level_against_numpy_rfft_and_the_known_amplitude(bin_pos, amp_counts):
    f = bin_pos * DF
    t = np.arange(16 * N)
    x = np.rint(amp_counts * np.sin(2 * np.pi * bin_pos * t / N + 0.7)).astype(np.int16)
    r = check_recording(_rec(x), DESK)
    (ln,) = [v for v in r.spectra[0].lines if abs(v.freq_hz - f) < DF]
    # Reference: numpy.fft.rfft of each window times the periodic Hann window, power-normalised
    # (one-sided 2|X|^2 / (n sum w^2), so a band's sum is its mean square; common practice),
    # averaged over windows, power of the 3 bins around the peak, r.m.s. in m/s^2.
    w = 0.5 - 0.5 * np.cos(2 * np.pi * np.arange(N) / N)
    X = np.fft.rfft(x.reshape(-1, N).astype(np.float64) * w, axis=1)
    s = (2 * np.abs(X) ** 2 / (N * np.sum(w ** 2))).mean(axis=0)
    k = int(np.argmax(s))
    ref = math.sqrt(s[k - 1:k + 2].sum()) * SCALE
    # The device FFT rounds at each of its 4-5 stages with the tone's peak near 2**13 after
    # normalisation: relative error of order 5 * 2**-11 = 0.25 %; 0.5 % allows twice that.
    assert ln.level_m_s2 == pytest.approx(ref, rel=5e-3)
    # Against the tone itself (r.m.s. = amplitude / sqrt 2, a sine identity): the 3 bins hold all
    # but 0.1 % of a Hann-windowed tone on a bin and 98 % of one half-way (Hann kernel; common
    # practice), so the level is at most 1.1 % low; counts rounding adds < 0.1 %.
    true_rms = amp_counts / math.sqrt(2) * SCALE
    assert true_rms * 0.985 < ln.level_m_s2 < true_rms * 1.005
    assert abs(ln.freq_hz - f) < 0.1 * DF                     # interpolation well inside a bin


# --- noise floor ------------------------------------------------------------------------------------

def test_noise_floor_of_white_noise_is_its_density():
    # White noise of variance s^2 sampled at fs has a one-sided density s^2 / (fs/2) (handbook
    # identity); the int16 rounding adds 1/12 count^2 (uniform quantisation noise; common practice).
    sigma = 40.0
    x = np.rint(np.random.default_rng(3).standard_normal(200 * N) * sigma)
    r = check_recording(_rec(x), DESK)
    expect = math.sqrt((sigma ** 2 + 1 / 12) / (FS / 2)) * SCALE
    # 100 windows measured, 16-bin blocks (about 11 independent): the median's spread is about
    # 1.25 * 0.1 / sqrt(11) = 4 % in power, 2 % in density; 10 % is five of those.
    assert r.spectra[0].floor_density == pytest.approx(expect, rel=0.10)


def test_noise_floor_against_the_sensor_figure_in_the_sidecar():
    sigma = 40.0
    x = np.rint(np.random.default_rng(4).standard_normal(64 * N) * sigma)
    density_ug = sigma / math.sqrt(FS / 2) * SCALE / G * 1e6
    ok = check_recording(_rec(x, sensor_noise_ug_rthz=density_ug), DESK)
    assert _item(ok, "noise floor").verdict == "ok"
    low = check_recording(_rec(x, sensor_noise_ug_rthz=[density_ug / 5]), DESK)
    assert _item(low, "noise floor").verdict == "check"
    assert "x the sensor's figure" in _item(low, "noise floor").explanation
    # no figure: about 3900 ug/sqrt(Hz) here, far above a MEMS sensor's own (from memory)
    assert _item(check_recording(_rec(x), DESK), "noise floor").verdict == "check"
    quiet = np.rint(np.random.default_rng(4).standard_normal(64 * N) * 4.0)   # about 390 ug/sqrt(Hz)
    assert _item(check_recording(_rec(quiet), DESK), "noise floor").verdict == "ok"


# --- ISO zone ---------------------------------------------------------------------------------------

# ISO 10816-3 group 2, rigid foundation: A/B 1.4, B/C 2.8, C/D 4.5 mm/s r.m.s. (from memory; the
# same unconfirmed figures as firmware_py/detect/iso_zones.py).
@pytest.mark.parametrize("boundary, below, above", [(1.4, "A", "B"), (2.8, "B", "C"), (4.5, "C", "D")])
def test_iso_zone_just_below_and_above_a_boundary(boundary, below, above):
    # A sine of acceleration amplitude a at angular frequency w has velocity amplitude a / w and
    # r.m.s. a / (w sqrt 2) (integration of a sinusoid; handbook identity). At w = 1000 rad/s
    # (159 Hz) the 10-1000 Hz Butterworth band passes all but 0.002 % of the power; the device
    # velocity estimate is within 0.3 % there, so 3 % either side of a boundary is unambiguous.
    w = 1000.0
    for factor, zone in ((0.97, below), (1.03, above)):
        v_rms = boundary * factor / 1000.0
        x = _tones([(w / (2 * math.pi), v_rms * w * math.sqrt(2))], windows=16, noise_counts=0.5)
        r = check_recording(_rec(x, rpm=1480.0), DESK)
        it = _item(r, "ISO zone")
        assert it.data["zone"] == zone
        assert it.data["velocity_rms_mm_s"] == pytest.approx(boundary * factor, rel=0.01)
        assert it.verdict == {"A": "ok", "B": "ok", "C": "check", "D": "problem"}[zone]


def test_iso_zone_on_the_boundary_is_the_worse_zone():
    b = DESK.zones_mm_s[1]
    assert _zone_item("x", b, 1480.0, True, DESK).data["zone"] == "C"
    assert _zone_item("x", math.nextafter(b, 0.0), 1480.0, True, DESK).data["zone"] == "B"


# --- clipping, flatline, offset -----------------------------------------------------------------------

def test_clipping_percentage_of_a_known_number_of_clipped_samples():
    rng = np.random.default_rng(5)
    x = np.rint(rng.standard_normal(20 * N) * 300)
    at = rng.choice(len(x), 37, replace=False)
    x[at[:20]] = 4095          # at full scale
    x[at[20:30]] = -4096
    x[at[30:]] = 5000          # beyond it (counts wider than the converter's codes)
    r = check_recording(_rec(x), DESK)
    it = _item(r, "clipping")
    assert it.data["clipped_samples"] == 37
    assert it.data["clipped_pct"] == pytest.approx(100 * 37 / len(x))
    assert it.verdict == "problem"                           # 0.36 % >= 0.1 %
    x2 = np.rint(rng.standard_normal(20 * N) * 300)
    x2[5] = 4095
    assert _item(check_recording(_rec(x2), DESK), "clipping").verdict == "check"


def test_another_sensors_scale_is_flagged_and_its_counts_are_not_judged_at_the_boards_full_scale():
    x = np.rint(np.random.default_rng(6).standard_normal(20 * N) * 3000)   # beyond +-4096 often
    r = check_recording(_rec(x, scale=SCALE / 16), DESK)
    assert _item(r, "counts scale", None).verdict == "check"
    assert _item(r, "clipping").data["clipped_samples"] == 0   # int16 limits, none reached
    assert _item(check_recording(_rec(x), DESK), "clipping").verdict == "problem"


def test_flatline_of_a_constant_signal():
    r = check_recording(_rec(np.full(10 * N, 123)), DESK)
    it = _item(r, "flatline")
    assert it.verdict == "problem" and it.data["flat_windows"] == 10
    assert it.data["longest_run_samples"] == 10 * N
    assert _item(r, "noise floor").verdict == "problem"
    assert r.overall == "problem"


def test_plot_of_a_dead_single_axis_recording_is_still_a_png():
    r = check_recording(_rec(np.full(4 * N, -7)), DESK)
    assert plot_png(r)[:8] == b"\x89PNG\r\n\x1a\n"          # PNG signature (PNG specification)


def test_a_dropout_shorter_than_a_window_is_found():
    x = np.arange(20 * N) % 7 * 50 - 150                      # no two neighbours equal
    x[1000:1100] = 777
    assert longest_run(x) == 100
    r = check_recording(_rec(x), DESK)
    it = _item(r, "flatline")
    assert it.verdict == "check" and it.data["flat_windows"] == 0


def test_gravity_on_a_vertical_axis_is_fine_and_a_tilt_is_named():
    # Three axes at rest read the gravity vector: magnitude 1 g (9.80665 m/s^2, ISO 80000-3);
    # an axis tilted by angle theta from vertical reads g cos(theta) (trigonometry).
    x = _tones([(150.0, 0.3)], windows=10, dc=0.05, seed=1)
    y = _tones([(150.0, 0.3)], windows=10, dc=G * math.sin(math.radians(60)), seed=2)
    z = _tones([(150.0, 0.3)], windows=10, dc=G * math.cos(math.radians(60)), seed=3)
    r = check_recording(_rec(np.stack([x, y, z], axis=1)), DESK)
    assert _item(r, "gravity", None).verdict == "ok"
    assert _item(r, "DC offset", "x").verdict == "ok"
    tilt = _item(r, "DC offset", "z")
    assert tilt.verdict == "check" and "60 degrees" in tilt.explanation
    vert = check_recording(_rec(_tones([(150.0, 0.3)], windows=10, dc=-G)), DESK)
    assert _item(vert, "DC offset").verdict == "ok" and "vertical" in _item(vert, "DC offset").explanation


def test_sample_rate_other_than_the_boards_is_a_problem():
    r = check_recording(_rec(_tones([(150.0, 0.3)], windows=10), fs=1600), DESK)
    assert _item(r, "sample rate", None).verdict == "problem"


def test_desk_board_profile_sets_the_window_and_full_scale():
    board = json.loads((REPO / "boards" / "desk.json").read_text())
    s = settings_from_board(REPO / "boards" / "desk.json")
    assert (s.n, s.adc_min, s.adc_max, s.expected_rate_hz) == (
        board["window_n"], board["sensor"]["adc_min"], board["sensor"]["adc_max"], board["sample_rate_hz"])
    assert s.expected_m_s2_per_count == pytest.approx(G / board["sensor"]["counts_per_g"])


# --- the command line ----------------------------------------------------------------------------------

def _cli(*args, cwd=None):
    env = dict(os.environ, MPLBACKEND="Agg")
    return subprocess.run([sys.executable, "-m", "host_tools.cli", "check", *map(str, args)],
                          cwd=cwd or REPO, env=env, capture_output=True, text=True, timeout=120)


@pytest.fixture(scope="module")
def demo_wav(tmp_path_factory):
    out = tmp_path_factory.mktemp("demo")
    truth = json.loads(write_scenario(out, days=1, training_days=1, interval_s=43200).read_text())
    return out / truth["files"]["P-101"]["training"][0]


def test_end_to_end_on_a_demo_recording(demo_wav, tmp_path):
    png, js = tmp_path / "spectrum.png", tmp_path / "check.json"
    res = _cli(demo_wav, "--plot", png, "--json", js)
    assert res.returncode == 0, res.stderr
    out = res.stdout
    assert demo_wav.name in out and "P-101" in out
    for word in ("sample rate", "DC offset", "clipping", "flatline", "noise floor", "ISO zone",
                 "vane pass", "1x", "Overall:", "not a machinery protection", "lock-out"):
        assert word in out, word
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"       # PNG signature (PNG specification)
    report = json.loads(js.read_text())
    assert report["overall"] in ("ok", "check", "problem")
    assert {i["axis"] for i in report["items"] if i["name"] == "ISO zone"} == {"x", "y", "z"}
    # P-101 has 6 vanes; at a steady speed the vane pass line is named on some axis
    assert any(ln["name"] == "vane pass" for lines in report["lines"].values() for ln in lines)


def _listing(folder):
    return sorted((p.name, p.stat().st_size, p.stat().st_mtime_ns) for p in Path(folder).rglob("*"))


def test_bad_input_is_one_line_exit_2_and_nothing_written(demo_wav, tmp_path):
    src = tmp_path / "in"
    src.mkdir()
    good = src / "good.wav"
    good.write_bytes(demo_wav.read_bytes())
    good.with_suffix(".json").write_text(demo_wav.with_suffix(".json").read_text())
    nosidecar = src / "lonely.wav"
    nosidecar.write_bytes(demo_wav.read_bytes())
    trunc = src / "short.wav"
    trunc.write_bytes(demo_wav.read_bytes()[:5000])
    trunc.with_suffix(".json").write_text(demo_wav.with_suffix(".json").read_text())
    odd = src / "rec.flac"
    odd.write_bytes(b"fLaC")
    out = tmp_path / "out"
    out.mkdir()
    before_in, before_out = _listing(src), _listing(out)
    cases = [
        ([nosidecar, "--plot", out / "a.png"], "missing sidecar"),
        ([trunc, "--json", out / "a.json"], "truncated"),
        ([odd, "--plot", out / "a.png"], "unknown recording format"),
        ([good, "--plot", out / "missing" / "a.png"], "does not exist"),
        ([good, "--json", good.with_suffix(".json")], "would overwrite"),
        ([good, "--plot", out / "a.jpg"], "PNG"),
        ([good, "--zones", "4.5,2.8,1.4", "--json", out / "a.json"], "three rising numbers"),
    ]
    for args, words in cases:
        res = _cli(*args)
        assert res.returncode == 2, (args, res.stderr)
        lines = res.stderr.strip().splitlines()
        assert len(lines) == 1 and words in lines[0], res.stderr
        assert res.stdout == ""
    assert _listing(src) == before_in and _listing(out) == before_out
