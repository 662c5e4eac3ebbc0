"""Training: thresholds with a known false-alert rate, operating modes, the parameter set it writes.

Synthetic pump signals here are invented test data (tones at 1x, 2x and vane pass of a shaft
speed, white sensor noise, gravity on z), in ADXL345-like counts (256 counts per g, +-4096).
"""
import json
from pathlib import Path

import msgpack
import numpy as np
import pytest
from sklearn.metrics import adjusted_rand_score

import firmware_py  # noqa: F401
from firmware_py.run import board
from firmware_py.detect import alarm as al
from firmware_py.codec import mpack
from firmware_py.dsp import feature_index as fi
from firmware_py.run import params as pm
from host_tools.fit import modes_fit
from host_tools.cli import main
from host_tools.data.recording import Recording, write_wav
from host_tools.twin.replay import replay
from host_tools.fit.training import report_text, train

ROOT = Path(__file__).resolve().parent.parent
BOARD = ROOT / "boards" / "desk.json"
PROFILE = board.load(str(BOARD))
FS = PROFILE["sample_rate_hz"]
COUNTS_PER_G = PROFILE["sensor"]["counts_per_g"]
M_S2_PER_COUNT = 9.80665 / COUNTS_PER_G   # ISO 80000-3 standard gravity


# Operating points of the invented pump: r/min -> (1x tone, broadband noise, counts; impulses per
# second). Each differs from the others in level, spectrum and impulsiveness (well separated).
POINTS = {1480.0: (12.0, 1.5, 0), 1050.0: (3.0, 4.0, 0), 745.0: (2.0, 2.0, 50)}


def pump_counts(rng, rpm, seconds, tone=None, noise=None, clicks_hz=None, extra_hz=None, extra_counts=0.0):
    """Invented triaxial pump vibration, int16 counts (frames x 3): 1x and 6x vane pass tones,
    broadband noise and periodic impulses as POINTS gives for rpm (0: stopped, sensor noise
    only), overridable; white sensor noise of 1 count, 1 g on z; optionally an extra tone."""
    d_tone, d_noise, d_clicks = POINTS.get(rpm, (0.0, 0.0, 0))
    tone = d_tone if tone is None else tone
    noise = d_noise if noise is None else noise
    clicks_hz = d_clicks if clicks_hz is None else clicks_hz
    n = int(seconds * FS)
    t = np.arange(n) / FS
    fr = rpm / 60.0
    ph = rng.uniform(0, 2 * np.pi, 2)
    x = tone * np.cos(2 * np.pi * fr * t + ph[0])[:, None] * [1.0, 0.2, 0.8]
    x = x + 0.5 * tone * np.cos(12 * np.pi * fr * t + ph[1])[:, None] * [0.7, 0.5, 0.6]
    x += noise * rng.standard_normal((n, 3))
    if clicks_hz:
        x[int(rng.integers(0, 50))::int(FS / clicks_hz)] += 25 * noise
    if extra_hz is not None:
        x += extra_counts * np.sin(2 * np.pi * extra_hz * t)[:, None]
    x += rng.standard_normal((n, 3))
    x[:, 2] += COUNTS_PER_G
    return np.clip(np.rint(x), -4096, 4095).astype(np.int16)


def recording(counts, t0, rpm, name="syn"):
    return Recording(path=Path(f"{name}_{int(t0)}.wav"), counts=counts, m_s2_per_count=M_S2_PER_COUNT,
                     sample_rate_hz=float(FS), axes=("x", "y", "z"), t0_s=float(t0), rpm=rpm, machine="P-101")


def healthy_stream(seed=1, per_point=4, seconds=20.0, stops=3, t_start=1000.0):
    """Recordings at the three POINTS and a few stopped, 10 min apart, in a random order."""
    rng = np.random.default_rng(seed)
    plan = [*POINTS] * per_point + [0.0] * stops
    rng.shuffle(plan)
    return [recording(pump_counts(rng, r, seconds), t_start + 600.0 * i, r) for i, r in enumerate(plan)]


