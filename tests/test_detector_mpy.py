"""The detector on a real MicroPython (host_tools.twin.mpy_guest): no allocation in the window path,
every intermediate a small int even for extreme features, and the same scores and events as
under CPython on a long stream."""
import json
import textwrap

import pytest

from host_tools.twin.mpy_guest import run_guest

# One scenario script, run unchanged by the guest and by CPython. Features come from an integer
# LCG (no floats anywhere), are generated before the heap is locked into one flat array, and the
# whole stream is stepped inside a single locked() call, so any allocation fails the run. Under
# MicroPython an int past +-2**30 is a heap object, so the lock also proves the bound.
SCENARIO = """
from array import array
from firmware_py.detect.detector import Detector, default_params
from firmware_py.dsp import feature_index as fi

AXES = 3
NB = 4
PA = fi.per_axis(NB)
NF = AXES * PA
NW = 1300
p = default_params(AXES, NB, 6680)
p["det_hold_ms"] = 800                      # windows of 160 ms: hold-off 5, steadiness over 4
p["det_steady_ms"] = 640
p["det_persist_ms"] = 800                   # raise on 3 of 5, escalate after 4 in alert
p["det_persist_q8"] = 154
p["det_escalate_ms"] = 640
p["det_dwell_ms"] = 1600
p["det_learn_base_n"] = 200
p["det_learn_mode_n"] = 300
p["det_learn_min_n"] = 20
p["det_drift_shift"] = 6
p["det_drop_max"] = 10
p["det_fault_clear_ms"] = 480               # trusted again after 3 good windows
det = Detector(p)

seed = [12345]
def noise(amp):
    # sum of 4 uniforms in [-amp, amp): roughly Gaussian, integer
    s = 0
    for _ in range(4):
        seed[0] = (seed[0] * 1103515245 + 12345) & 0x7FFFFFFF
        s += (seed[0] >> 8) % (2 * amp) - amp
    return s // 2

feats = array("i", bytes(4 * NF * NW))
dropped = array("i", bytes(4 * NW))
for i in range(NW):
    pt = (i // 50) % 2
    for a in range(AXES):
        b = i * NF + a * PA
        rms = (3000, 7000)[pt] + a * 500 + noise(150)
        feats[b + fi.F_MEAN] = noise(60)
        feats[b + fi.F_RMS] = rms
        feats[b + fi.F_PEAK] = rms * 7 // 2 + noise(400)
        feats[b + fi.F_CREST] = 14336 + noise(600)
        feats[b + fi.F_KURT] = 12288 + noise(600)
        feats[b + fi.F_VEL] = (6000, 12000)[pt] + noise(300)
        feats[b + fi.F_STUCK] = 2
        feats[b + fi.F_SPEED] = (5120, 6400)[pt] + noise(40)     # 20 or 25 Hz, Q8
        feats[b + fi.F_SPEED_CONF] = 200
        for k in range(NB):
            feats[b + fi.F_BAND0 + k] = (1800, 2300)[pt] - 300 * k + noise(20)
    if 600 <= i < 620:                        # pump stopped: velocity under the idle floor
        for a in range(AXES):
            feats[i * NF + a * PA + fi.F_RMS] = 300
            feats[i * NF + a * PA + fi.F_VEL] = 100
    if 620 <= i < 625 or 700 <= i < 720:      # restart transient, then a real change
        feats[i * NF + PA + fi.F_BAND0 + 2] += 700
    if 800 <= i < 806:                        # clipping
        feats[i * NF + fi.F_CLIP] = 4
    if 830 <= i < 834:                        # DC offset out of range
        feats[i * NF + fi.F_MEAN] = 32767 << 8
    if i == 850:
        dropped[i] = 50
    if 900 <= i < 910:                        # zone C velocity on axis 2 (3.5 mm/s)
        feats[i * NF + 2 * PA + fi.F_VEL] = 23380
    if 1000 <= i < 1010:                      # extreme and absurd values: must not overflow
        for j in range(NF):
            v = (i * 7919 + j * 104729) % 5
            feats[i * NF + j] = (0, 1, (1 << 30) - 1, -(1 << 30) + 1, fi.LOG2_ZERO_Q8)[v]

out = array("i", bytes(4 * 4 * NW))
f = array("i", bytes(4 * NF))

def run_all():
    for i in range(NW):
        base = i * NF
        for j in range(NF):
            f[j] = feats[base + j]
        if i == 20:
            det.learn(i)
        if i == 1100:
            det.ack(i)
        if i == 1150:
            det.learn(i)
        if i == 1200:
            det.stop_learning(i)
        det.step(f, i, dropped[i])
        out[4 * i] = det.state
        out[4 * i + 1] = det.score_q8
        out[4 * i + 2] = det.mode
        out[4 * i + 3] = det.feat
    return det.events.pending()

ok, pending = locked(run_all)
ev = []
while True:
    k = det.events.pop()
    if k < 0:
        break
    e = det.events
    ev.append([e.t[k], e.old[k], e.new[k], e.reason[k], e.mode[k], e.feat[k], e.score_q8[k]])
emit([ok, list(out), ev, det.model.k, det.events.lost])
"""


