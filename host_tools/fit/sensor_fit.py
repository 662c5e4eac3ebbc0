"""Sensor-health limits from the sensor's own healthy data, per axis: the longest run of identical
samples (F_STUCK) and of zero samples (F_ZERO) a healthy sensor makes, and the crest factor
(F_CREST) over which a window holds a knock.

Physics. A sensor with noise never repeats its last value for long: for white Gaussian noise of
sigma counts quantised to whole counts, two consecutive samples are equal with probability
q = sum_k P(k)**2 ~ 1 / (2 sqrt(pi) sigma) (0.28 at 1 count, 0.5 at half a count). A run of L
identical samples needs the first coincidence (probability q1) and L - 2 more, each given the one
before (probability q2: on a slow signal a coincidence makes the next more likely, so q2 is
measured apart from q1). A window of n samples holds a run longer than L with probability at most
n q1 q2**(L - 1). The limit is the least L for which that, over the windows of 30 days of running,
is at most 1/1000: a false dropout once in a thousand months. Zero runs the same way, with
p0 = P(x = 0) and q0 = P(x_t = 0 | x_{t-1} = 0): a run longer than L with probability at most
n p0 q0**L. On an axis that
carries gravity, or whose signal is large, p0 is tiny and a short run of zeros is already a
dropout. q1, q2 and p0 are counted on the training recordings, with one pseudo-count each
(Laplace's rule, so that a probability never seen is not taken as zero). q0 is counted too, but
its two pseudo-counts carry the axis's own q2 rather than 1/2: a zero after a zero is a repeated
value, and with noise added to a slower signal the step from one sample to the next does not
depend on the level, so a repeat is as likely at zero as at any value. On an axis that never
reads zero (gravity, or a large signal) that gives the physics' q0 instead of the prior's 1/2.

Knocks. A loose sensor rattles on its seat, and a struck sensor or a glitching connection gives
an impulse that only one axis sees (a machine impact reaches every axis through the housing: the
detector's second condition, firmware_py/detect/detector.py). The crest factor over which an axis
holds an impulse is the larger of two limits, each for a false call once in a thousand months:
- Gaussian noise (analytic): a window of n samples, its mean and r.m.s. its own, exceeds crest c
  with probability about 1 - (1 - 2 Q(c'))**n (Q the normal upper tail). The peak is part of the
  r.m.s. it is divided by: x > c s with s**2 = (S + x**2) / n (S the other samples' sum of
  squares) is x > c_e sqrt(S / n), c_e = c / sqrt(1 - c**2 / n); and sqrt(S / n) scatters about
  sigma with relative spread 1 / sqrt(2 n), which E[Q(a + b Z)] = Q(a / sqrt(1 + b**2)) averages:
  c' = c_e / sqrt(1 + c_e**2 / (2 n)). Rounding to whole counts lifts a peak
  by at most half a count: + 0.5 / (the axis's least r.m.s. in counts). A vibration of lines
  and noise has a lighter tail than noise alone of the same r.m.s.;
- the axis's own data, for a machine whose healthy vibration is more impulsive than noise: the
  largest crest factor seen, carried from the training windows' count to the budget's as a
  Gaussian tail's maximum grows, by sqrt(ln(n N_budget) / ln(n N_seen)).

Entry points: run_limits(counts_list, n, windows_30) -> (stuck per axis, zero per axis, detail);
crest_limits(crest_q12, rms_q8, n, windows_30) -> (limit per axis, Q12; detail);
gaussian_crest_exceedance(c, n) -> probability per window.
"""
from __future__ import annotations

import math
from typing import Sequence

import numpy as np
from scipy import optimize, stats

FALSE_PER_30_DAYS = 1e-3


def _limit(n: int, windows_30: float, first: float, ext: float, least: int) -> int:
    """Least L >= least with n * first * ext**(L - least) * windows_30 <= FALSE_PER_30_DAYS: the
    probability of a run longer than L (first: of a run of least + 1; ext: of each extension)."""
    budget = FALSE_PER_30_DAYS / (n * windows_30)
    if first <= budget:
        return least
    if ext >= 1.0:
        return n
    return min(n, least + math.ceil(math.log(budget / first) / math.log(ext)))


