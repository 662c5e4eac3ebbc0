"""The false-raise rate under the persistence rule on correlated windows (host_tools.fit.raise_rate),
against a long simulation of an AR(1) process run here with the rule written out in numpy."""
import numpy as np
import pytest
from scipy import signal, stats

import firmware_py  # noqa: F401
from firmware_py.detect.alarm import Alarm
from host_tools.fit import raise_rate as rr

WINDOW_S = 0.16
SPAN, K = 125, 100            # 20 s of windows, raise on 80 % of them
HYST = 0.8
PHI = float(np.exp(-WINDOW_S / 15.0))   # AR(1) with a 15 s time constant: slow process variation


def ar1_scores(n, seed):
    """Scores (Q8 spreads, whole numbers) of a healthy pump whose level wanders slowly: 2 + |x| with
    x a unit-variance AR(1) process (time constant 15 s), plus independent window noise."""
    rng = np.random.default_rng(seed)
    x = signal.lfilter([1.0], [1.0, -PHI], rng.standard_normal(n) * np.sqrt(1 - PHI ** 2))
    return np.rint(256 * (2 + np.abs(x) + 0.3 * rng.standard_normal(n)))


def rule_raises(c, thr):
    """Raises of the documented rule, written out independently of the device code: raise when at
    least K of the last SPAN scores are >= thr (span full); clear when fewer than K of the
    last SPAN are >= HYST * thr and at least one window was spent raised (dwell 1)."""
    over = np.convolve(c >= thr, np.ones(SPAN, int))[SPAN - 1:len(c)]
    above = np.convolve(c >= HYST * thr, np.ones(SPAN, int))[SPAN - 1:len(c)]
    raised, n, held = False, 0, 0
    for o, a in zip(over.tolist(), above.tolist()):
        if not raised:
            if o >= K:
                raised, n, held = True, n + 1, 0
        else:
            held += 1
            if a < K and held >= 1:
                raised = False
    return n


def test_the_device_rule_is_the_documented_rule():
    c = ar1_scores(60_000, 7)
    for thr in (900, 1000):
        a = Alarm(SPAN, K, 1 << 29, 1)
        n = 0
        for v in c.tolist():
            lv = a.level
            a.update(1 if v >= thr else 0, 0, 1 if v >= HYST * thr else 0, 0)
            n += lv == 0 and a.level == 1
        assert n == rule_raises(c, thr) and n > 0


def test_raise_statistic_is_the_kth_largest_of_the_span():
    # scores are >= 0; before the span has filled, the windows not yet seen count as 0 (the
    # device's evidence after a reset), so S exists from the first window
    c = np.abs(np.random.default_rng(3).standard_normal(500))
    s = rr.raise_statistic(c, 40, 30)
    padded = np.concatenate([np.zeros(39), c])
    ref = np.array([np.sort(padded[t:t + 40])[::-1][29] for t in range(500)])   # numpy sort
    assert np.array_equal(s, ref)
    assert np.all(s[:29] == 0) and s[29] == np.sort(c[:30])[0]     # 30 seen: the least of them


def test_ar1_raise_rate_within_the_stated_range():
    # Train on 4 h of the AR(1) scores, promise 1 raise per running hour (720 per 30 days), then
    # count the raises of the rule at that threshold over 17.8 h of a fresh realisation. The
    # count is Poisson about the true rate, so it must lie between the 2.5 % Poisson quantile of
    # the range's low end and the 97.5 % quantile of its high end (scipy.stats.poisson).
    train = ar1_scores(90_000, 1)
    fit = rr.fit([train], SPAN, K, WINDOW_S)
    assert fit.clusters >= rr.MIN_CLUSTERS
    # the windows are far from independent: the extremal index (Ferro and Segers 2003) is small
    assert fit.theta is not None and fit.theta < 0.2
    pr = rr.promise(fit, 720.0)
    assert pr.supported and abs(pr.per_30_days - 720.0) < 1e-6
    test = ar1_scores(400_000, 2)
    hours = len(test) * WINDOW_S / 3600
    n = rule_raises(test, int(np.floor(pr.threshold)) + 1)
    lo, hi = (r * hours / 720.0 for r in pr.range_95)
    assert stats.poisson.ppf(0.025, lo) <= n <= stats.poisson.ppf(0.975, hi)
    # what the independence assumption would have said: the per-window tail at the same
    # threshold, times the windows of the test, is more than 10 times the observed raises
    p_window = float((train >= pr.threshold).mean())
    assert p_window * len(test) > 10 * max(n, 1)


