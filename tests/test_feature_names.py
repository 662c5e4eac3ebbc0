"""One name per feature: the monitor, the replay (events and windows CSV) and the report print the
same name for the same flat feature index, all from host_tools.data.units.feature_name.

The expected names are built here from the feature layout and the DFT's bin width fs/n (a band of
bins [lo, hi) spans lo*fs/n to hi*fs/n Hz; textbook DFT), not read back from the code.
"""
import csv
import io
from pathlib import Path

import numpy as np

import firmware_py  # noqa: F401
from firmware_py.dsp import feature_index as fi
from firmware_py.run import params as pm
from host_tools.commands.monitor import View, render_block, render_line
from host_tools.data import units
from host_tools.data.recording import Recording
from host_tools.report.replay_report import _feature_text
from host_tools.twin.replay import replay_stream, windows_csv, ReplayResult
from tests.test_training import FS, M_S2_PER_COUNT, PROFILE

P = pm.factory(PROFILE)
PA = fi.per_axis(len(P["fc_bands"]))
AXES = ("x", "y", "z")


def _expected(flat):
    a, f = divmod(flat, PA)
    if f >= fi.F_BAND0:
        lo, hi = P["fc_bands"][f - fi.F_BAND0]
        return f"band {lo * P['fs_hz'] / P['n']:g}-{hi * P['fs_hz'] / P['n']:g} Hz axis {AXES[a]}"
    return {fi.F_VEL: "velocity_rms", fi.F_CLIP: "clipped"}[f] + f" axis {AXES[a]}"


def _status(flat):
    return {"state": "alert", "mode": 0, "score_q8": 2560, "zone": 1, "feature": flat, "t_s": 0,
            "windows": 1, "dropped": 0, "events": 0, "features": [0] * (3 * PA)}


def test_monitor_and_report_name_a_feature_alike():
    view = View(board="desk", fw="t", port="loop", version=1, crc=0, axes=3, scale=units.m_s2_per_count(P),
                alert_q8=None, alarm_q8=None, params=P)
    for flat in (PA + fi.F_VEL, 2 * PA + fi.F_BAND0 + 1, fi.F_BAND0):
        name = _expected(flat)
        assert f"score driven by {name}" in "\n".join(render_block(_status(flat), view))
        assert f"driver={name.replace(' ', '.')} " in render_line(_status(flat), view)
        assert _feature_text(flat, P, AXES) == name


def test_replay_events_and_csv_name_the_feature_that_drove_a_fault():
    # axis y swinging between the converter's limits (mean near 0, large r.m.s., every other
    # sample at full scale): the detector calls a sensor fault driven by the clipping of y
    rng = np.random.default_rng(3)
    counts = rng.normal(0, 40, (int(FS) * 4, 3)).astype(np.int16)
    counts[0::2, 1] = PROFILE["sensor"]["adc_max"]
    counts[1::2, 1] = PROFILE["sensor"]["adc_min"]
    rec = Recording(path=Path("clip.wav"), counts=counts, m_s2_per_count=M_S2_PER_COUNT,
                    sample_rate_hz=float(FS), axes=AXES, t0_s=1000.0)
    s = replay_stream([rec], P, PROFILE, name="s")
    name = _expected(PA + fi.F_CLIP)
    assert [e["feature"] for e in s["events"] if e["to"] == "sensor_fault"] == [name]
    result = ReplayResult(sample_rate_hz=P["fs_hz"], streams=["s"], events=s["events"],
                          windows={"stream": np.zeros(len(s["windows"]["t_s"]), int), **s["windows"]},
                          summary={})
    rows = list(csv.DictReader(io.StringIO(windows_csv(result))))
    assert name in {r["feature"] for r in rows}
