"""The invented demo scenario: spectral lines where the physics puts them, faults, determinism."""
import hashlib
import json

import numpy as np
import pytest
from scipy import signal
from scipy.stats import kurtosis

from host_tools.data import demo_scenario as ds
from host_tools.data.bearing import defect_orders
from host_tools.data.recording import read_stream

SC = ds.build_scenario()
DAY = 86400.0


def _steady(pump, rpm, after_day=0.0, before_day=ds.DAYS, duration_s=8.0, last=False):
    """A snapshot of `pump` held at `rpm` for its whole length, between the given days."""
    t_lo, t_hi = SC.start_t0_s + after_day * DAY, SC.start_t0_s + before_day * DAY
    picks = [s for s in SC.snapshots if s.pump == pump and s.trigger == "periodic" and t_lo <= s.t0_s < t_hi
             and np.all(SC.speed_rpm(pump, s.t0_s + np.arange(0, duration_s + 1)) == rpm)]
    s = picks[-1 if last else 0]
    return ds.Snapshot(pump, s.t0_s, duration_s)


def _amplitude_spectrum(x):
    """Single-sided peak-amplitude spectrum with a Hann window (numpy.fft; common practice)."""
    w = np.hanning(len(x))
    spec = np.abs(np.fft.rfft((x - x.mean()) * w)) * 2.0 / w.sum()
    return np.fft.rfftfreq(len(x), 1.0 / ds.FS_HZ), spec


def _line(f, spec, f0, tol_hz):
    """Largest amplitude within tol_hz of f0, and the median floor within 20 Hz."""
    near = np.abs(f - f0) <= tol_hz
    floor = np.median(spec[(np.abs(f - f0) <= 20.0) & ~near])
    return spec[near].max(), floor


def test_machine_lines_at_expected_frequencies():
    p = SC.pumps["P-101"]
    counts = ds.synthesize(SC, _steady("P-101", 1480.0, before_day=7))
    a = counts * ds.M_S2_PER_COUNT
    fr = 1480.0 / 60.0
    tol = 0.005 * p.vane_count * fr + 0.25  # speed spread 0.1 % (3 sd) at the highest order, + 2 bins
    fx, sx = _amplitude_spectrum(a[:, 0])
    fy, sy = _amplitude_spectrum(a[:, 1])
    for name, (f, s, f0) in {
        "1x": (fx, sx, fr), "2x (axial)": (fy, sy, 2 * fr), "vane pass": (fx, sx, p.vane_count * fr),
        "vane pass - 1x": (fx, sx, (p.vane_count - 1) * fr), "vane pass + 1x": (fx, sx, (p.vane_count + 1) * fr),
    }.items():
        peak, floor = _line(f, s, f0, tol)
        assert peak > 20 * floor, name
    # Amplitudes: 1x on x is the imbalance amplitude (day-to-day spread 5 %, 3 sd = 16 %; 25 %
    # allowed for the noise and window); the vane-pass sidebands are 0.3 of the carrier (60 % AM).
    assert _line(fx, sx, fr, tol)[0] == pytest.approx(p.imbalance_m_s2, rel=0.25)
    carrier = _line(fx, sx, p.vane_count * fr, tol)[0]
    assert _line(fx, sx, (p.vane_count + 1) * fr, tol)[0] / carrier == pytest.approx(0.3, rel=0.25)


def _envelope_spectrum(x, band):
    """Envelope spectrum: band-pass, |analytic signal| by scipy.signal.hilbert, then its spectrum."""
    sos = signal.butter(4, band, btype="bandpass", fs=ds.FS_HZ, output="sos")
    env = np.abs(signal.hilbert(signal.sosfiltfilt(sos, x)))
    return _amplitude_spectrum(env)


def test_bearing_defect_rings_resonance_at_bpfo():
    p = SC.pumps["P-101"]
    bpfo = defect_orders(p.bearing).bpfo * 1480.0 / 60.0
    band = [p.resonance_hz - 250.0, p.resonance_hz + 250.0]
    faulty = ds.synthesize(SC, _steady("P-101", 1480.0, after_day=30)) * ds.M_S2_PER_COUNT
    healthy = ds.synthesize(SC, _steady("P-101", 1480.0, before_day=7)) * ds.M_S2_PER_COUNT
    f, env = _envelope_spectrum(faulty[:, 2], band)
    search = (f > 20.0) & (f < 300.0)
    f_peak = f[search][np.argmax(env[search])]
    # Real bearings run 1-2 % below the kinematic BPFO because of slip (common practice).
    assert 0.975 * bpfo <= f_peak <= 1.0 * bpfo + 0.125
    peak2, floor2 = _line(f, env, 2 * f_peak, 0.02 * 2 * bpfo)
    assert peak2 > 5 * floor2  # harmonics of an impulsive train
    fh, envh = _envelope_spectrum(healthy[:, 2], band)
    peak_h, floor_h = _line(fh, envh, f_peak, 0.02 * bpfo)
    assert peak_h < 5 * floor_h  # no line on a healthy bearing
    # The ring-down sits at the housing resonance.
    fz, sz = _amplitude_spectrum(faulty[:, 2])
    hi = fz > 500.0
    assert abs(fz[hi][np.argmax(sz[hi])] - p.resonance_hz) < p.resonance_hz / p.resonance_q


