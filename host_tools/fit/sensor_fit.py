"""Sensor dropout limits from the sensor's own healthy samples: the longest run of identical
samples (F_STUCK) and of zero samples (F_ZERO) a healthy sensor makes, per axis.

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
dropout. q1, q2, p0 and q0 are counted on the training recordings, with one pseudo-count each
(Laplace's rule, so that a probability never seen is not taken as zero).

Entry point: run_limits(counts_list, n, windows_30) -> (stuck per axis, zero per axis, detail).
"""
from __future__ import annotations

import math
from typing import Sequence

import numpy as np

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
        q0 = (z2 + 1) / (zeros + 2)
        stuck.append(_limit(n, windows_30, q1, q2, 1))     # a run of 2: one coincidence
        zero.append(_limit(n, windows_30, p0, q0, 0))      # a run of 1: one zero sample
        det.append({"q_equal": q1, "q_equal_again": q2, "p_zero": p0, "q_zero_again": q0})
    return stuck, zero, {"axes": det, "false_per_30_days": FALSE_PER_30_DAYS}
