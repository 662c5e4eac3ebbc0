"""Adversarial and random test windows for the feature core (int16 counts)."""
import numpy as np

FULL = 32767
NEG = -32768


def adversarial(n, seed=0):
    """Named windows that push every intermediate to its bound."""
    rng = np.random.default_rng(seed)
    i = np.arange(n)
    out = {
        "dc_full_pos": np.full(n, FULL),
        "dc_full_neg": np.full(n, NEG),
        "square_full": np.where(i % 2, FULL, NEG),                     # Nyquist at full scale
        "square_clipped_slow": np.where((i // 16) % 2, FULL, NEG),
        "impulse_neg": np.where(i == n // 3, NEG, 0),
        "impulse_pos_on_neg_dc": np.where(i == 7, FULL, NEG),             # x - mean reaches 65535
        "impulse_neg_on_pos_dc": np.where(i == n - 1, NEG, FULL),
        "white_full": rng.integers(NEG, FULL + 1, n),
        "sine_clipped": np.clip(np.round(60000 * np.sin(2 * np.pi * 5 * i / n)), NEG, FULL),
        "tiny": rng.integers(-1, 2, n),
        "one_lsb_step": np.where(i < n // 2, 0, 1),
        "ramp_full": np.round(np.linspace(NEG, FULL, n)),
        "two_level_dc": np.where(i < 3, FULL, -5),
    }
    return {k: v.astype(np.int16) for k, v in out.items()}


def random_windows(n, count, seed):
    """Random mixes of tones, noise, DC, spikes and clipping at random levels."""
    rng = np.random.default_rng(seed)
    t = np.arange(n)
    ws = []
    for _ in range(count):
        level = 10 ** rng.uniform(0, 5)
        x = rng.normal(0, level * rng.uniform(0, 1), n)
        for _ in range(rng.integers(0, 4)):
            x += level * rng.uniform(0, 2) * np.sin(2 * np.pi * rng.uniform(0, 0.5) * t + rng.uniform(0, 6.3))
        x += rng.uniform(-1, 1) * 30000 * (rng.random() < 0.3)
        if rng.random() < 0.3:
            x[rng.integers(0, n, 3)] = rng.choice([NEG, FULL])
        ws.append(np.clip(np.round(x), NEG, FULL))
    return np.array(ws, dtype=np.int16)