def _cpython(body):
    """Run body under CPython; values pass through JSON as the guest's do."""
    out = []
    exec(textwrap.dedent(body), {"emit": lambda v: out.append(json.loads(json.dumps(v))),
                                 "locked": lambda fn: (True, fn())})
    return out


@pytest.fixture(scope="module")
def both():
    return run_guest(SCENARIO, fuel=8_000_000_000).out[0], _cpython(SCENARIO)[0]


def test_long_stream_allocates_nothing_on_micropython(both):
    guest, _ = both
    assert guest[0] is True


def test_same_scores_and_events_as_cpython(both):
    guest, host = both
    assert guest[1] == host[1]
    assert guest[2] == host[2]
    assert guest[3] == host[3] == 2           # two operating points learned
    # the scenario exercised every state: learning, normal, alert/alarm, idle, sensor fault
    states = set(host[1][0::4])
    assert {0, 2, 3, 4, 5} <= states and (1 in states or 2 in states)
    assert guest[4] == 0                      # ring large enough: nothing lost
    reasons = [e[3] for e in host[2]]
    # score, ack, stopped, started, clipping, dc offset, sensor ok, learn start, done and stop
    assert {1, 5, 6, 7, 9, 10, 12, 13, 14, 15} <= set(reasons)


EXTREMES = """
from array import array
from firmware_py.detect.detector import Detector, default_params
from firmware_py.dsp import feature_index as fi
from firmware_py.detect.modes import FOLLOW_MAX

NB = 8
PA = fi.per_axis(NB)
NF = 2 * PA
BIG = (1 << 30) - 1
p = default_params(2, NB, 6680)
d = len(p["det_feat"])
# sensor checks and idle floor opened wide so that absurd values reach the scoring path;
# the model at its own extremes: tiny spreads, centroids at the clamp
p.update(det_flat_rms_q8=0, det_clip_max=BIG, det_dc_lo_q8=[-BIG, -BIG], det_dc_hi_q8=[BIG, BIG],
         det_drop_max=BIG, det_idle_vel_q16=0, det_hold_ms=0, det_sd_floor_q4=1, det_s_floor_q8=1,
         det_stuck_max=[BIG, BIG], det_zero_max=[BIG, BIG], det_knock_crest_q12=[BIG, BIG],
         det_steady_ms=640, det_conf_min_q8=0,
         det_op_speed_q8=[(-1) ** m * BIG if j else -BIG for m in range(8) for j in range(2)],
         det_op_load_q8=[-BIG, BIG] * 8, det_zlam_q8=4096,
         det_op_seen_q8=[2, 1 << 17] * 4 + [-BIG, BIG] * 4,   # some speeds outside the trained ones
         det_base_mean_q4=[(-1) ** j * BIG for j in range(d)], det_base_sd_q4=[1] * d,
         det_modes=8, det_mode_c_q8=[(-1) ** (j + m) * BIG for m in range(8) for j in range(d)],
         det_mode_s_q8=[1] * (8 * d), det_thr_alert_q8=1, det_thr_alarm_q8=2, det_drift_shift=1,
         det_drift_max_q8=1024, det_learn_base_n=40, det_learn_mode_n=60, det_learn_min_n=1,
         det_learn_op_q12=1, det_learn_margin_q8=4096, det_learn_alarm_q8=4096, det_dwell_ms=0,
         det_persist_ms=160, det_slam_q8=4096, det_slow_ms=2621440,  # slow channel: weight
         det_follow_q8=[(-1) ** j * FOLLOW_MAX for j in range(d)],    # and time constant (16384
         det_mfollow_q8=[(-1) ** (j + m) * FOLLOW_MAX for m in range(8) for j in range(d)],
         det_mslam_q8=[4096] * 8, det_wander_ms=40960,  # averages over running time,
         det_slow_wander=[j % 2 for j in range(d)])     # half the features wandering
det = Detector(p)                               # windows), the speed slopes, all at their largest
assert det.ew_shift == det.ew_long == 14 and det.ew_wshift == 8
# a twin that learns from the same absurd stream: no model yet and the guard out of reach, so
# nothing latches and learning runs to its end
p.update(det_iso_bounds=[BIG, BIG, BIG], det_modes=0, det_mode_c_q8=[], det_mode_s_q8=[],
         det_op_speed_q8=[], det_op_load_q8=[], det_op_seen_q8=[], det_follow_q8=[], det_mfollow_q8=[],
         det_mslam_q8=[], det_steady_ms=0)
twin = Detector(p)
VALS = (0, 1, 2, BIG, BIG - 1, 1 << 29, fi.LOG2_ZERO_Q8, -BIG, -1)
NW = 400
feats = array("i", bytes(4 * NF * NW))
seed = 7
for i in range(NW * NF):
    seed = (seed * 1103515245 + 12345) & 0x7FFFFFFF
    v = VALS[(seed >> 16) % len(VALS)]
    if i % PA == fi.F_RMS and v < 0:
        v = -v                                  # keep r.m.s. non-negative: not a flatline
    feats[i] = v
out = array("i", bytes(4 * 4 * NW))
f = array("i", bytes(4 * NF))

def run_all():
    for i in range(NW):
        for j in range(NF):
            f[j] = feats[i * NF + j]
        if i % 7 == 0:
            det.ack(i)
        det.step(f, i, i)
        out[4 * i] = det.state
        out[4 * i + 1] = det.score_q8
        for a in range(2):
            if f[a * PA + fi.F_VEL] == BIG:
                f[a * PA + fi.F_VEL] = BIG - 1
        if i == 150:
            twin.learn(i)
        twin.step(f, i, i)
        out[4 * i + 2] = twin.state
        out[4 * i + 3] = twin.score_q8
    return twin.model.k

emit([locked(run_all), list(out), det.export(), twin.export()])
"""


