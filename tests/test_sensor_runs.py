"""Longest run of identical samples (F_STUCK) and of zeros (F_ZERO) against a plain numpy
run-length encoding, on sensor dropouts of every kind (runs of zeros, the last value repeated,
at the window's edges, whole windows)."""
import numpy as np

from firmware_py.dsp import feature_index as fi
from host_tools.twin.feature_twin import FeatureTwin, TwinConfig
from tests.feature_helpers import device_features
from tests.signals import adversarial

N = 256


def _rle(w):
    """(values, lengths) of the runs of w: boundaries where the value changes (numpy)."""
    edges = np.flatnonzero(np.diff(w)) + 1
    starts = np.concatenate(([0], edges))
    lengths = np.diff(np.concatenate((starts, [w.size])))
    return w[starts], lengths


def _expected(w):
    v, ln = _rle(w)
    return ln.max(), (ln[v == 0].max() if (v == 0).any() else 0)


def _dropout_windows(rng):
    out = []
    for _ in range(60):
        w = np.round(rng.normal(0, rng.choice([1.0, 30.0, 3000.0]), N)).astype(np.int64)
        for _ in range(rng.integers(0, 4)):
            a = int(rng.integers(0, N))
            b = min(N, a + int(rng.integers(1, N)))
            if rng.random() < 0.5:
                w[a:b] = 0                          # dropout to zero
            else:
                w[a:b] = w[a]                       # the last value held
        out.append(w)
    out.append(np.zeros(N, dtype=np.int64))                      # all zero
    out.append(np.full(N, -7, dtype=np.int64))                   # stuck at a value
    out.append(np.where(np.arange(N) < 5, 0, 9))                 # zeros at the start
    out.append(np.where(np.arange(N) >= N - 5, 0, -3))           # zeros at the end
    out.append(np.where(np.arange(N) % 2, 0, 1))                 # isolated zeros
    return [np.clip(w, -32768, 32767).astype(np.int16) for w in out]


def test_runs_against_numpy_run_lengths():
    rng = np.random.default_rng(12)
    wins = _dropout_windows(rng) + list(adversarial(N).values())
    f, _ = device_features(np.concatenate(wins), n=N, fs=3200, vel=(10, 1000))
    twin = FeatureTwin(TwinConfig(n=N, fs_hz=3200, adc_min=-32768, adc_max=32767)).features(
        np.concatenate(wins))
    for i, w in enumerate(wins):
        stuck, zero = _expected(w)
        assert f[i, fi.F_STUCK] == stuck, i
        assert f[i, fi.F_ZERO] == zero, i
    assert np.array_equal(f, twin)
