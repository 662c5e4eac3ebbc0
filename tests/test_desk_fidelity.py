"""Desk fidelity: a replay gives the device's own event sequence, window for window, on a board
that analyses one window in K (the virtual gateway runs the real firmware Gateway)."""
import numpy as np

import firmware_py  # noqa: F401
from firmware_py.detect import alarm as al
from firmware_py.detect.detector import Detector
from firmware_py.run import params as pm
from host_tools.data.recording import read_recording
from host_tools.twin.replay import replay
from host_tools.twin.virtual_gateway import VirtualGateway
from tests.test_emulate import PROFILE, fault_recording

EVERY = 3


def test_replay_is_the_gateways_event_sequence_on_one_window_in_three(tmp_path):
    # The factory set on a desk board that analyses one window in 3: 60 s of invented pump data
    # whose second half is in ISO zone D (12 mm/s). Written as the gateway's store would hold it,
    # the virtual gateway runs the recording through Gateway.feed (skipping 2 windows of 3) and
    # the detector; the replay of the same file must analyse the same windows and log the same
    # transitions in the same order, with the gateway's window count.
    profile = dict(PROFILE, analyse_every=EVERY)
    rec = fault_recording(tmp_path / "f.wav", seconds=60.0)
    params = pm.factory(profile)
    vg = VirtualGateway(rec, profile, tmp_path / "state", speed=0).start()
    try:
        assert vg.wait_until(vg.ended.is_set)
        det = vg.gateway.det
        device = []
        while det.events.count:
            i = det.events.pop()
            device.append((det.events.old[i], det.events.new[i], det.events.reason[i], det.events.mode[i],
                           det.events.feat[i], det.events.score_q8[i]))
        windows = vg.gateway.windows
        skipped = vg.gateway.skipped
    finally:
        vg.stop()
    res = replay([[read_recording(rec)]], params, profile)
    names = [(e["from"], e["to"], e["reason"]) for e in res.events]
    assert [(al.STATE_NAMES[o], al.STATE_NAMES[n], al.REASON_NAMES[r]) for o, n, r, *_ in device] == names
    assert [d[5] / 256 for d in device] == [e["score"] for e in res.events]
    # the same analysed windows: one in three of the whole windows, the others skipped
    whole = read_recording(rec).n_frames // params["n"]
    assert windows == len(res.windows["t_s"]) == -(-whole // EVERY)
    assert skipped >= windows * (EVERY - 1) - EVERY
    # and the zone D alarm came once k analysed windows of the span were in zone D (the
    # persistence rule's share of 10 s of running, on the board's time base), on both
    assert ("normal", "alarm", "iso_d") in names or ("idle", "alarm", "iso_d") in names
    t_alarm = next(e["t_s"] for e in res.events if e["to"] == "alarm")
    half = read_recording(rec).t0_s + 30.0
    win_s = EVERY * params["n"] / params["fs_hz"]          # running time of one analysed window
    assert t_alarm - half >= Detector(params, EVERY).alarm.k * win_s - win_s
    assert np.all(np.diff(res.windows["t_s"]) > 0)