def test_extreme_features_keep_every_int_small():
    guest = run_guest(EXTREMES).out[0]
    host = _cpython(EXTREMES)[0]
    assert guest[0][0] is True                # no allocation: no int ever left +-2**30
    assert guest == host
    assert max(host[1][1::4]) > 0 and max(host[1][3::4]) > 0      # both scored
    assert 5 in host[1][2::4] and host[1][-2] != 5 and host[0][1] > 0  # the twin learned


FUEL_BODY = """
from array import array
from firmware_py.detect.detector import Detector, default_params
from firmware_py.dsp import feature_index as fi
PA = fi.per_axis(4)
p = default_params(3, 4, 6680)
d = len(p["det_feat"])
p["det_hold_ms"] = 0
p["det_steady_ms"] = 5120 if CASE == "monitor" else 0   # monitor: the longest span, 3 medians
p["det_conf_min_q8"] = 0
p["det_persist_ms"] = 800
p["det_escalate_ms"] = 160
p["det_modes"] = 8
p["det_op_speed_q8"] = [0, (1 << 30) - 1] * 8   # every mode's range holds any speed: the dearest
                                                # choice scans all 8
p["det_mode_c_q8"] = [(m * 37 + j * 11) % 512 - 256 for m in range(8) for j in range(d)]
p["det_mode_s_q8"] = [256] * (8 * d)
p["det_follow_q8"] = [512] * d                  # every feature follows the speed
p["det_mfollow_q8"] = [256] * (8 * d)           # and in every mode by a slope of its own
p["det_op_seen_q8"] = [0, (1 << 30) - 1] * 8    # and every speed was trained at: every EWMA moves
p["det_mslam_q8"] = [256 * (m + 1) for m in range(8)]   # each mode its own slow weight
p["det_learn_base_n"] = 2
p["det_learn_op_q12"] = 1
det = Detector(p)
f = array("i", bytes(4 * 3 * PA))
for a in range(3):
    f[a * PA + fi.F_RMS] = 4000
    f[a * PA + fi.F_VEL] = 6000 if CASE != "idle" else 100
    f[a * PA + fi.F_SPEED] = 6400
    f[a * PA + fi.F_SPEED_CONF] = 200
for i in range(40 if CASE == "monitor" else 0):   # warm-up: the steadiness span full first
    det.step(f, i, 0)
if CASE == "learning":
    det.learn(0)
    for i in range(10):                 # baseline done, 8 modes open: the dearest phase
        f[fi.F_BAND0] = 400 * i
        f[fi.F_SPEED] = 4000 + 400 * i
        det.step(f, i, 0)
def steps():
    for i in range(N):
        f[fi.F_BAND0] = 100 * (i % 8)
        det.step(f, i, 0)
    return det.state
emit(locked(steps))
"""


# monitor: every window scored against all 8 modes (they are far from it, so the state is alarm)
@pytest.mark.parametrize("case,state", [("monitor", 2), ("learning", 5), ("idle", 3)])
def test_fuel_per_step(case, state):
    # cost = fuel difference of N=40 and N=0 windows; worst cases: 8 modes x 27 features
    head = "CASE = %r\n" % case
    r40 = run_guest(head + "N = 40\n" + FUEL_BODY)
    r0 = run_guest(head + "N = 0\n" + FUEL_BODY)
    assert r40.out[0] == [True, state]
    per_step = (r40.fuel - r0.fuel) // 40
    print("fuel per step, %s:" % case, per_step)
    # at about 1470 fuel per simple loop iteration (measured by edgevib bench) the monitoring step is some 1400
    # interpreted loop iterations: milliseconds on a 150-400 k iteration/s board
    assert per_step < 4_000_000