def test_short_data_refuses_to_promise_more_than_it_can():
    # 1 h of the same process cannot carry a promise of 1 per 30 days: training states the rate
    # the data support (its 95 % upper limit at most SUPPORT_RATIO times the rate) instead
    fit = rr.fit([ar1_scores(22_500, 1)], SPAN, K, WINDOW_S)
    pr = rr.promise(fit, 1.0)
    assert not pr.supported and pr.per_30_days > 1.0 and not pr.upper_bound
    assert pr.range_95[1] <= rr.SUPPORT_RATIO * pr.per_30_days * (1 + 1e-6)
    # and the supported promise holds on 17.8 h of fresh data, as above
    test = ar1_scores(400_000, 5)
    hours = len(test) * WINDOW_S / 3600
    n = rule_raises(test, int(np.floor(pr.threshold)) + 1)
    lo, hi = (r * hours / 720.0 for r in pr.range_95)
    assert stats.poisson.ppf(0.025, lo) <= n <= stats.poisson.ppf(0.975, hi)
    # A floor above the supported threshold (training keeps the device's conservative rule) is
    # promised "at most" the supported rate, never the fit extrapolated: the same rate and range,
    # marked an upper bound. On the fresh data the rule at the floor raises no more than the
    # Poisson 97.5 % quantile of the range's upper end (fewer is no disagreement for a bound).
    floor = pr.threshold * 1.25
    up = rr.at_most(fit, floor, pr)
    assert up.upper_bound and not up.supported and up.threshold == floor
    assert up.per_30_days == pr.per_30_days and up.range_95 == pr.range_95
    assert rule_raises(test, int(np.floor(floor)) + 1) <= stats.poisson.ppf(0.975, hi)


def _garwood_by_definition(n):
    """The exact Poisson limits by their definition (Garwood 1936): the means at which n or more
    events (lower) and n or fewer (upper) each have probability 2.5 %, solved with
    scipy.stats.poisson and scipy.optimize.brentq, not from the chi-square form."""
    from scipy.optimize import brentq
    hi = brentq(lambda m: stats.poisson.cdf(n, m) - 0.025, 1e-9, 10.0 * n + 20.0, xtol=1e-12)
    lo = 0.0 if n == 0 else brentq(lambda m: stats.poisson.sf(n - 1, m) - 0.025, 1e-12, n, xtol=1e-12)
    return lo, hi


def test_garwood_limits_are_the_exact_poisson_limits():
    # zero events: the upper limit is -ln(0.025) = 3.689 events (P(0 | m) = exp(-m) = 0.025)
    assert rr.garwood_95(0) == (0.0, pytest.approx(-np.log(0.025), rel=1e-12))
    for n in (1, 2, 5, 12, 40):
        lo, hi = rr.garwood_95(n)
        ref_lo, ref_hi = _garwood_by_definition(n)
        assert lo == pytest.approx(ref_lo, rel=1e-8) and hi == pytest.approx(ref_hi, rel=1e-8)


