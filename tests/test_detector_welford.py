"""Fixed-point Welford running statistics against numpy and the statistics module."""
import statistics
from fractions import Fraction

import numpy as np
import pytest

import firmware_py  # noqa: F401
from firmware_py.detect.welford import Welford, IN_LIM, N_MAX


def _streams():
    rng = np.random.default_rng(11)
    n = 40000
    return {
        # a large constant offset with small noise: the case naive sums of squares lose
        "offset 8000, sd 3": np.rint(8000 + rng.normal(0, 3, n)),
        "offset -7900, sd 40": np.rint(-7900 + rng.normal(0, 40, n)),
        "uniform full range": rng.integers(-IN_LIM, IN_LIM + 1, n),
        "step change": np.concatenate([np.rint(rng.normal(-3000, 10, n // 2)),
                                       np.rint(rng.normal(3000, 500, n // 2))]),
        "extremes alternating": np.tile([-IN_LIM, IN_LIM], n // 2),
        "constant": np.full(n, 5555),
    }


@pytest.mark.parametrize("name", sorted(_streams()))
def test_mean_exact_and_variance_within_one_unit(name):
    x = np.clip(_streams()[name], -IN_LIM, IN_LIM).astype(int)
    w = Welford(1)
    for v in x.tolist():
        w.add(0, v)
    # the mean is exact: mi + mr / n == sum / n (Fraction is exact rational arithmetic)
    assert Fraction(w.mi[0] * w.n[0] + w.mr[0], w.n[0]) == Fraction(int(x.sum()), len(x))
    assert w.mean_q(0, 4) == (int(x.sum()) * 16) // len(x)
    # reference: numpy.var (population, ddof=0) and statistics.pvariance agree with each other
    ref = float(np.var(x))
    assert statistics.pvariance(x.tolist()) == pytest.approx(ref, rel=1e-9, abs=1e-9)
    # each update rounds the cross term to a whole unit squared: error within 1 unit squared
    assert abs(w.var(0) - ref) <= 1.0 + 1e-9 * ref


def test_channels_are_independent_and_count_saturates():
    rng = np.random.default_rng(2)
    a = rng.integers(-100, 100, 500).tolist()
    b = rng.integers(2000, 2100, 300).tolist()
    w = Welford(2)
    for v in a:
        w.add(0, v)
    for v in b:
        w.add(1, v)
    assert (w.n[0], w.n[1]) == (500, 300)
    assert abs(w.var(0) - np.var(a)) <= 1 and abs(w.var(1) - np.var(b)) <= 1
    w.n[0] = N_MAX
    w.add(0, 8000)
    assert w.n[0] == N_MAX
    w.reset()
    assert w.n[0] == 0 and w.mean_q(0, 4) == 0
