"""Physical units for reporting: the device's integer features times the sensor calibration.

Only here do floats meet features; the device path never sees them. m_s2_per_count is the
acceleration of one converter count (from the recording's sidecar or the board profile).
"""
from __future__ import annotations

from firmware_py.dsp import feature_index as fi

STANDARD_GRAVITY_M_S2 = 9.80665   # ISO 80000-3 standard acceleration of free fall


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
    import math
    if log2_q8 <= fi.LOG2_ZERO_Q8:
        return float("-inf")
    return 10.0 * math.log10(2.0) * (log2_q8 / (1 << fi.Q_LOG2)) + 20.0 * math.log10(m_s2_per_count)