# --- operating modes -------------------------------------------------------------------------------

def harmonic_counts(rng, rpm, seconds, gain=1.0):
    """Invented pump vibration with a full harmonic series (1x 10 counts, 2x 6, 3x 4, on x and z,
    each times gain), broadband noise of 2 counts, 1 g on z: a shaft whose speed the device can
    estimate."""
    n = int(seconds * FS)
    t = np.arange(n) / FS
    fr = rpm / 60.0
    x = sum(gain * a * np.cos(2 * np.pi * h * fr * t + rng.uniform(0, 6.3)) for h, a in ((1, 10.0), (2, 6.0), (3, 4.0)))
    c = x[:, None] * [1.0, 0.3, 0.8] + 2.0 * rng.standard_normal((n, 3))
    c[:, 2] += COUNTS_PER_G
    return np.clip(np.rint(c), -4096, 4095).astype(np.int16)


def test_modes_are_operating_points_told_apart_by_speed():
    # two duty points of a drive, 1480 and 2950 r/min, 20 s recordings in a random order: the
    # modes must follow the speed (scikit-learn's adjusted Rand index against the sidecar rpm),
    # never the health features, and each mode's speed range must hold its shaft frequency
    rng = np.random.default_rng(3)
    plan = [1480.0, 2950.0] * 6 + [0.0] * 2
    rng.shuffle(plan)
    recs = [recording(harmonic_counts(rng, r, 20.0) if r else pump_counts(rng, 0.0, 20.0), 1000.0 + 600 * i, r)
            for i, r in enumerate(plan)]
    params, summary = train(recs, PROFILE)
    assert params["det_modes"] == 2 and "speed" in summary["modes"]["criterion"]
    op = params["det_op_speed_q8"]
    for m, hz in enumerate((1480 / 60, 2950 / 60)):
        assert op[2 * m] / 256 < hz < op[2 * m + 1] / 256
    # the 0.5x line: a 49 Hz shaft reads it clear of the 1x (7.9 bins of 6.25 Hz), a 25 Hz one
    # (3.9 bins) does not, so the slow mode sets it aside (test_half_order_is_scored_only_clear_of_the_1x_lobe)
    from firmware_py.detect.modes import Z_LIM
    d, pa = len(params["det_feat"]), fi.per_axis(len(params["fc_bands"]))
    half = [j for j, i in enumerate(params["det_feat"]) if i % pa == fi.F_ORD_HALF]
    assert half and all(params["det_mode_s_q8"][j] == Z_LIM for j in half)
    assert all(params["det_mode_s_q8"][d + j] < Z_LIM for j in half)
    assert [m["half_aside"] for m in summary["modes"]["table"]] == [True, False]
    # the band edges: the 2950 r/min shaft's 2x (98.3 Hz, 15.7 bins) sits on the board's edge at
    # 16 (100 Hz), so training moved it;
    # at each edge it moved, a tone at either end of every mode's range, at 1x, 2x, 3x and the
    # vane pass, lies wholly on one side: under 1e-3 of its Hann-windowed power (numpy rfft)
    # across it, below the Hann sidelobes (-31.5 dB, Harris 1978). (The edge at 8, 50 Hz, had no
    # clear bin within reach of it: 1x of the fast mode and 2x of the slow one both sit there.)
    from firmware_py.run.params import factory
    board = {e for b in factory(PROFILE)["fc_bands"] for e in b}
    moved = sorted({e for b in params["fc_bands"] for e in b} - board)
    assert moved and summary["learned"]["band_edges"].startswith("moved")
    n = params["n"]
    t = np.arange(n) / FS
    w = np.hanning(n + 1)[:n]
    for lo_q8, hi_q8 in zip(op[::2], op[1::2]):
        for f in (lo_q8 / 256, hi_q8 / 256):
            for o in (1, 2, 3, params["fc_vane"]):
                pw = np.abs(np.fft.rfft(w * np.cos(2 * np.pi * o * f * t))) ** 2
                for e in moved:
                    share = pw[e:].sum() / pw.sum()
                    assert share < 1e-3 or share > 1 - 1e-3, (f, o, e, share)
    assert "the 0.5x line is not judged here" in report_text(summary).split("mode 0:")[1].split("\n")[0]
    res = replay([recs], params, PROFILE)
    w = res.windows
    rpm = np.array([{str(r.path): r.rpm for r in recs}[p] for p in w["recording"]])
    scored = w["mode"] >= 0
    assert scored.sum() > 500 and not np.any(scored & (rpm == 0))
    # the replay joins the recordings, so each speed change is a step from one window to the next;
    # a median over the steadiness span follows a step at most half a span late, so at most that
    # many windows per change may still be judged in the old mode
    span = al.windows_for(params["det_steady_ms"], params["n"], params["fs_hz"], 1)
    running = [r for r in plan if r]
    changes = sum(a != b for a, b in zip(running[:-1], running[1:]))
    wrong = int((scored & (w["mode"] != np.where(rpm == 1480.0, 0, 1))).sum())
    assert wrong <= changes * (span // 2)
    assert adjusted_rand_score(rpm[scored], w["mode"][scored]) > 0.9
    assert res.summary["total"]["alarms"] == 0


def _twin_rows(recs, params):
    from host_tools.twin.replay import stream_features, twin_for
    return stream_features(recs, twin_for(params, PROFILE)).feats


def test_a_level_driven_by_a_force_that_grows_as_speed_squared_follows_the_speed_within_its_mode():
    # one duty trimmed anywhere in -6 .. +6 %: every harmonic's amplitude grows as the speed
    # squared (a force from a fixed unbalance, acceleration ~ force above the mount's resonance;
    # common practice) over a noise floor that does not, so the acceleration r.m.s. grows by a
    # little under 2 octaves per octave of speed. The slope training keeps for the x axis's r.m.s.
    # agrees with scipy's linregress of the recordings' mean log2 r.m.s. (numpy, each window's
    # samples less their mean) on log2 of their sidecar speed, less at most the regression
    # dilution that the gateway's own speed estimate (the fit's regressor) brings: were all its
    # scatter about the sidecar speed independent error, the slope would shrink by
    # var(true) / (var(true) + var(scatter)) (Fuller, "Measurement Error Models", 1987, common
    # practice); a scatter partly tied to the speed shrinks it less. Between the two, widened by 3
    # of linregress's standard errors and the Q8 step
    from scipy import stats
    rng = np.random.default_rng(29)
    trims = rng.uniform(0.94, 1.06, 36)           # a continuum of trims: one mode
    recs = [recording(harmonic_counts(rng, 1480.0 * k, 8.0, k * k), 1000.0 + 600 * i, 1480.0 * k)
            for i, k in enumerate(trims)]
    params, summary = train(recs, PROFILE)
    assert params["det_modes"] == 1
    slope = params["det_follow_q8"][params["det_feat"].index(fi.F_RMS)] / 256
    n = params["n"]
    level = []
    for r in recs:
        x = r.counts[: len(r.counts) // n * n, 0].astype(np.float64).reshape(-1, n)
        level.append(np.mean(np.log2(np.sqrt(np.mean((x - x.mean(1, keepdims=True)) ** 2, 1)))))
    ref = stats.linregress(np.log2(trims), level)
    w = replay([recs], params, PROFILE).windows
    true = np.log2(np.array([{str(r.path): r.rpm / 60.0 for r in recs}[p] for p in w["recording"]]))
    seen = (w["not_scored"] == "scored") & (w["speed_hz"] > 0)      # the windows training fits
    est = np.log2(w["speed_hz"][seen])
    dilution = np.var(true[seen]) / (np.var(true[seen]) + np.var(est - true[seen]))
    room = 3 * ref.stderr + 1 / 512
    assert dilution * ref.slope - room <= slope <= ref.slope + room
    assert any(f["feature"] == "accel_rms axis x" for f in summary["modes"]["follow"])
    assert "levels judged at each mode's own speed" in report_text(summary)
    # the 1x (23.2-26.1 Hz, 3.7-4.2 bins of 6.25 Hz) has its Hann lobe across the 25 Hz edge
    # between the 18.75-25 and 25-50 Hz bands: each band then follows the speed in the mode, the
    # way the line's power moves between them. The direction from numpy's FFT of a Hann-windowed
    # tone at the trims' ends (the reference): the 25-50 Hz band gains as the speed rises, the
    # 18.75-25 Hz band loses
    t = np.arange(params["n"])
    def share(x, lo, hi):
        spec = np.abs(np.fft.rfft(np.hanning(params["n"]) * np.sin(2 * np.pi * x * t / params["n"]))) ** 2
        return spec[lo:hi].sum()
    x0, x1 = (1480.0 / 60 * k * params["n"] / params["fs_hz"] for k in (trims.min(), trims.max()))
    got = {f["feature"]: f["octaves_per_octave"] for f in summary["modes"]["mode_follow"][0]["follow"]}
    for band, (lo, hi) in (("18.75-25", (3, 4)), ("25-50", (4, 8))):
        assert np.sign(got[f"band {band} Hz axis x"]) == np.sign(np.log2(share(x1, lo, hi) / share(x0, lo, hi)))
    assert "bands judged at the mode's own speed" in report_text(summary)


def test_idle_floor_between_stopped_and_running_and_sensor_limits():
    recs = healthy_stream(seed=4, per_point=8, stops=6)
    params, summary = train(recs, PROFILE)
    feats = _twin_rows(recs, params)
    pa = fi.per_axis(len(params["fc_bands"]))
    bb = feats[:, fi.F_VEL::pa].max(1)              # broadband velocity, largest axis
    per_rec = np.repeat([r.rpm for r in recs], [r.n_frames // params["n"] for r in recs])
    assert bb[per_rec == 0].max() < params["det_idle_vel_q16"] < bb[per_rec > 0].min()
    assert "sidecar rpm" in summary["idle_floor"]["rule"]
    # DC range holds every training mean with room, z around 1 g
    assert all(lo < 0 < hi for lo, hi in zip(params["det_dc_lo_q8"][:2], params["det_dc_hi_q8"][:2]))
    assert params["det_dc_lo_q8"][2] < COUNTS_PER_G * 256 < params["det_dc_hi_q8"][2]
    assert params["det_dc_hi_q8"][2] - params["det_dc_lo_q8"][2] >= COUNTS_PER_G * 256 // 2 - 2
    assert params["det_clip_max"] == 0


def test_warnings_for_abnormal_or_thin_training_data():
    recs = healthy_stream(seed=5, per_point=8)
    rng = np.random.default_rng(9)
    # a few recordings already vibrating hard (ISO zone C/D) among the healthy ones
    bad = [recording(pump_counts(rng, 1480.0, 20.0, tone=60.0), 50000.0 + 600 * i, 1480.0) for i in range(2)]
    _, summary = train(recs + bad, PROFILE)
    assert summary["windows"]["iso_zone_c_or_d"] > 0
    assert any("zone C" in w for w in summary["warnings"])
    assert any("little data" in w for w in summary["warnings"])
    json.dumps(summary)   # JSON-serialisable


def test_too_little_data_is_refused():
    rng = np.random.default_rng(2)
    from host_tools.errors import EdgevibError
    with pytest.raises(EdgevibError, match="training windows"):
        train([recording(pump_counts(rng, 1480.0, 2.0), 0.0, 1480.0)], PROFILE)


# --- the command -----------------------------------------------------------------------------------

def _write(folder, recs):
    folder.mkdir(parents=True, exist_ok=True)
    for r in recs:
        write_wav(folder / r.path.name, r.counts, FS, {"m_s2_per_unit": M_S2_PER_COUNT, "t0_s": r.t0_s,
                                                       "rpm": r.rpm, "machine": "P-101"})


def test_train_command_writes_a_set_the_device_loads(tmp_path, capsys):
    t0 = 1805349600                                # 2027-03-18 06:00:00 UTC as Unix seconds
    _write(tmp_path / "normal", healthy_stream(seed=6, per_point=7, t_start=t0))
    out = tmp_path / "p101.msgpack"
    assert main(["train", str(tmp_path / "normal"), "--out", str(out), "--version", "7",
                 "--false-alerts-per-month", "0.5", "--board", str(BOARD)]) == 0
    text = capsys.readouterr().out
    assert "expected false alerts per 30 days" in text
    body = out.read_bytes()
    p = msgpack.unpackb(body, raw=False)           # the reference MessagePack library
    assert p == mpack.unpackb(body)                # and the device's decoder read the same map
    assert p["version"] == 7 and p["board"] == "desk"
    pm.build(p, PROFILE)                           # the device builds core and detector from it
    summary = json.loads(out.with_suffix(".json").read_text())
    assert summary["thresholds"]["alert_q8"] == p["det_thr_alert_q8"]
    assert summary["thresholds"]["target_false_alerts_per_30_days"] == 0.5
    assert out.with_suffix(".report.txt").read_text() == text.split("wrote ")[0]
    # 24 recordings 10 min apart, the last one 20 s long: it ends 23 * 600 + 20 s after the first
    # starts, and the report names both files with their dates
    assert summary["span"]["days"] == (23 * 600 + 20) / 86400
    assert (f"recorded from 2027-03-18 06:00:00.0 UTC (syn_{t0}.wav) to 2027-03-18 09:50:20.0 UTC "
            f"(syn_{t0 + 23 * 600}.wav + 20.0 s): 0.2 days") in text
    assert "for running like the training days (0.2 days): a drift of the duty" in text


def test_train_command_refuses_bad_input_and_writes_nothing(tmp_path, capsys):
    rng = np.random.default_rng(0)
    folder = tmp_path / "normal"
    folder.mkdir()
    write_wav(folder / "a.wav", pump_counts(rng, 1480.0, 1.0), 4000, {"m_s2_per_unit": M_S2_PER_COUNT})
    out = tmp_path / "p.msgpack"
    assert main(["train", str(folder), "--out", str(out), "--board", str(BOARD)]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "sample rate" in err
    assert sorted(q.name for q in tmp_path.iterdir()) == ["normal"]
    (folder / "b.wav").write_bytes(b"RIFF")      # no sidecar
    assert main(["train", str(folder / "b.wav"), "--out", str(out)]) == 2
    assert "sidecar" in capsys.readouterr().err
    # the summary beside a.msgpack would be a.json, the recording's own sidecar
    assert main(["train", str(folder), "--out", str(folder / "a.msgpack")]) == 2
    assert "overwrite" in capsys.readouterr().err
    assert not out.exists() and not (folder / "a.msgpack").exists()


def test_parallel_fits_give_the_same_set():
    recs = healthy_stream(seed=8, per_point=6)
    one = train(recs, PROFILE, jobs=1)
    two = train(recs, PROFILE, jobs=2)
    assert one[0] == two[0] and one[1] == two[1]


def test_idle_floor_from_stops_inside_recordings_of_unknown_rpm():
    # No recording wholly stopped (a capture of a stop also holds its run-down: rpm unknown), but
    # windows of it lie far under steady running: the floor goes between them, as with rpm 0.
    from host_tools.fit.training import _idle_floor
    rng = np.random.default_rng(8)
    running = rng.uniform(950.0, 1800.0, 400)
    stopped = rng.uniform(250.0, 420.0, 60)
    ramp = rng.uniform(420.0, 950.0, 20)                  # run-down and run-up windows
    bb = np.r_[running, stopped, ramp]
    rpm = np.r_[np.full(400, 1470.0), np.full(80, np.nan)]
    floor, rule, warns = _idle_floor(bb, rpm, 1e-3)
    q_run = np.percentile(running, 1)
    low = bb[400:][bb[400:] < q_run / 2]
    assert floor == int(np.sqrt(np.percentile(low, 99) * q_run))     # numpy's percentile, the rule's
    assert stopped.max() < floor < running.min() and not warns and "octave" in rule


def test_half_order_is_scored_only_clear_of_the_1x_lobe():
    # The device reads the 0.5x line as the 2 bins floor(f/2), floor(f/2)+1 and the 1x as
    # floor(f), floor(f)+1 (firmware_py/dsp/orders.py); the 1x's Hann main lobe spans +-2 bins
    # (Harris 1978). Checked with numpy, not with the rule: a lone 1x tone at f bins (every tenth
    # of a bin, so the worst fractional position is seen) leaks into that 0.5x read by less than
    # the Hann first sidelobe (-31.5 dB, Harris 1978) everywhere from 5 bins, and by far more
    # below it (4.8 bins: the read's top bin lies 1.8 bins under the 1x, inside its main lobe).
    from host_tools.fit.training import _feature_list
    n = 512
    w = np.hanning(n + 1)[:n]          # periodic Hann

    def leak_db(f_bins):
        p = np.abs(np.fft.rfft(w * np.cos(2 * np.pi * f_bins * np.arange(n) / n))) ** 2
        k, j = int(np.floor(f_bins / 2)), int(np.floor(f_bins))
        return 10 * np.log10(p[k:k + 2].sum() / p[j:j + 2].sum())
    assert max(leak_db(f) for f in np.arange(5.0, 9.0, 0.1)) < -31.5
    assert min(leak_db(f) for f in (4.5, 4.8)) > -31.5
    hz = FS / PROFILE["window_n"]           # one bin in Hz
    for f_bins, clear in ((3.9, False), (4.5, False), (4.8, False), (5.2, True), (7.8, True)):
        # the set scores 0.5x when its fastest shaft reads it clear...
        prm = pm.factory(PROFILE)
        prm.update(fc_speed_lo_q8=int(3.0 * hz * 256), fc_speed_hi_q8=int(f_bins * hz * 256), fc_vane=6)
        pa = fi.per_axis(len(prm["fc_bands"]))
        halves = [j for j in _feature_list(prm) if j % pa == fi.F_ORD_HALF]
        assert bool(halves) == clear
        # ...and a mode whose slowest shaft does not read it clear sets it aside
        prm.update(fc_speed_hi_q8=60 * 256, det_bands=len(prm["fc_bands"]))
        prm["det_feat"] = _feature_list(prm)
        aside = modes_fit.set_aside(prm, f_bins * hz)
        assert [prm["det_feat"][j] for j in aside] == ([] if clear else [a * pa + fi.F_ORD_HALF for a in range(3)])
    # more than the detector holds: the peaks go first (log peak = log crest + log r.m.s.), then
    # the window's own 0.5x lines, the last axis's first (the half-order prominence reads that line
    # over many windows); every axis keeps its top band, where bearing defects ring
    prm = pm.factory(PROFILE)
    prm.update(fc_speed_lo_q8=int(8 * hz * 256), fc_speed_hi_q8=60 * 256, fc_vane=6, fc_env_band=[1, 2], fc_bear_q12=[1, 2, 3, 4])
    feats = _feature_list(prm)
    top = fi.F_BAND0 + len(prm["fc_bands"]) - 1
    assert len(feats) <= 64
    assert all(a * pa + f in feats for a in range(3) for f in (top, fi.F_HALF))
    assert 2 * pa + fi.F_PEAK not in feats and 2 * pa + fi.F_ORD_HALF not in feats
    assert fi.F_ORD_HALF in feats


def _search_hz(rpms, n=512):
    """The speed search training chooses for recordings at these sidecar speeds (Hz)."""
    from types import SimpleNamespace
    from host_tools.fit.training import _feature_options
    recs = [SimpleNamespace(rpm=r, vane_count=6, sidecar={}) for r in rpms]
    warns: list[str] = []
    keys, why = _feature_options([recs], {"fs_hz": FS, "n": n}, None, warns)
    return keys["fc_speed_lo_q8"] / 256, keys["fc_speed_hi_q8"] / 256, why["speed"], warns


def test_speed_search_keeps_every_duty_inside_and_stays_under_an_octave():
    # A shaft at f has its 2x at 2 f (physics), so a candidate at f/2 inside the search would read
    # f's line as its 2x: the search must not reach half its own top, hi < 2 lo. The 15 % margins
    # of 890-1480 r/min would give 12.6-28.4 Hz (2.25 x); training narrows them evenly instead.
    lo, hi, why, _ = _search_hz([890.0, 1180.0, 1480.0])
    assert hi < 2 * lo
    assert lo < 890 / 60 * 0.95 and hi > 1480 / 60 * 1.05      # each duty well inside (5 %+)
    assert "within an octave" in why
    # duties themselves nearly an octave apart (745-1480 r/min) keep the margins: narrowed to
    # under 1.95 x, the top duty would sit at the end of the search and read the range
    lo, hi, why, warns = _search_hz([745.0, 1480.0])
    assert hi > 1480 / 60 * 1.03 and any("nearly an octave" in w for w in warns)
    # 1000-1520 r/min: the margin stops at 2.5 bins (16.5 Hz at 512 samples and 3200 Hz), where the
    # 1x and 2x main lobes (+-2 bins, Hann; common practice) share one bin at most
    lo, hi, why, warns = _search_hz([1000.0, 1520.0])
    assert lo == 16.5 and hi < 2 * lo and not warns
    # a 6-pole pump at 40 and 50 Hz (13.0-16.8 Hz): searched from the estimator's floor of 2 bins,
    # with a warning that the window resolves it coarsely
    lo, hi, why, warns = _search_hz([761.5, 1005.5])
    assert lo == 2 * FS / 512 and hi < 2 * lo
    assert any("a longer window would resolve them" in w for w in warns)


def test_a_duty_whose_speed_reads_coarsely_keeps_the_search_at_two_and_a_half_bins():
    # Windows of a duty under 2.5 bins (890 r/min, 14.8 Hz, at 512 samples and 3200 Hz) whose
    # estimate (the most confident axis's F_SPEED, Hz Q8) agrees with the sidecar speed in 9 of 10
    # windows keep the coarse search; one that jumps to another line (1.7 x here) in 4 of 10 does
    # not, and the warning names it.
    from types import SimpleNamespace
    from host_tools.fit.training import _coarse_reads
    pa = fi.per_axis(3)
    p = {"fs_hz": FS, "n": 512, "axes": 1, "det_bands": 3, "fc_bands": [[2, 3], [3, 4], [4, 8]],
         "fc_speed_lo_q8": int(13.7 * 256)}
    rng = np.random.default_rng(3)

    def reads(jump_share, duties=(890.0, 1480.0)):
        rpm = np.repeat(duties, 100)
        true_hz = rpm / 60
        est = true_hz * (1 + rng.uniform(-0.05, 0.05, rpm.size))
        jump = (rpm == duties[0]) & (rng.random(rpm.size) < jump_share)
        est[jump] = true_hz[jump] * 1.7
        f = np.zeros((rpm.size, pa), np.int64)
        f[:, fi.F_SPEED] = np.round(est * 256)
        f[:, fi.F_SPEED_CONF] = 200
        recs = [SimpleNamespace(rpm=r) for r in rpm]
        return _coarse_reads([SimpleNamespace(feats=f, rec=np.arange(rpm.size))], [recs], p)
    assert reads(0.0) == (False, None)
    again, warn = reads(0.4)
    assert again and "890 r/min" in warn and "stays at 2.5 bins" in warn
    # a pump with no duty clear of 2.5 bins (a 6-pole pump at 12.7 and 16.8 Hz; 2.5 bins is 15.6 Hz,
    # searched from 16.5) has nothing to score at 2.5 bins: the coarse search stays, with the warning
    again, warn = reads(0.4, (761.5, 1005.5))
    assert not again and "761.5 r/min" in warn and "no duty turns clear" in warn
    # a search that starts at 2.5 bins or above has no coarse duty to check
    assert _coarse_reads([], [], dict(p, fc_speed_lo_q8=int(16.5 * 256))) == (False, None)
