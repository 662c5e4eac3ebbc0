"""Physical units and names for reporting: the device's integer features times the sensor calibration.

Only here do floats meet features; the device path never sees them. m_s2_per_count is the
acceleration of one converter count (from the recording's sidecar or the board profile).

Entry points: m_s2_per_count(params), accel_m_s2, velocity_mm_s, velocity_q16, ratio,
band_power_db, band_hz(params, b), and feature_name(flat, params, axis_names): the one name of a
feature that the monitor, the replay (events, CSV, report) and the check all print.
"""
from __future__ import annotations

import math
from typing import Sequence

from firmware_py.dsp import feature_index as fi
from host_tools.errors import EdgevibError

STANDARD_GRAVITY_M_S2 = 9.80665   # ISO 80000-3 standard acceleration of free fall
FIELD_NAMES = {fi.F_MEAN: "mean", fi.F_RMS: "accel_rms", fi.F_PEAK: "peak", fi.F_CREST: "crest",
               fi.F_KURT: "kurtosis", fi.F_CLIP: "clipped", fi.F_VEL: "velocity_rms",
               fi.F_STUCK: "stuck_run", fi.F_ZERO: "zero_run", fi.F_SPEED: "speed",
               fi.F_SPEED_CONF: "speed_confidence", fi.F_ORD_HALF: "order_0.5x",
               fi.F_ORD_1X: "order_1x", fi.F_ORD_2X: "order_2x", fi.F_ORD_3X: "order_3x",
               fi.F_ORD_VANE: "order_vane_pass", fi.F_ENV_BPFO: "envelope_bpfo",
               fi.F_ENV_BPFI: "envelope_bpfi", fi.F_ENV_BSF: "envelope_bsf",
               fi.F_ENV_FTF: "envelope_ftf", fi.F_TAP_X1: "tap_1x_bins",
               fi.F_TAP_RE: "tap_0.5x_re", fi.F_TAP_RE + 1: "tap_0.5x_im",
               fi.F_TAP_RE + 2: "tap_1.5x_re", fi.F_TAP_RE + 3: "tap_1.5x_im",
               fi.F_TAP_RE + 4: "tap_2.5x_re", fi.F_TAP_RE + 5: "tap_2.5x_im",
               fi.F_HALF: "half_orders"}


def m_s2_per_count(params: dict) -> float:
    """Acceleration of one count (m/s^2) from the set's counts_per_g (ISO 80000-3 gravity)."""
    cpg = params.get("counts_per_g")
    if not isinstance(cpg, int) or isinstance(cpg, bool) or cpg <= 0:
        raise EdgevibError("the parameter set has no counts_per_g (sensor scale)")
    return STANDARD_GRAVITY_M_S2 / cpg


def band_hz(params: dict, b: int) -> tuple[float, float]:
    """Edges (Hz) of band b of the set: bins [lo, hi) of an n-point spectrum at fs_hz."""
    lo, hi = params["fc_bands"][b]
    df = params["fs_hz"] / params["n"]
    return lo * df, hi * df


def feature_name(flat: int, params: dict, axis_names: Sequence[str]) -> str:
    """Readable name of flat feature index `flat` (>= 0), e.g. "velocity_rms axis z", "band 50-100 Hz axis x"."""
    pa = fi.per_axis(len(params["fc_bands"]))
    a, f = divmod(flat, pa)
    axis = axis_names[a] if a < len(axis_names) else str(a)
    if f >= fi.F_BAND0:
        lo, hi = band_hz(params, f - fi.F_BAND0)
        return f"band {lo:g}-{hi:g} Hz axis {axis}"
    return f"{FIELD_NAMES[f]} axis {axis}"


def accel_m_s2(q8_counts: float, m_s2_per_count: float) -> float:
    """A Q8 counts feature (F_MEAN, F_RMS, F_PEAK) in m/s^2."""
    return q8_counts / (1 << fi.Q_RMS) * m_s2_per_count


def velocity_mm_s(vel_q16: float, m_s2_per_count: float) -> float:
    """F_VEL (counts/s, Q16) as velocity r.m.s. in mm/s."""
    return vel_q16 / (1 << fi.Q_VEL) * m_s2_per_count * 1000.0


def velocity_q16(mm_s: float, m_s2_per_count: float) -> int:
    """The F_VEL value that a velocity of mm_s (r.m.s.) reads as: for thresholds sent to the device."""
    return int(round(mm_s / 1000.0 / m_s2_per_count * (1 << fi.Q_VEL)))


def ratio(q12: float) -> float:
    """A Q12 feature (F_CREST, F_KURT) as a plain number."""
    return q12 / (1 << fi.Q_KURT)


def band_power_db(log2_q8: float, m_s2_per_count: float) -> float:
    """A band power feature (log2 of counts^2, Q8) in dB re 1 (m/s^2)^2."""
    if log2_q8 <= fi.LOG2_ZERO_Q8:
        return float("-inf")
    return 10.0 * math.log10(2.0) * (log2_q8 / (1 << fi.Q_LOG2)) + 20.0 * math.log10(m_s2_per_count)
