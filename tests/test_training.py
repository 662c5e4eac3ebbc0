"""Training: thresholds with a known false-alert rate, operating modes, the parameter set it writes.

Synthetic pump signals here are invented test data (tones at 1x, 2x and vane pass of a shaft
speed, white sensor noise, gravity on z), in ADXL345-like counts (256 counts per g, +-4096).
"""
import json
import math
from pathlib import Path

import msgpack
import numpy as np
import pytest
from scipy import stats
from sklearn.cluster import KMeans
from sklearn.metrics import adjusted_rand_score
from sklearn.preprocessing import StandardScaler

import firmware_py  # noqa: F401
from firmware_py.run import board
from firmware_py.codec import mpack
from firmware_py.dsp import feature_index as fi
from firmware_py.run import params as pm
from host_tools.fit import modes_fit, tail_fit
from host_tools.cli import main
from host_tools.data.recording import Recording, write_wav
from host_tools.twin.replay import replay
from host_tools.fit.training import score_threshold, train

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


def healthy_stream(seed=1, per_point=10, seconds=2.0, stops=3, t_start=1000.0):
    """Recordings at the three POINTS and a few stopped, 10 min apart, in a random order."""
    rng = np.random.default_rng(seed)
    plan = [*POINTS] * per_point + [0.0] * stops
    rng.shuffle(plan)
    return [recording(pump_counts(rng, r, seconds), t_start + 600.0 * i, r) for i, r in enumerate(plan)]


# --- the tail fit on scores with a known distribution ----------------------------------------------

def _onsets(x, k, n):
    """Times a k-of-n rule switches on over the 0/1 series x (a direct count, numpy)."""
    c = np.convolve(x.astype(int), np.ones(n, int))[: len(x)]
    on = c >= k
    return int((on[1:] & ~on[:-1]).sum() + on[0])


@pytest.mark.parametrize("phi", [0.0, 0.8])
def test_threshold_meets_false_alert_target_on_held_out_scores(phi):
    # Scores of d independent standard normal features at one mode with unit spreads are chi with
    # d degrees of freedom (the detector's score; handbook identity): scipy.stats.chi gives the
    # true tail. AR(1) features (phi 0.8) keep that marginal but correlate neighbouring windows.
    d, k, n = 6, 3, 5
    rng = np.random.default_rng(7)

    def scores(count):
        e = rng.standard_normal((count, d))
        z = np.empty_like(e)
        z[0] = e[0]
        for i in range(1, count):
            z[i] = phi * z[i - 1] + math.sqrt(1 - phi * phi) * e[i]
        return np.floor(256 * np.sqrt((z * z).sum(1))).astype(np.int64)   # Q8, as det.score_q8

    windows_30, target = 2.0e5, 100.0     # a fast clock, so held-out onsets are countable
    thr, ch = score_threshold(scores(40000), windows_30, k, n, target)
    p_true = float(stats.chi(d).sf((thr - 1) / 256.0))  # S >= thr  <=>  score > (thr - 1) / 256 in Q8
    # per-window exceedance: the fit's own sampling error (delta method), inflated for AR(1) by the
    # effective-sample factor (1 + phi) / (1 - phi) of the variance (time-series handbook identity)
    se = ch.fit.log_exceedance_se(ch.threshold) * math.sqrt((1 + phi) / (1 - phi))
    assert abs(math.log(p_true / ch.p_window)) < 3 * se + 256.0 ** -1, (p_true, ch.p_window, se)
    held = scores(400000)
    p_held = float((held >= thr).mean())
    assert p_held == pytest.approx(p_true, rel=4 * math.sqrt((1 + phi) / (1 - phi) / (p_true * len(held))))
    onsets = _onsets(held >= thr, k, n) * windows_30 / len(held)
    print(f"phi {phi}: threshold {thr / 256:.3f}, p {ch.p_window:.2e} (true {p_true:.2e}), "
          f"held-out onsets per 30 days {onsets:.1f}, target {target:g}")
    if phi == 0.0:
        true_rate = windows_30 * tail_fit.onset_prob(p_true, k, n)
        count = true_rate * len(held) / windows_30
        assert abs(onsets - true_rate) * len(held) / windows_30 < 4 * math.sqrt(count) + 1
        lo, hi = ch.false_alerts_range_95
        assert lo <= true_rate <= hi
    else:
        # clustered exceedances fill a k-of-n rule more often than independent ones (tail_fit docstring)
        assert onsets > target


# --- operating modes -------------------------------------------------------------------------------

def test_modes_recovered_at_separate_operating_points():
    recs = healthy_stream(seed=3)
    params, summary = train(recs, PROFILE, seed=0)
    assert params["det_modes"] == 3
    assert "silhouette" in summary["modes"]["criterion"]
    res = replay([recs], params, PROFILE)
    w = res.windows
    rpm_of = {str(r.path): r.rpm for r in recs}
    rpm = np.array([rpm_of[p] for p in w["recording"]])
    scored = w["mode"] >= 0
    assert scored.sum() > 200 and not np.any(scored & (rpm == 0))
    # the reference: scikit-learn's k-means on the same log-scale features, standardised
    feats = np.array([[*map(float, row)] for row in _twin_rows(recs, params)])[scored]
    u = StandardScaler().fit_transform(modes_fit.transformed(feats, params))
    ref = KMeans(3, n_init=10, random_state=0).fit_predict(u)
    assert adjusted_rand_score(ref, w["mode"][scored]) == pytest.approx(1.0, abs=0.02)
    assert adjusted_rand_score(rpm[scored], w["mode"][scored]) == pytest.approx(1.0, abs=0.02)
    sizes = [m["windows"] for m in summary["modes"]["table"]]
    assert sorted(sizes) == sorted(np.bincount(w["mode"][scored]).tolist())
    # the healthy data itself raises nothing
    assert res.summary["total"]["alerts"] == 0 and res.summary["total"]["alarms"] == 0
    vel = [m["median"]["velocity_rms_mm_s"] for m in summary["modes"]["table"]]
    assert len(set(vel)) == 3


def _twin_rows(recs, params):
    from host_tools.twin.replay import stream_features, twin_for
    return stream_features(recs, twin_for(params, PROFILE)).feats


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
    bad = [recording(pump_counts(rng, 1480.0, 2.0, tone=60.0), 50000.0 + 600 * i, 1480.0) for i in range(2)]
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
    _write(tmp_path / "normal", healthy_stream(seed=6, per_point=7))
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