def test_bearing_defect_grows():
    levels = []
    for day in (21, 28, 35, 41):
        c = ds.synthesize(SC, _steady("P-101", 1480.0, after_day=day, duration_s=4.0))
        hp = signal.sosfiltfilt(signal.butter(4, 800.0, btype="highpass", fs=ds.FS_HZ, output="sos"), c[:, 2] * 1.0)
        levels.append(hp.std())
    assert all(b > a for a, b in zip(levels, levels[1:]))
    assert levels[-1] > 10 * levels[0]


def _band_rms(x, lo, hi):
    sos = signal.butter(4, [lo, hi], btype="bandpass", fs=ds.FS_HZ, output="sos")
    return signal.sosfiltfilt(sos, x - x.mean())


def test_cavitation_raises_high_band_in_bursts():
    healthy = ds.synthesize(SC, _steady("P-102", 1480.0, after_day=8, duration_s=4.0))[:, 0] * 1.0
    cav = ds.synthesize(SC, _steady("P-102", 1480.0, after_day=26.0, before_day=27.5, duration_s=4.0))[:, 0] * 1.0
    h, c = _band_rms(healthy, 500, 1500), _band_rms(cav, 500, 1500)
    assert c.std() > 5 * h.std()
    assert kurtosis(c) > 2.0  # bursty: heavier tails than Gaussian noise (excess kurtosis 0)


def _flat_runs(counts, min_len):
    """Number of runs of at least min_len frames with every axis unchanged."""
    same = np.all(counts[1:] == counts[:-1], axis=1)
    edges = np.diff(np.r_[0, same.astype(int), 0])
    lengths = np.flatnonzero(edges == -1) - np.flatnonzero(edges == 1)
    return int(np.sum(lengths >= min_len))


def test_loose_cable_dropouts_and_spikes():
    f = next(f for f in SC.faults if f.kind == "loose_cable")
    inside = [s for s in SC.snapshots if s.pump == f.pump and f.start_t0_s <= s.t0_s <= f.end_t0_s]
    outside = [s for s in SC.snapshots if s.pump == f.pump and s.t0_s < f.start_t0_s][:20]
    hit = [ds.synthesize(SC, s) for s in inside]
    flat = sum(_flat_runs(c, 50) > 0 for c in hit)
    spikes = sum(bool(np.any((c == ds.ADC_MIN) | (c == ds.ADC_MAX))) for c in hit)
    assert flat >= len(hit) // 2 and spikes >= len(hit) // 2
    for s in outside:
        c = ds.synthesize(SC, s)
        assert _flat_runs(c, 50) == 0 and ds.ADC_MIN < c.min() and c.max() < ds.ADC_MAX


def test_gravity_and_scale():
    c = ds.synthesize(SC, _steady("P-101", 890.0, duration_s=4.0))
    # z reads +1 g (standard gravity 9.80665 m/s^2) plus its zero-g offset and a drift of <= 0.03.
    z = c[:, 2].mean() * ds.M_S2_PER_COUNT
    assert abs(z - (ds.G_M_S2 + SC.pumps["P-101"].offsets_m_s2[2])) < 0.04
    # ADXL345 full resolution: 3.9 mg per count, +-16 g in 13 bits (datasheet; from memory).
    assert ds.M_S2_PER_COUNT / 9.80665 == pytest.approx(3.9e-3, rel=0.005)
    assert ds.ADC_MAX * ds.M_S2_PER_COUNT == pytest.approx(16 * 9.80665, rel=1e-3)


def test_deterministic_from_seed():
    snap = _steady("P-102", 1180.0, duration_s=2.0)
    again = ds.build_scenario()
    np.testing.assert_array_equal(ds.synthesize(SC, snap), ds.synthesize(again, snap))
    other = ds.build_scenario(seed=ds.DEFAULT_SEED + 1)
    assert not np.array_equal(ds.synthesize(SC, snap), ds.synthesize(other, snap))


def _tree_hashes(root):
    return {str(q.relative_to(root)): hashlib.sha256(q.read_bytes()).hexdigest() for q in sorted(root.rglob("*")) if q.is_file()}


