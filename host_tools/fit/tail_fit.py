"""Alert thresholds with a known false-alert rate: a generalised Pareto tail and a k-of-n rule.

The detector scores each window; the persistence rule raises an alert when at least k of the last
n windows score above the threshold. Training picks the threshold from scores of healthy windows
so that the expected number of false alerts per 30 days of monitoring meets a target.

Tail (peaks over threshold). The largest training score says little about a once-a-month event,
so the upper tail is modelled: above u, the (1 - tail_fraction) empirical quantile of the healthy
scores, the excesses S - u follow a generalised Pareto distribution with shape xi and scale sigma
(Pickands-Balkema-de Haan theorem; Coles 2001, "An Introduction to Statistical Modeling of Extreme
Values", ch. 4; fitted by maximum likelihood with scipy.stats.genpareto). For x > u

    P(S > x) = zeta * (1 + xi (x - u) / sigma) ** (-1 / xi)     (xi -> 0: zeta * exp(-(x-u)/sigma))

with zeta the fraction of healthy scores above u. Below u the empirical distribution is used.

Persistence rule. Let X_t = 1 when window t exceeds the threshold, P(X_t = 1) = p, and assume the
X_t independent. The count over the last n windows is Binomial(n, p), so the rule holds at a window
with probability

    P_fire(p) = sum_{j=k..n} C(n, j) p^j (1 - p)^(n - j).

An alert is the rule becoming true, not every window in which it stays true. It switches on at t
exactly when X_t = 1, X_{t-n} = 0 and k - 1 of the n - 1 windows between exceed:

    P_onset(p) = p (1 - p) C(n - 1, k - 1) p^(k - 1) (1 - p)^(n - k).

The expected false alerts per 30 days is windows_per_30_days * P_onset(p); the threshold is the
score whose tail probability is the p solving that = target. P_onset rises with p up to
p = k / (n + 1); a target above the rule's maximum rate gives that p.

The independence assumption. Overlapping windows and slowly changing conditions make scores of
neighbouring windows correlated, so exceedances come in clusters. Clustered exceedances fill a
k-of-n rule more easily than independent ones at the same p, so under clustering the real
false-alert rate can exceed the one computed here; replaying healthy recordings through the
detector is the check on that (extremal-index declustering would be the next refinement).
A threshold set this way is a statistical estimate from the training data, not a guarantee: edgevib
is advisory condition monitoring, not machinery protection.

Entry points: TailFit, ThresholdChoice, fit_tail(), fire_prob(), onset_prob(), window_prob_for_rate(), choose_threshold().
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy.optimize import brentq
from scipy.stats import genpareto

from host_tools.errors import EdgevibError

DEFAULT_TAIL_FRACTION = 0.1
MIN_EXCEEDANCES = 20  # fewer excesses leave the shape so uncertain the fit is not worth trusting
_XI_ZERO = 1e-6


@dataclass(frozen=True)
class TailFit:
    """A fitted score distribution: empirical below u, generalised Pareto above (score units)."""

    u: float  # peaks-over-threshold level, score units
    shape: float  # GPD shape xi (scipy's c), dimensionless
    scale: float  # GPD scale sigma, score units
    tail_fraction: float  # zeta: fraction of healthy scores above u
    n_scores: int
    n_exceed: int
    sorted_scores: np.ndarray  # healthy scores, ascending (for the empirical part)

    def exceedance_prob(self, x: float) -> float:
        """P(S > x) for a healthy window's score S."""
        if x <= self.u:
            above = self.n_scores - np.searchsorted(self.sorted_scores, x, side="right")
            return float(above) / self.n_scores
        return self.tail_fraction * float(genpareto.sf(x - self.u, self.shape, scale=self.scale))

    def score_at(self, p: float) -> float:
        """The score x with P(S > x) = p (0 < p < 1)."""
        if not 0.0 < p < 1.0:
            raise ValueError(f"exceedance probability must be in (0, 1), got {p}")
        if p >= self.tail_fraction:
            return float(np.quantile(self.sorted_scores, 1.0 - p))
        return self.u + float(genpareto.isf(p / self.tail_fraction, self.shape, scale=self.scale))

    def log_exceedance_se(self, x: float) -> float:
        """Standard error of the fitted log P(S > x), x above u (delta method).

        Uses the asymptotic covariance of the GPD maximum-likelihood estimates, per excess
        (1 + xi) [[1 + xi, -sigma], [-sigma, 2 sigma^2]] (Coles 2001, sec. 4.3; from memory,
        valid for xi > -0.5), and the binomial variance zeta (1 - zeta) / N of zeta. At or below
        u, where the empirical distribution is used, the binomial error of that proportion.
        """
        y = x - self.u
        if y <= 0.0:
            q = max(self.exceedance_prob(x), 1.0 / self.n_scores)
            return math.sqrt((1.0 - q) / (q * self.n_scores))
        xi, s = self.shape, self.scale
        d_sigma = y / (s * (s + xi * y))
        if abs(xi) < _XI_ZERO:
            d_xi = y * y / (2.0 * s * s)
        else:
            d_xi = math.log1p(xi * y / s) / (xi * xi) - y / (xi * (s + xi * y))
        one = 1.0 + max(xi, -0.49)  # the formula breaks down at xi <= -0.5
        cov = one / self.n_exceed * np.array([[one, -s], [-s, 2.0 * s * s]])
        grad = np.array([d_xi, d_sigma])
        z = self.tail_fraction
        var = float(grad @ cov @ grad) + (1.0 - z) / (z * self.n_scores)
        return math.sqrt(var)


