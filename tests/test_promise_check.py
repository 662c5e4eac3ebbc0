"""The stated false-alert rate carried from training to every replay: training's promise when the
data are thin (an upper bound, never an extrapolation), the set's keys for it, and the verdict of
a replay beside it (host_tools.twin.replay.promise_check), against scipy.stats.poisson."""
import math
from pathlib import Path

import pytest
from scipy import stats

import firmware_py  # noqa: F401
from firmware_py.run import board, param_check
from firmware_py.run import params as pm
from host_tools.fit import raise_rate as rr
from host_tools.fit.training import _thresholds
from host_tools.twin.replay import promise_check

from firmware_py.detect.detector import Detector
from tests.test_raise_rate import WINDOW_S, ar1_scores

PROFILE = board.load(str(Path(__file__).resolve().parent.parent / "boards" / "desk.json"))


def _set(rate, lo, hi, upper=None):
    p = {"fit_promise_milli": [int(round(1000 * v)) for v in (rate, lo, hi)]}
    if upper is not None:
        p["fit_promise_upper"] = upper
    return p


def test_verdict_for_a_rate_and_for_an_upper_bound():
    # 72 h of running: the range's ends expect lo * 72 / 720 and hi * 72 / 720 raises; a count is
    # judged against the Poisson 2.5 % quantile of the first and the 97.5 % quantile of the second
    # (scipy.stats.poisson). Rate 100, range 50 to 200 per 30 days: 5 and 20 expected.
    h = 72.0
    lo_n, hi_n = stats.poisson.ppf(0.025, 5.0), stats.poisson.ppf(0.975, 20.0)
    est, bound = _set(100, 50, 200), _set(100, 50, 200, 1)
    assert promise_check(int(lo_n), h, est)["verdict"] == "agrees"
    assert promise_check(int(lo_n) - 1, h, est)["verdict"] == "fewer than promised"
    assert promise_check(int(hi_n) + 1, h, est)["verdict"] == "more than promised"
    # an upper bound: fewer is no disagreement, only more than the upper end allows
    for n in (0, int(lo_n) - 1, int(hi_n)):
        assert promise_check(n, h, bound)["verdict"] == "agrees"
    assert promise_check(int(hi_n) + 1, h, bound)["verdict"] == "more than promised"
    c = promise_check(0, h, bound)
    assert c["upper_bound"] and c["stated"].startswith("at most 100 false alerts per 30 days")
    # a set made before the bound was stored (no fit_promise_upper) reads as a rate, as before
    old = promise_check(int(lo_n) - 1, h, _set(100, 50, 200))
    assert not old["upper_bound"] and old["verdict"] == "fewer than promised"
    assert promise_check(0, h, {}) is None


def test_a_set_with_the_bound_key_still_loads_on_the_device():
    p = pm.factory(PROFILE)
    p.update(_set(3.5, 1.2, 9.9, 1))
    param_check.validate(p, PROFILE)       # keys the device does not read are left alone
    pm.build(p, PROFILE)


def _factory_thresholds(seqs):
    p = pm.factory(PROFILE)
    warnings = []
    alert, alarm, thr = _thresholds(seqs, p, PROFILE["analyse_every"], WINDOW_S, 1.0, warnings)
    return p, alert, alarm, thr, warnings


def test_thin_data_promise_an_upper_bound_at_the_floor():
    # 1 h of AR(1) scores (test_raise_rate) cannot support 1 per 30 days, and the device's
    # chi-square thresholds lie far above the supported point: they stay, and the promise there is
    # at most the supported rate, with its range, not the fit's extrapolation past the data
    seqs = [ar1_scores(22_500, 1)]
    p, alert, alarm, thr, warnings = _factory_thresholds(seqs)
    rule = Detector(p).alarm                     # the factory set's persistence rule
    sup = rr.promise(rr.fit(seqs, rule.ev.span, rule.k, WINDOW_S), 1.0)
    assert sup.threshold < p["det_thr_alert_q8"] == alert
    # the alarm threshold floored too: the device's own value (or alert x the alarm ratio, rounded
    # up, if that is higher), not one Q8 step over it
    assert alarm == max(p["det_thr_alarm_q8"], -(-alert * p["det_learn_alarm_q8"] // 256))
    assert thr["upper_bound"] and not thr["supported"]
    assert thr["expected_false_alerts_per_30_days"] == sup.per_30_days
    assert thr["range_95_per_30_days"] == list(sup.range_95)
    assert any("at most that rate is promised" in w for w in warnings)


def test_no_fit_states_the_counted_upper_limit():
    # 4 min of running: too few stretches for a fit. Nothing reaches the chi-square threshold, so
    # the promise is the exact Poisson upper limit for 0 events, -ln(0.025) = 3.689, per H hours
    seqs = [ar1_scores(1500, 3)]
    hours = 1500 * WINDOW_S / 3600
    p, alert, alarm, thr, warnings = _factory_thresholds(seqs)
    assert (alert, alarm) == (p["det_thr_alert_q8"], p["det_thr_alarm_q8"])
    assert thr["upper_bound"] and thr["raise_count"]["clusters"] == 0
    assert thr["expected_false_alerts_per_30_days"] == pytest.approx(-math.log(0.025) / hours * 720, rel=1e-12)
    assert any("at most" in w and "chi-square" in w for w in warnings)
    p, alert, alarm, thr, warnings = _factory_thresholds([])
    assert thr["expected_false_alerts_per_30_days"] is None and any("no stated rate" in w for w in warnings)


def test_compare_and_fleet_show_an_upper_bound_as_such():
    # the set's bound reaches compare's rates and its report, and a fleet row's reason
    from types import SimpleNamespace

    from firmware_py.detect import alarm as al
    from host_tools.fleet.review import severity
    from host_tools.report.compare_report import _expected
    from host_tools.twin.compare import rates
    per = {name: 0 for name in al.STATE_NAMES}
    per["normal"] = 22500                                          # 1 h of 0.16 s windows
    result = SimpleNamespace(summary={"total": {"windows_per_state": per, "windows": 22500, "alerts": 3}})
    r = rates(result, 0.16, 40.0, upper=True)
    assert r["expected_upper_bound"] and _expected(r) == "at most 40"
    assert _expected(rates(result, 0.16, 40.0)) == "40"
    assert r["observed_per_30_days"] == pytest.approx(3 * 720.0)     # 3 alerts in 1 h of running
    row = {"state_now": "normal", "alarms": 0, "alerts": 0, "sensor_faults": 0, "drift": None,
           "alerts_per_30_days": r["observed_per_30_days"], "expected_per_30_days": 40.0, "expected_upper_bound": True}
    assert any("against at most 40 expected" in why for why in severity(row)[1])