def test_written_scenario_reads_back_as_streams(tmp_path):
    gt = ds.write_scenario(tmp_path / "a", days=2.0, training_days=1.0)
    ds.write_scenario(tmp_path / "b", days=2.0, training_days=1.0)
    assert _tree_hashes(tmp_path / "a") == _tree_hashes(tmp_path / "b")
    truth = json.loads(gt.read_text())
    for pump in ("P-101", "P-102"):
        for part in ("training", "field"):
            recs = read_stream(tmp_path / "a" / pump / part, expected_rate_hz=ds.FS_HZ)
            assert len(recs) == len(truth["files"][pump][part]) > 0
            assert {r.machine for r in recs} == {pump}
            assert all(r.m_s2_per_count == ds.M_S2_PER_COUNT for r in recs)
            assert [r.t0_s for r in recs] == sorted(r.t0_s for r in recs)
        assert max(r.t0_s for r in read_stream(tmp_path / "a" / pump / "training")) < truth["training_end_t0_s"]


def test_schedule_and_ground_truth():
    truth = ds.ground_truth(SC)
    kinds = {(f["pump"], f["kind"]) for f in truth["faults"]}
    assert kinds == {("P-101", "loose_cable"), ("P-101", "bearing_outer_race"), ("P-102", "cavitation")}
    assert all(f["start_t0_s"] >= SC.training_end_t0_s for f in truth["faults"])  # training is healthy
    train = [s for s in SC.snapshots if ds.snapshot_set(SC, s) == "training"]
    for pump in SC.pumps:
        rpms = {ds.snapshot_sidecar(SC, s)["rpm"] for s in train if s.pump == pump}
        assert set(ds.OPERATING_RPM) | {0.0} <= rpms
        assert {s.trigger for s in train if s.pump == pump} == {"periodic", "stop", "start"}
    assert "invented" in ds.__doc__.lower() and "invented" in truth["note"]


def test_continuous_stretches_are_steady_healthy_and_gap_free():
    # One stretch a day at the top speed throughout (2 min before to 1 min after), outside every
    # seeded fault, wholly in training or in the field, as whole-sample files of at most a minute
    # that each start where the one before ends; no other recording of the pump overlaps it.
    sc = ds.build_scenario(stretch_s=(480.0, 240.0))
    truth = ds.ground_truth(sc)
    for pump in sc.pumps:
        spans = [(c["from_t_s"], c["to_t_s"]) for c in truth["pumps"][pump]["continuous"]]
        days = {int((a - sc.start_t0_s) // DAY) for a, _ in spans}
        assert len(days) == len(spans) and sum(b <= sc.training_end_t0_s for _, b in spans) == ds.TRAINING_DAYS
        for a, b in spans:
            assert b - a == pytest.approx(480.0 if b <= sc.training_end_t0_s else 240.0, abs=0.5 / ds.FS_HZ)
            assert a >= sc.training_end_t0_s or b <= sc.training_end_t0_s
            assert np.all(sc.speed_rpm(pump, np.arange(a - 120.0, b + 61.0)) == ds.TOP_RPM)
            assert not any(f.pump == pump and f.start_t0_s <= b and a <= f.end_t0_s for f in sc.faults)
            files = [s for s in sc.snapshots if s.pump == pump and s.trigger == "continuous" and a <= s.t0_s < b]
            assert all(s.duration_s <= ds.STRETCH_FILE_S and (s.duration_s * ds.FS_HZ).is_integer() for s in files)
            assert all(abs(p.t0_s + p.duration_s - q.t0_s) < 1e-6 for p, q in zip(files, files[1:]))
            assert files[0].t0_s == a and files[-1].t0_s + files[-1].duration_s == pytest.approx(b, abs=1e-6)
            others = [s for s in sc.snapshots if s.pump == pump and s.trigger != "continuous"]
            assert not any(s.t0_s < b and s.t0_s + s.duration_s > a for s in others)
    # without stretches the schedule is the snapshots' alone, as before
    assert ds.build_scenario().snapshots == SC.snapshots
    assert not any(s.trigger == "continuous" for s in SC.snapshots)


def test_stretches_written_alike_by_any_number_of_processes(tmp_path):
    gt = ds.write_scenario(tmp_path / "a", days=2.0, training_days=1.0, stretch_s=(120.0, 60.0))
    ds.write_scenario(tmp_path / "b", days=2.0, training_days=1.0, stretch_s=(120.0, 60.0), jobs=2)
    assert _tree_hashes(tmp_path / "a") == _tree_hashes(tmp_path / "b")
    truth = json.loads(gt.read_text())
    recs = read_stream(tmp_path / "a" / "P-101" / "training", expected_rate_hz=ds.FS_HZ)
    cont = [r for r in recs if r.sidecar.get("trigger") == "continuous"]
    assert len(cont) == 2 and len(recs) == len(truth["files"]["P-101"]["training"])
    # the two files of the stretch join sample by sample (t0 of the second = end of the first)
    assert cont[0].t0_s + len(cont[0].counts) / ds.FS_HZ == pytest.approx(cont[1].t0_s, abs=1e-6)