def run_limits(counts_list: Sequence[np.ndarray], n: int, windows_30: float) -> tuple[list[int], list[int], dict]:
    """Per-axis limits (samples) for F_STUCK and F_ZERO from healthy raw counts (each array
    frames x axes, one per recording); detail: the measured probabilities."""
    axes = counts_list[0].shape[1]
    stuck, zero, det = [], [], []
    for a in range(axes):
        eq = eq2 = pairs = triples = zeros = z2 = total = 0
        for c in counts_list:
            x = c[:, a].astype(np.int32)
            e = x[1:] == x[:-1]
            eq += int(e.sum())
            pairs += len(e)
            eq2 += int((e[1:] & e[:-1]).sum())
            triples += max(len(e) - 1, 0)
            zz = x == 0
            zeros += int(zz.sum())
            z2 += int((zz[1:] & zz[:-1]).sum())
            total += len(x)
        q1 = (eq + 1) / (pairs + 2)
        q2 = (eq2 + 1) / (eq + 2)
        p0 = (zeros + 1) / (total + 2)
        q0 = (z2 + 2 * q2) / (zeros + 2)
        stuck.append(_limit(n, windows_30, q1, q2, 1))     # a run of 2: one coincidence
        zero.append(_limit(n, windows_30, p0, q0, 0))      # a run of 1: one zero sample
        det.append({"q_equal": q1, "q_equal_again": q2, "p_zero": p0, "q_zero_again": q0})
    return stuck, zero, {"axes": det, "false_per_30_days": FALSE_PER_30_DAYS}


def gaussian_crest_exceedance(c: float, n: int) -> float:
    """Probability that a window of n samples of Gaussian noise (its own mean and r.m.s.) has a
    crest factor over c; see the module docstring. 0 < c < sqrt(n)."""
    return math.exp(_log_exceedance(c, n))


def _log_exceedance(c: float, n: int) -> float:
    """log of gaussian_crest_exceedance, without underflow far in the tail (there 1 - (1 - q)**n
    is n q to within n q**2)."""
    ce = c / math.sqrt(1.0 - c * c / n)
    lq = math.log(2.0) + float(stats.norm.logsf(ce / math.sqrt(1.0 + ce * ce / (2.0 * n))))
    if lq < -30.0:
        return math.log(n) + lq
    return math.log(-math.expm1(n * math.log1p(-math.exp(lq))))


def crest_limits(crest_q12: np.ndarray, rms_q8: np.ndarray, n: int, windows_30: float) -> tuple[list[int], dict]:
    """Per-axis knock limits on F_CREST (Q12) from healthy windows' crest factors and r.m.s.
    (windows x axes, F_CREST Q12 and F_RMS Q8 counts); see the module docstring."""
    per_window = FALSE_PER_30_DAYS / windows_30
    top = 0.999 * math.sqrt(n)                       # a crest factor never exceeds sqrt(n - 1)
    gap = lambda c: _log_exceedance(c, n) - math.log(per_window)
    # a window so short that no crest factor is rare enough: sqrt(n), which no window reaches
    c_gauss = optimize.brentq(gap, 1.0, top) if gap(top) < 0 else math.sqrt(n)
    seen = len(crest_q12)
    grow = math.sqrt(math.log(n * windows_30 / FALSE_PER_30_DAYS) / math.log(n * max(seen, 2)))
    out, det = [], []
    for a in range(crest_q12.shape[1]):
        rms = max(float(np.min(rms_q8[:, a])) / 256.0, 0.5)
        noise = c_gauss + 0.5 / rms
        data = float(np.max(crest_q12[:, a])) / 4096.0 * grow
        lim = max(noise, data)
        out.append(int(math.ceil(lim * 4096)))
        det.append({"gaussian": noise, "from_data": data, "largest_seen": float(np.max(crest_q12[:, a])) / 4096.0})
    return out, {"axes": det, "windows_seen": seen, "growth": grow, "false_per_30_days": FALSE_PER_30_DAYS}
