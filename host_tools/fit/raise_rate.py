"""The rate of false raises under the persistence rule, on correlated windows.

The detector raises an alert when at least k of the last L evaluated windows score at or over the
threshold T (firmware_py/detect/alarm.py). Equivalently: when the k-th largest score of the last L
windows, the raise statistic

    S_t = k-th largest of c_{t-L+1} .. c_t            (k = L: the smallest score in the span)

reaches T. So the event that raises is an upcrossing of S, and its rate is what a user plans on.
Windows of a healthy pump are strongly correlated (slow process variation: levels that wander
over tens of seconds), so per-window exceedances come in clusters and a rate computed from the
per-window tail as if windows were independent is wrong by a large factor.

Method (peaks over threshold on clusters of S; Coles 2001, "An Introduction to Statistical
Modeling of Extreme Values", sec. 5.3, runs declustering; from memory):
1. S is computed on held-out healthy sequences (a sequence is a run of evaluated windows with no
   evidence reset between them, as the device's span sees them; S exists from the first window,
   the windows before a reset counting as 0, as on the device).
2. At or over a level u, exceedances of S closer than r = L windows belong to one cluster (runs
   declustering with the span as the run length: the span still holds evidence from the last
   exceedance); each cluster's peak Y is one independent event. u is the highest level with at
   least MIN_CLUSTERS clusters. At the high thresholds that matter the device's own clear rule
   (all of the span under hyst * T) separates its alerts in the same way; at low levels it
   merges clusters into one long alert, so the cluster count errs high (the cautious side).
3. Cluster peaks over u follow a generalised Pareto distribution (maximum likelihood,
   scipy.stats.genpareto); clusters arrive as a Poisson process of rate lambda_u = N_c / H (H the
   held-out running hours). The raise rate at T > u is lambda_u * P(Y > T), which gives T for a
   target rate.
4. Confidence: the effective number of independent stretches is N_c (clusters), not the window
   count; the variance of the log rate is 1 / N_c (Poisson count) plus the delta-method variance
   of the GPD tail (host_tools.fit.tail_fit.TailFit.log_exceedance_se with N_c excesses).
5. Support: a promise whose 95 % upper limit is more than SUPPORT_RATIO times the stated rate
   extrapolates further than the data can carry. The rate is then raised, along a log grid, to the
   least rate the data support, the threshold is set for it, and training warns. When training
   keeps a higher threshold than that (the device's conservative floor), the rate there is not
   extrapolated from the fit: the supported rate is stated as an upper bound (at_most), because
   the clusters whose peak passes T are among those whose peak passes any lower threshold.
6. No fit (fewer than LEAST_CLUSTERS clusters): the clusters of S at or over the threshold actually
   set are counted, and the exact Poisson 95 % upper limit of their rate is stated as an upper
   bound (count_bound; Garwood 1936).

The extremal index of S above u (Ferro and Segers, "Inference for clusters of extreme values",
JRSS B 65, 2003, intervals estimator) is reported beside the cluster count as a check: N_c is close
to theta * (number of exceedances).

Entry points: fit() (the cluster tail from held-out sequences), promise() (threshold and stated
rate for a target), at_most() (the promise at a higher threshold), count_bound() (the promise
without a fit), garwood_95(), raise_statistic(), clusters(), extremal_index(), matched_weight()
(the weight of one channel of the combined score against another, docs/detector.md, Score).

edgevib is advisory condition monitoring, not machinery protection: a stated rate is a statistical
estimate from the training data, not a guarantee.
"""
from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Sequence

import numpy as np
from scipy.optimize import brentq
from scipy.stats import chi2, genpareto

from host_tools.errors import EdgevibError
from host_tools.fit.tail_fit import TailFit

MIN_CLUSTERS = 30        # fewer clusters leave the tail's shape too uncertain to fit
LEAST_CLUSTERS = 12      # below this no fit is attempted at all
SUPPORT_RATIO = 3.0      # the 95 % upper limit may be at most this times the stated rate
_LEVELS = (0.995, 0.99, 0.98, 0.97, 0.95, 0.9, 0.8, 0.7, 0.6, 0.5)
_Z95 = 1.959964
_LOG_HUGE = 700.0          # exp() of more overflows a float (about 709.8)
_CHUNK = 1 << 22          # values partitioned at once