def test_count_bound_states_the_upper_limit_of_the_clusters_counted():
    # Without a fit: clusters of S at or over the threshold, counted as runs (exceedances less
    # than a span apart share one), over the held-out hours H. Three sequences with 0, 2 and 3
    # bursts of high scores (each K windows long, 3 spans apart) hold 5 clusters in known hours.
    base = np.full(20 * SPAN, 300.0)
    seqs = []
    for bursts in (0, 2, 3):
        c = base.copy()
        for j in range(bursts):
            c[(3 * j + 2) * SPAN:(3 * j + 2) * SPAN + K] = 2000.0
        seqs.append(c)
    hours = 3 * len(base) * WINDOW_S / 3600
    got, none = rr.count_bound(seqs, [(1500.0, 1.0), (2500.0, 1.0)], SPAN, K, WINDOW_S)
    assert got.clusters == 5 and got.hours == pytest.approx(hours, rel=1e-12)
    lo, hi = _garwood_by_definition(5)
    pr = got.promise
    assert pr.upper_bound and not pr.supported and pr.threshold == 1500.0
    assert pr.per_30_days == pytest.approx(hi * 720 / hours, rel=1e-8)
    assert pr.range_95 == (pytest.approx(lo * 720 / hours, rel=1e-8), pytest.approx(hi * 720 / hours, rel=1e-8))
    # nothing at or over the threshold: at most -ln(0.025) / H per hour, per 30 days x 720
    assert none.clusters == 0 and none.promise.beyond_data
    assert none.promise.per_30_days == pytest.approx(-np.log(0.025) / hours * 720, rel=1e-12)
    assert rr.count_bound([], [(1500.0, 1.0)], SPAN, K, WINDOW_S) is None


def test_matched_weight_keeps_the_weighted_channel_under_the_reference():
    # The slow-channel weight (docs/detector.md, Score): ref = per-window scores of the AR(1)
    # pump above, other = their EWMA (scipy.signal.lfilter, weight 1/32). Weighted by the result,
    # the other channel's raise statistic S lies at or under ref's at each matched quantile
    # (float rounding: 1e-12 relative), so it spends no more windows at or over T_q = Q_q(S(ref))
    # than it spends at or over its own q-quantile: numpy's quantile leaves (1 - q) n values
    # above it, plus the ties of a plateau (S holds a value while the span's k-th largest stays).
    # The weight is the largest that does so: at one of the levels the two meet. A channel that is
    # ref / 3 gets exactly 3 (S commutes with a positive factor).
    c = ar1_scores(40_000, 13)
    e = signal.lfilter([1 / 32], [1, -31 / 32], c - c.mean())
    w = rr.matched_weight([c], [e], SPAN, K)
    sr = rr.raise_statistic(c, SPAN, K)
    so = rr.raise_statistic(e, SPAN, K)
    gaps = []
    for q in rr.MATCH_LEVELS:
        t, to = np.quantile(sr, q), np.quantile(so, q)
        assert w * to <= t * (1 + 1e-12)
        assert (w * so >= t * (1 + 1e-12)).sum() <= (so > to).sum() <= (1 - q) * len(so) + 1
        gaps.append(t - w * to)
    assert min(gaps) <= 1e-9 * max(sr)
    assert abs(rr.matched_weight([c], [c / 3], SPAN, K) - 3.0) < 1e-12
    assert rr.matched_weight([c[:SPAN - 1]], [e[:SPAN - 1]], SPAN, K) == 0.0   # no full span


def test_range_far_past_the_data_is_unbounded_not_an_overflow():
    # Few clusters and a heavy tail far past the data: the delta-method error of the log rate
    # grows without limit, and exp() of it overflowed (a raw traceback from `edgevib train`). The
    # range must stay the lognormal interval r exp(+-z se), z = scipy.stats.norm.ppf(0.975), where
    # a float holds it, and become an unbounded upper limit (inf) where it does not.
    import math

    import pytest
    from scipy.stats import norm

    from host_tools.fit.raise_rate import RateFit
    from host_tools.fit.tail_fit import TailFit
    tail = TailFit(1.0, 0.3, 0.5, 1.0, 12, 12, np.linspace(0.0, 1.0, 12))
    rf = RateFit(1.0, 12, 12, 0.1, None, tail, 3.0)
    z = norm.ppf(0.975)
    x = 100.0
    se = math.sqrt(1 / 12 + tail.log_exceedance_se(x) ** 2)
    lo, hi = rf.range_95(x)
    r = rf.rate_per_h(x)
    tol = math.expm1(5e-7 * se) + 1e-12     # the module's z is written to 6 decimals (|dz| <= 5e-7)
    assert lo == pytest.approx(r * math.exp(-z * se), rel=tol) and hi == pytest.approx(r * math.exp(z * se), rel=tol)
    lo, hi = rf.range_95(1e50)              # z se is about 930: exp() alone would overflow
    assert 0.0 <= lo < rf.rate_per_h(1e50) < hi
