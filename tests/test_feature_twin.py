"""The numpy twin is bit-identical to firmware_py (under CPython) on every feature and power bin."""
import numpy as np
from hypothesis import HealthCheck, given, settings, strategies as st

from firmware_py.dsp import feature_index as fi
from host_tools.twin.feature_twin import FeatureTwin, TwinConfig
from tests.feature_helpers import device_features
from tests.signals import adversarial, random_windows

BEAR = (14684, 22180, 9655, 1631)      # a 6205's BPFO, BPFI, BSF, FTF orders, Q12 (test_bearing)
CONFIGS = [
    dict(n=64, fs=1000, bands=((1, 4), (4, 32)), adc=(-32768, 32767), vel=(2, 400)),
    dict(n=512, fs=3200, bands=((2, 9), (9, 40), (40, 256)), adc=(-32768, 32767), vel=(10, 1000)),
    dict(n=1024, fs=26667, bands=((1, 100),), adc=(-2048, 2047), vel=(10, 1000)),
    dict(n=2048, fs=6667, bands=(), adc=(-32768, 32767), vel=(10, 1000)),
    # with speed, orders and envelope: every new stage on every path
    dict(n=64, fs=1000, bands=((1, 4),), adc=(-32768, 32767), vel=(2, 400), speed=(50 * 256, 70 * 256),
         vane=2, env_band=(10, 26), bear=(10240, 11469, 6144, 1638)),
    dict(n=512, fs=3200, bands=((2, 9), (40, 256)), adc=(-32768, 32767), vel=(10, 1000),
         speed=(20 * 256, 60 * 256), vane=6, env_band=(100, 200), bear=BEAR),
    dict(n=1024, fs=26667, bands=((1, 100),), adc=(-2048, 2047), vel=(10, 1000),
         speed=(80 * 256, 400 * 256), vane=5, env_band=(200, 456), bear=BEAR),
    dict(n=2048, fs=6667, bands=(), adc=(-32768, 32767), vel=(10, 1000), speed=(12 * 256, 22 * 256),
         vane=7, env_band=(600, 1024), bear=BEAR),
    # a range from the estimator's floor of 2 bins (12.5 Hz), where the 1x peak search is cut at bin 1
    dict(n=512, fs=3200, bands=((2, 9), (40, 256)), adc=(-32768, 32767), vel=(10, 1000),
         speed=(3200, 20 * 256), vane=7, env_band=(100, 200), bear=BEAR, pump_hz=13.0),
]


def _both(x, cfg, axes=1):
    opts = dict(speed=cfg.get("speed", (0, 0)), vane=cfg.get("vane", 0),
                env_band=cfg.get("env_band", ()), bear_q12=cfg.get("bear", ()))
    dev, fc = device_features(x, n=cfg["n"], fs=cfg["fs"], bands=cfg["bands"], adc=cfg["adc"],
                              vel=cfg["vel"], **opts)
    tw = FeatureTwin(TwinConfig(n=cfg["n"], fs_hz=cfg["fs"], adc_min=cfg["adc"][0],
                                adc_max=cfg["adc"][1], bands=cfg["bands"], vel_lo_hz=cfg["vel"][0],
                                vel_hi_hz=cfg["vel"][1], speed_lo_q8=opts["speed"][0],
                                speed_hi_q8=opts["speed"][1], vane=opts["vane"],
                                env_band=opts["env_band"], bear_q12=opts["bear_q12"]), axes=axes)
    feats, power = tw.features(x, keep_power=True)
    return dev, feats, power, fc


def test_adversarial_windows_bit_identical():
    for cfg in CONFIGS:
        x = np.concatenate(list(adversarial(cfg["n"]).values()))
        dev, twin, power, fc = _both(x, cfg)
        assert np.array_equal(dev, twin), cfg
        assert np.array_equal(np.array(fc.p), power[-1, 0])   # spectrum of the last window


def test_pump_windows_with_every_stage_live_bit_identical():
    # harmonics in each config's speed range, a vane line, impacts ringing in the envelope band
    for cfg in CONFIGS[4:]:
        n, fs = cfg["n"], cfg["fs"]
        rng = np.random.default_rng(n)
        t = np.arange(8 * n) / fs
        f1 = cfg.get("pump_hz", (cfg["speed"][0] + cfg["speed"][1]) / 512) * (1 + 0.01 * np.sin(t))
        ph = 2 * np.pi * np.cumsum(f1) / fs
        x = 4000 * np.sin(ph) + 1500 * np.sin(2 * ph + 1) + 800 * np.sin(3 * ph) \
            + 600 * np.sin(cfg["vane"] * ph) + rng.normal(0, 300, t.size)
        res = (cfg["env_band"][0] + cfg["env_band"][1]) / 2 * fs / n
        impact = np.sin(2 * np.pi * res * t[:n // 8]) * np.exp(-np.arange(n // 8) / (n / 64))
        for k in range(0, t.size - n // 8, n // 11):
            x[k:k + n // 8] += 5000 * impact
        x = np.clip(np.round(x), -32768, 32767).astype(np.int16)
        dev, twin, _, _ = _both(x, cfg)
        assert np.array_equal(dev, twin), cfg
        assert np.all(dev[:, fi.F_SPEED] > 0)            # an estimate in every window
        if "pump_hz" in cfg:                             # the cut 1x search was taken
            assert np.any(dev[:, fi.F_SPEED] * n < 2.5 * fs * 256)


def test_random_windows_bit_identical_three_axes():
    for cfg in (CONFIGS[1], CONFIGS[5]):
        x = random_windows(cfg["n"], 3 * 10, seed=5).reshape(3, -1).T.copy()
        dev, twin, _, _ = _both(x, cfg, axes=3)
        assert np.array_equal(dev, twin)


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(seed=st.integers(0, 2**32 - 1), which=st.integers(0, len(CONFIGS) - 1))
def test_hypothesis_random_signals_bit_identical(seed, which):
    cfg = CONFIGS[which]
    x = random_windows(cfg["n"], 3, seed).ravel()
    dev, twin, _, _ = _both(x, cfg)
    assert np.array_equal(dev, twin)


@settings(max_examples=40, deadline=None)
@given(st.lists(st.integers(-32768, 32767), min_size=64, max_size=64))
def test_hypothesis_arbitrary_samples_bit_identical(samples):
    cfg = CONFIGS[0]
    x = np.array(samples, dtype=np.int16)
    dev, twin, _, _ = _both(x, cfg)
    assert np.array_equal(dev, twin)


def test_mean_square_per_bin_sums_to_a_tones_mean_square():
    # a sine of amplitude A has mean square A**2/2 (textbook identity); the Hann main lobe holds
    # all of it but for the side lobes' share (about 0.05 % beyond +-2 bins)
    n, A = 512, 3000.0
    x = np.round(A * np.sin(2 * np.pi * 16 * np.arange(4 * n) / n)).astype(np.int16)
    tw = FeatureTwin(TwinConfig(n=n, fs_hz=3200, adc_min=-32768, adc_max=32767))
    feats, power = tw.features(x, keep_power=True)
    ms = tw.mean_square_per_bin(feats, power)
    assert ms.shape == (4, 1, n // 2 + 1)
    lobe = ms[:, 0, 14:19].sum(axis=1)
    assert np.all(np.abs(lobe / (A * A / 2) - 1) < 2e-3)