def raise_statistic(c: np.ndarray, span: int, k: int) -> np.ndarray:
    """S_t, the k-th largest of the last `span` values of c, for t = 0 .. len(c)-1; before the
    span has filled the missing values count as 0 (scores are >= 0), as the device's evidence
    counts the windows not yet seen since a reset as not over (firmware_py/detect/alarm.py)."""
    c = np.asarray(c, dtype=np.float64)
    if len(c) == 0:
        return np.zeros(0)
    c = np.concatenate([np.zeros(span - 1), c])
    w = np.lib.stride_tricks.sliding_window_view(c, span)
    step = max(1, _CHUNK // span)           # rows per chunk: bounded memory for long sequences
    return np.concatenate([np.partition(w[i:i + step], span - k, axis=1)[:, span - k]
                           for i in range(0, len(w), step)])


MATCH_LEVELS = (0.99, 0.999, 1.0)   # upper quantiles of S at which two channels are matched


def matched_weight(ref: Sequence[np.ndarray], other: Sequence[np.ndarray], span: int, k: int,
                   levels: Sequence[float] = MATCH_LEVELS) -> float:
    """The largest weight w for the channel `other` such that w * S(other) lies at or under
    S(ref) at each upper quantile in `levels` of the held-out sequences (ref[i] and other[i]: the
    two channels of the same windows, already weighted / unweighted). S commutes with a positive
    weight (the k-th largest of w * c is w times the k-th largest of c), so at each level T =
    Q_q(S(ref)) the weighted channel spends no more of the running time at or over T than ref
    does. 0.0 when there is nothing to match (no held-out window, or `other` never rises)."""
    sr = [raise_statistic(c, span, k) for c in ref]
    so = [raise_statistic(c, span, k) for c in other]
    sr = np.concatenate(sr) if sr else np.zeros(0)
    so = np.concatenate(so) if so else np.zeros(0)
    if len(sr) == 0 or len(sr) != len(so):
        return 0.0
    qr, qo = np.quantile(sr, levels), np.quantile(so, levels)
    ratios = [r / o for r, o in zip(qr, qo) if o > 0]
    return float(min(ratios)) if ratios else 0.0


def clusters(s: np.ndarray, u: float, run: int) -> np.ndarray:
    """Peaks of the clusters of s at or over u: exceedances less than `run` apart share one."""
    idx = np.flatnonzero(s >= u)
    if len(idx) == 0:
        return np.zeros(0)
    cut = np.flatnonzero(np.diff(idx) >= run) + 1
    return np.array([s[g].max() for g in np.split(idx, cut)])


def extremal_index(s: np.ndarray, u: float) -> float | None:
    """Ferro and Segers' (2003) intervals estimator of the extremal index of s above u; None
    with fewer than two exceedances."""
    t = np.diff(np.flatnonzero(s >= u)).astype(np.float64)
    if len(t) < 1:
        return None
    n = len(t) + 1
    if t.max() <= 2:
        th = 2.0 * t.sum() ** 2 / ((n - 1) * (t * t).sum())
    else:
        th = 2.0 * (t - 1).sum() ** 2 / ((n - 1) * ((t - 1) * (t - 2)).sum())
    return float(min(1.0, th))


@dataclass(frozen=True)
class RateFit:
    """Cluster peaks of the raise statistic over u, their Poisson rate and GPD tail."""

    u: float                 # level, score units
    clusters: int            # N_c: independent stretches above u
    exceedances: int         # windows of S above u
    hours: float             # held-out running hours
    theta: float | None      # extremal index (Ferro and Segers), a check on N_c
    tail: TailFit            # GPD of the cluster peaks (tail_fraction 1: conditional on a cluster)
    s_max: float             # the largest S seen

    @property
    def rate_u_per_h(self) -> float:
        return self.clusters / self.hours

    def rate_per_h(self, x: float) -> float:
        """Expected raises per running hour at threshold x."""
        if x <= self.u:
            return self.rate_u_per_h
        return self.rate_u_per_h * float(genpareto.sf(x - self.u, self.tail.shape, scale=self.tail.scale))

    def threshold_for(self, per_h: float) -> float:
        """The threshold whose expected raise rate is per_h (at most rate_u_per_h: else u)."""
        if per_h >= self.rate_u_per_h:
            return self.u
        return self.u + float(genpareto.isf(per_h / self.rate_u_per_h, self.tail.shape, scale=self.tail.scale))

    def range_95(self, x: float) -> tuple[float, float]:
        """95 % range of the raise rate at x: Poisson count of clusters and GPD sampling error."""
        se = math.sqrt(1.0 / self.clusters + self.tail.log_exceedance_se(x) ** 2)
        r = self.rate_per_h(x)
        if r <= 0.0:
            return 0.0, 0.0
        # far past the data the delta-method error can be huge: the upper limit is then unbounded
        # (an honest inf, which every caller compares), never an OverflowError
        log_up = math.log(r) + _Z95 * se
        return math.exp(math.log(r) - _Z95 * se), (math.inf if log_up > _LOG_HUGE else math.exp(log_up))


@dataclass(frozen=True)
class Promise:
    """A threshold and the false-raise rate it is expected to give, per 30 days of running."""

    threshold: float
    per_30_days: float
    range_95: tuple[float, float]
    target_per_30_days: float
    supported: bool          # False: the target was beyond the data, a higher rate is promised
    beyond_data: bool        # the threshold lies above every S seen
    upper_bound: bool = False  # True: the rate is at most per_30_days (at_most, count_bound)


@dataclass(frozen=True)
class Count:
    """Clusters of the raise statistic at or over a threshold, counted on held-out sequences,
    and the promise they support without a fit (count_bound)."""

    clusters: int
    hours: float
    promise: Promise


def fit(sequences: Sequence[np.ndarray], span: int, k: int, window_s: float) -> RateFit:
    """Fit the cluster tail of the raise statistic over held-out healthy sequences of combined
    scores (score units). window_s: running time of one evaluated window (n * every / fs)."""
    parts = [raise_statistic(c, span, k) for c in sequences]
    hours = sum(len(c) for c in sequences) * window_s / 3600.0
    s_all = np.concatenate(parts) if parts else np.zeros(0)
    if len(s_all) == 0 or hours <= 0:
        raise EdgevibError("raise-rate fit: no held-out scored running to fit")
    best = None
    for q in _LEVELS:
        u = float(np.quantile(s_all, q))
        peaks = np.concatenate([clusters(p, u, span) for p in parts])
        if best is None or len(peaks) > len(best[1]):
            best = (u, peaks)
        if len(peaks) >= MIN_CLUSTERS:
            best = (u, peaks)
            break
    u, peaks = best
    if len(peaks) < LEAST_CLUSTERS:
        raise EdgevibError(f"raise-rate fit: only {len(peaks)} independent stretches of high scores in "
                           f"{hours:.2f} h of held-out running; need at least {LEAST_CLUSTERS}")
    excess = np.sort(peaks - u)
    if np.ptp(excess) <= 0:
        raise EdgevibError("raise-rate fit: the cluster peaks are all equal")
    xi, _, sigma = genpareto.fit(excess, floc=0.0)
    tail = TailFit(u, float(xi), float(sigma), 1.0, len(peaks), len(peaks), np.sort(peaks))
    n_exc = int((s_all >= u).sum())
    theta = extremal_index(s_all, u)
    return RateFit(u, len(peaks), n_exc, hours, theta, tail, float(s_all.max()))


def promise(rf: RateFit, target_per_30_days: float) -> Promise:
    """Threshold for the target, or for the least rate the data support (see the module)."""
    h30 = 30 * 24.0
    ok = _supported(rf, target_per_30_days / h30)
    rate = target_per_30_days
    if not ok:
        lo_r, hi_r = math.log(target_per_30_days), math.log(rf.rate_u_per_h * h30)
        if hi_r <= lo_r or not _supported(rf, rf.rate_u_per_h):
            rate = rf.rate_u_per_h * h30
        else:
            rate = math.exp(brentq(lambda lr: _ratio(rf, math.exp(lr) / h30) - SUPPORT_RATIO, lo_r, hi_r,
                                   xtol=1e-6))
    x = rf.threshold_for(rate / h30)
    lo, hi = rf.range_95(x)
    return Promise(x, rf.rate_per_h(x) * h30, (lo * h30, hi * h30), target_per_30_days, ok, x > rf.s_max)


def at_most(rf: RateFit, x: float, below: Promise) -> Promise:
    """The promise at a threshold x chosen otherwise, above the threshold of `below` (the
    device's floor over the least supported rate): at most `below`'s rate, with its range. The
    clusters whose peak passes x are among those whose peak passes the lower threshold, so the
    rate can only fall; the fit's own rate at x would be an extrapolation past what the data
    support."""
    return Promise(x, below.per_30_days, below.range_95, below.target_per_30_days, False, x > rf.s_max, True)


def garwood_95(n: int) -> tuple[float, float]:
    """Exact 95 % range of a Poisson mean from n observed events: chi2.ppf(0.025, 2n) / 2 and
    chi2.ppf(0.975, 2n + 2) / 2, each limit one-sided at 2.5 % (Garwood, "Fiducial limits for the
    Poisson distribution", Biometrika 28, 1936; any statistics handbook). n = 0: 0 to -ln 0.025."""
    return (0.0 if n == 0 else float(chi2.ppf(0.025, 2 * n)) / 2), float(chi2.ppf(0.975, 2 * n + 2)) / 2


def count_bound(sequences: Sequence[np.ndarray], limits: Sequence[tuple[float, float]], span: int, k: int,
                window_s: float) -> list[Count] | None:
    """Without a fit, for each (threshold x, target per 30 days) of limits: the clusters of S at
    or over x on the held-out sequences (runs declustering as in clusters()), over their running
    hours H, and the promise "at most" the Garwood 95 % upper limit of that rate per 30 days
    (range: Garwood's two limits). S is computed once for all the limits. None without held-out
    running."""
    hours = sum(len(c) for c in sequences) * window_s / 3600.0
    if hours <= 0:
        return None
    parts = [raise_statistic(c, span, k) for c in sequences]
    s_max = max((float(p.max()) for p in parts if len(p)), default=-math.inf)
    out = []
    for x, target_per_30_days in limits:
        n = sum(len(clusters(p, x, span)) for p in parts)
        lo, hi = (v * 720.0 / hours for v in garwood_95(n))
        out.append(Count(n, hours, Promise(x, hi, (lo, hi), target_per_30_days, False, x > s_max, True)))
    return out


def _ratio(rf: RateFit, per_h: float) -> float:
    x = rf.threshold_for(per_h)
    return rf.range_95(x)[1] / max(rf.rate_per_h(x), 1e-300)


def _supported(rf: RateFit, per_h: float) -> bool:
    return _ratio(rf, per_h) <= SUPPORT_RATIO
