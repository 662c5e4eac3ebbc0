"""The scorecard on hand-made event lists whose figures are worked out here by hand."""
import json

import numpy as np
import pytest

from host_tools.fit.scorecard import gapless_section, render_text, score_history, scorecard

T0 = 1_000_000.0
DAY = 86400.0
W = 0.16  # window length, s


def _truth(**kw):
    t = {"history": "h", "machine": "M", "role": "healthy", "start_t_s": T0, "end_t_s": T0 + 2 * DAY,
         "healthy_until_t_s": T0 + 2 * DAY,
         "stops": [{"run_down_t_s": T0 + 1000.0, "stopped_t_s": T0 + 1010.0, "run_up_t_s": T0 + 4600.0,
                    "steady_t_s": T0 + 4610.0}],
         "speed_changes": [], "machine_faults": [], "sensor_faults": [], "sensor_fault_hits": []}
    t.update(kw)
    return t


def _ev(t, to, frm="normal", reason="score", feature=None):
    return {"t_s": T0 + t, "from": frm, "to": to, "reason": reason, "feature": feature}


def test_false_raises_and_both_rates():
    # Windows: 1 h of running before the stop (900 s of it at 1 per W), then stopped until 4600 s,
    # then 1 h more. Observed running = windows outside [1010, 4600).
    t = np.r_[T0 + W * np.arange(1, 10001), T0 + 4600.0 + W * np.arange(1, 10001)]
    events = [_ev(1005.0, "alert"), _ev(1006.0, "alarm", frm="alert"),   # one raise, at the run-down
              _ev(3000.0, "sensor_fault"),                              # a false sensor fault
              _ev(6000.0, "alert", feature="kurtosis axis x")]           # one in steady running
    s = score_history(events, t, W, _truth())
    h = s["healthy"]
    running = np.sum(~((t >= T0 + 1010) & (t < T0 + 4600)) & ~((t - W >= T0 + 1010) & (t - W < T0 + 4600)))
    assert h["observed_running_s"] == pytest.approx(running * W)
    assert len(h["false_raises"]) == 2 and h["false_raises_in_transients"] == 1
    assert len(h["false_sensor_faults"]) == 1
    assert h["transients"] == 2 and h["transients_seen"] == 2     # the run-down and the run-up
    card = scorecard([s])
    c = card["healthy"]
    assert c["per_30_days_observed"] == pytest.approx(2 / (running * W) * 30 * DAY)
    # duty: 1 raise per 2 transients x 2 transients in 2 days x 30 days
    #     + 1 raise per steady second seen x running fraction x 30 days
    steady = h["observed_steady_s"]
    run_frac = (2 * DAY - 3590.0) / (2 * DAY)
    want = 0.5 * (2 / (2 * DAY)) * 30 * DAY + 1 / steady * run_frac * 30 * DAY
    assert c["per_30_days_duty"] == pytest.approx(want)
    assert card["verdicts"]["false_raises"] is False
    json.dumps(card)                                          # JSON-able
    assert "false alerts and alarms: 2 (1 at transients)" in render_text(card)


def test_machine_fault_delay_and_a_miss():
    truth = _truth(role="machine_fault", healthy_until_t_s=T0 + DAY,
                   machine_faults=[{"kind": "imbalance", "onset_t_s": T0 + DAY, "visible_t_s": T0 + DAY + 7200.0,
                                    "visible_by": "own quantity +6.1 dB", "growth_s": DAY}])
    t = T0 + W * np.arange(1, 1000)
    s = score_history([_ev(DAY + 3600.0, "alert", feature="band x"), _ev(DAY + 9000.0, "alarm", frm="alert")], t, W, truth)
    f = s["machine_faults"][0]
    assert f["delay_s"] == pytest.approx(-3600.0) and f["raised_as"]["to"] == "alert"
    miss = score_history([_ev(100.0, "alarm")], t, W, truth)                # latched before the onset
    assert miss["machine_faults"][0]["first_raise_t_s"] is None
    assert miss["machine_faults"][0]["raised_before_onset"] == 1
    card = scorecard([s, miss])
    assert card["machine_summary"]["detected"] == 1
    assert card["verdicts"]["every_machine_fault_detected"] is False
    assert "MISSED" in render_text(card) and "-60 min" in render_text(card)


def test_gapless_delays_count_a_fault_not_raised_as_later_than_the_run():
    def run(name, delay, at_start=False):
        ev = None if delay is None else _ev(DAY + delay, "alert", feature="band x")
        return {"history": name, "start_t_s": T0 + DAY - 7200.0, "end_t_s": T0 + DAY + 7200.0,
                "visible_t_s": T0 + DAY, "raised_as": ev, "delay_s": delay, "at_start": at_start}
    runs = [run("a", -7140.0, True), run("b", -600.0), run("c", 1200.0), run("d", None)]
    healthy = [{"history": "h", "start_t_s": T0, "end_t_s": T0 + 4 * 3600.0, "running_h": 3.5, "stops": 1,
                "false_raises": [_ev(3600.0, "alert", feature="band x")]}]
    g = gapless_section(runs, healthy, 2.0)
    # the median of -7140, -600, +1200 and the unraised one (later than any): the middle two's mean
    assert g["median_delay_s"] == pytest.approx((-600.0 + 1200.0) / 2)
    assert g["raised"] == 3 and g["max_delay_s"] is None
    # half of them unraised: no median either
    assert gapless_section(runs[2:], [], 2.0)["median_delay_s"] is None
    # one false raise in 3.5 h of running: 720 / 3.5 per 30 days of running
    assert g["false_raises"] == 1 and g["per_30_days"] == pytest.approx(720.0 / 3.5)
    card = scorecard([])
    card["gapless"] = g
    text = render_text(card)
    assert "<= -119 min" in text and "not yet" in text and "+20 min" in text
    assert "median delay +5 min, worst over +2 h" in text
    assert "1 false alert(s) and alarm(s); +60 min in: alert (score, band x)" in text and "205.71 per 30 days" in text


def test_sensor_fault_named_first_or_not():
    span = {"kind": "dropout", "start_t_s": T0 + DAY, "end_t_s": T0 + DAY + 3600.0, "duty": 1.0}
    truth = _truth(role="sensor_fault", healthy_until_t_s=T0 + DAY, sensor_faults=[span],
                   sensor_fault_hits=[{"t_s": T0 + DAY + 100.0, "end_t_s": T0 + DAY + 100.05, "what": "dropout (zero)"}])
    t = T0 + W * np.arange(1, 1000)
    good = score_history([_ev(DAY + 100.1, "sensor_fault", reason="dropped")], t, W, truth)
    bad = score_history([_ev(DAY + 100.1, "alert", feature="kurtosis axis x"),
                         _ev(DAY + 101.0, "sensor_fault", frm="alert", reason="dropped")], t, W, truth)
    g, b = good["sensor_faults"][0], bad["sensor_faults"][0]
    assert g["sensor_fault_first"] and not g["machine_raises"]
    assert g["sensor_fault_delay_s"] == pytest.approx(0.1)
    assert not b["sensor_fault_first"] and len(b["machine_raises"]) == 1
    card = scorecard([good, bad])
    assert card["sensor_summary"]["sensor_fault_first_and_no_machine_alert"] == 1
    assert "WRONG" in render_text(card)