@dataclass(frozen=True)
class ThresholdChoice:
    """The chosen threshold and what it is expected to give."""

    threshold: float  # score units
    p_window: float  # per-window probability that a healthy score exceeds the threshold
    false_alerts_per_30_days: float  # expected, under the independence assumption
    false_alerts_range_95: tuple[float, float]  # from the tail fit's sampling error alone
    beyond_training_max: bool  # the threshold lies above every healthy training score
    fit: TailFit


def fit_tail(scores: np.ndarray, tail_fraction: float = DEFAULT_TAIL_FRACTION) -> TailFit:
    """Fit the upper tail of healthy scores; u is their (1 - tail_fraction) quantile."""
    s = np.sort(np.asarray(scores, dtype=np.float64).ravel())
    if not np.all(np.isfinite(s)):
        raise EdgevibError("tail fit: healthy scores hold NaN or infinity")
    if not 0.0 < tail_fraction < 0.5:
        raise EdgevibError(f"tail fit: tail fraction must be in (0, 0.5), got {tail_fraction}")
    n = len(s)
    need = math.ceil(MIN_EXCEEDANCES / tail_fraction)
    if n < need:
        raise EdgevibError(f"tail fit: {n} healthy windows is too few; need at least {need} for a tail fit")
    u = float(s[n - math.ceil(tail_fraction * n) - 1])
    excess = s[s > u] - u
    if len(excess) < MIN_EXCEEDANCES:
        raise EdgevibError(f"tail fit: only {len(excess)} healthy scores lie above {u:g} (ties); need {MIN_EXCEEDANCES}")
    xi, _, sigma = genpareto.fit(excess, floc=0.0)
    return TailFit(u, float(xi), float(sigma), len(excess) / n, n, len(excess), s)


def fire_prob(p: float, k: int, n: int) -> float:
    """P(at least k of n independent windows exceed), each with probability p."""
    return sum(math.comb(n, j) * p**j * (1.0 - p) ** (n - j) for j in range(k, n + 1))


def onset_prob(p: float, k: int, n: int) -> float:
    """P(a k-of-n rule switches on at a given window), independent windows with probability p."""
    return p * (1.0 - p) * math.comb(n - 1, k - 1) * p ** (k - 1) * (1.0 - p) ** (n - k)


def window_prob_for_rate(windows_per_30_days: float, k: int, n: int, target_per_30_days: float) -> float:
    """Per-window exceedance probability p giving `target_per_30_days` expected onsets."""
    _check_rule(k, n)
    if not (windows_per_30_days > 0 and target_per_30_days > 0):
        raise EdgevibError("threshold: windows per 30 days and the false-alert target must be positive")
    p_max = k / (n + 1.0)
    if windows_per_30_days * onset_prob(p_max, k, n) <= target_per_30_days:
        return p_max
    return brentq(lambda p: windows_per_30_days * onset_prob(p, k, n) - target_per_30_days,
                  1e-300, p_max, xtol=1e-300, rtol=1e-12)


def choose_threshold(
    scores: np.ndarray,
    windows_per_30_days: float,
    k: int,
    n: int,
    target_per_30_days: float = 1.0,
    tail_fraction: float = DEFAULT_TAIL_FRACTION,
) -> ThresholdChoice:
    """Score threshold for a k-of-n rule meeting the false-alert target (see module docstring)."""
    p = window_prob_for_rate(windows_per_30_days, k, n, target_per_30_days)
    fit = fit_tail(scores, tail_fraction)
    x = fit.score_at(p)
    se = fit.log_exceedance_se(x)
    rate = windows_per_30_days * onset_prob(p, k, n)
    p_max = k / (n + 1.0)
    lo, hi = (windows_per_30_days * onset_prob(min(p * math.exp(z * se), p_max), k, n) for z in (-1.96, 1.96))
    return ThresholdChoice(x, p, rate, (lo, hi), x > fit.sorted_scores[-1], fit)


def _check_rule(k: int, n: int) -> None:
    if not (isinstance(k, int) and isinstance(n, int) and 1 <= k <= n):
        raise EdgevibError(f"persistence rule needs 1 <= k <= n, got k={k}, n={n}")
