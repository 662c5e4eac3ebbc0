"""Tail fit and k-of-n thresholds against known distributions, scipy.stats and Monte Carlo."""
import math

import numpy as np
import pytest
from scipy.stats import binom, expon, genpareto

from host_tools.errors import EdgevibError
from host_tools.fit.tail_fit import (
    choose_threshold, fire_prob, fit_tail, onset_prob, window_prob_for_rate,
)


@pytest.mark.parametrize("k,n", [(1, 1), (2, 3), (3, 5), (5, 5), (4, 10)])
@pytest.mark.parametrize("p", [1e-6, 0.01, 0.3])
def test_fire_prob_is_binomial_tail(p, k, n):
    # Reference: scipy.stats.binom survival function, P(Binomial(n, p) >= k) = sf(k - 1).
    assert fire_prob(p, k, n) == pytest.approx(binom.sf(k - 1, n, p), rel=1e-9)


@pytest.mark.parametrize("p,k,n", [(0.05, 3, 5), (0.2, 2, 2), (0.02, 1, 1), (0.1, 4, 8)])
def test_rule_probabilities_against_monte_carlo(p, k, n):
    # Direct simulation of independent Bernoulli windows and the k-of-n rule.
    rng = np.random.default_rng(11)
    length = 2_000_000
    x = rng.random(length) < p
    count = np.convolve(x, np.ones(n, dtype=np.int64), mode="valid")
    fires = count >= k
    onsets = int(np.count_nonzero(fires[1:] & ~fires[:-1]))
    m = len(fires) - 1
    # Bounds: onsets are rare and nearly independent, so their count is close to Poisson: 5 sd.
    # Firing windows come in runs of at most n (until the oldest exceedance drops out), which
    # inflates the variance of their count by at most n: 5 sd of that.
    e_on = m * onset_prob(p, k, n)
    assert abs(onsets - e_on) < 5 * math.sqrt(e_on)
    e_fire = m * fire_prob(p, k, n)
    assert abs(int(np.count_nonzero(fires[1:])) - e_fire) < 5 * math.sqrt(n * e_fire * (1 - fire_prob(p, k, n)))


@pytest.mark.parametrize("k,n", [(1, 1), (3, 5), (2, 4)])
def test_window_prob_meets_target(k, n):
    w = 30 * 24 * 60  # one window a minute
    p = window_prob_for_rate(w, k, n, 1.0)
    assert w * onset_prob(p, k, n) == pytest.approx(1.0, rel=1e-9)
    assert p < k / (n + 1)


def _true_sf(dist, x):
    return float(dist.sf(x))


# Known distributions (scipy.stats): exponential (GPD shape 0), a heavy tail (shape 0.2) and a
# bounded tail (shape -0.2). For samples above u the GPD is exact for all three.
DISTS = [expon(), genpareto(0.2), genpareto(-0.2)]


@pytest.mark.parametrize("dist", DISTS, ids=["expon", "gpd+0.2", "gpd-0.2"])
def test_fitted_rate_matches_true_rate(dist):
    rng = np.random.default_rng(5)
    scores = dist.rvs(size=20_000, random_state=rng)
    fit = fit_tail(scores)
    for p in (1e-3, 1e-4, 1e-5):
        x = fit.score_at(p)
        p_true = _true_sf(dist, x)
        se = fit.log_exceedance_se(x)
        # Sampling error: the delta-method standard error of the fitted log-probability (tested
        # below against the spread over replicates); 4 standard errors, a false failure ~1e-4.
        assert abs(math.log(p_true / p)) < 4 * se, (p, p_true, se)


def test_standard_error_matches_replicate_spread():
    # The delta-method standard error must describe the real scatter of the fitted threshold's
    # true exceedance over independent training sets from the same distribution.
    rng = np.random.default_rng(9)
    z = []
    for _ in range(40):
        fit = fit_tail(rng.exponential(size=4000))
        x = fit.score_at(1e-4)
        z.append(math.log(math.exp(-x) / 1e-4) / fit.log_exceedance_se(x))
    z = np.array(z)
    # 40 replicates: the mean of unit-variance z has sd 0.16; the sd estimate has sd about 0.11
    # (chi distribution). Bounds at about 4 sd, widened for the delta method's approximation.
    assert abs(z.mean()) < 0.65
    assert 0.6 < z.std(ddof=1) < 1.5


def test_threshold_gives_target_false_alerts():
    rng = np.random.default_rng(3)
    scores = rng.exponential(size=10_000)
    w, k, n = 30 * 24 * 60, 3, 5
    ch = choose_threshold(scores, w, k, n, target_per_30_days=1.0)
    true_rate = w * onset_prob(math.exp(-ch.threshold), k, n)  # exponential: P(S > x) = e^-x
    lo, hi = ch.false_alerts_range_95
    assert ch.false_alerts_per_30_days == pytest.approx(1.0, rel=1e-6)
    assert lo < 1.0 < hi
    # 95 % range from the fit's sampling error; allow to the 99.99 % equivalent (4 sd vs 1.96).
    se_rate = math.log(hi / lo) / (2 * 1.96)
    assert abs(math.log(true_rate)) < 4 * se_rate
    assert ch.p_window < ch.fit.tail_fraction and ch.beyond_training_max == (ch.threshold > scores.max())


def test_lenient_target_uses_empirical_quantile():
    scores = np.arange(1000, dtype=float)
    ch = choose_threshold(scores, windows_per_30_days=100, k=1, n=1, target_per_30_days=20)
    # p (1 - p) = 0.2 -> p = 0.2764, above the tail fraction: the empirical quantile is used.
    assert ch.p_window == pytest.approx((1 - math.sqrt(1 - 0.8)) / 2, rel=1e-9)
    assert ch.threshold == pytest.approx(np.quantile(scores, 1 - ch.p_window))
    # Binomial error of an empirical proportion: sd of log q is sqrt((1 - q) / (N q)).
    q = ch.fit.exceedance_prob(ch.threshold)
    assert ch.fit.log_exceedance_se(ch.threshold) == pytest.approx(math.sqrt((1 - q) / (1000 * q)))
    lo, hi = ch.false_alerts_range_95
    assert lo < 20 < hi


def test_bad_inputs():
    with pytest.raises(EdgevibError, match="too few"):
        fit_tail(np.ones(50))
    with pytest.raises(EdgevibError, match="NaN"):
        fit_tail(np.r_[np.arange(500.0), np.nan])
    with pytest.raises(EdgevibError, match="ties"):
        fit_tail(np.r_[np.zeros(995), np.ones(5)])  # 5 values above u = 0
    with pytest.raises(EdgevibError, match="k <= n"):
        window_prob_for_rate(1000, 4, 3, 1.0)
