"""Operating-mode model: features brought to a common log scale, standardised against the
baseline, and scored by the distance to the nearest mode in units of that mode's spread.

Scales (all ints):
  u  transformed feature, log2 Q8 (256 per octave), clamped to +-U_LIM
  z  standardised feature, Q8 baseline spreads (256 = one baseline standard deviation), +-Z_LIM
  centroids c_q8 in z units (Q8); per-mode spreads s_q8 in z units (Q8, floored when built);
  both within +-Z_LIM, so they are kept as int16
  distance: sqrt(sum_j ((z_j - c_mj) / s_mj)**2), Q8 mode spreads (a diagonal Mahalanobis distance)
  zmax: max_j (z_j - c_mj) / s_mj, Q8 mode spreads (the per-feature channel: rises only)
  t_q8[j]: the per-feature departures of the last distance(), each within [-768, 32767]
  terms below the mode count at most 3 spreads (ModeModel.distance)

  follow slopes: Q8 octaves of u per octave of the shaft speed (follow())

Entry points: is_log_field(), footprint_bytes(), ModeModel, clamp(), transform(), range_ref_q8(),
speed_offset_q8(), follow()."""
from array import array
from micropython import const
from firmware_py.dsp import feature_index as fi
from firmware_py.dsp.fixmath import log2_q8, sqrt_pow2

KMAX = const(8)          # most operating modes a model holds
DMAX = const(64)         # most features a model uses: keeps the sum of squares under 2**28
U_LIM = const(8191)      # |u| bound: log2 in [-32, 32) octaves; a band of zero power clamps here
Z_LIM = const(8191)      # |z| bound, 32 baseline spreads
_D_LIM = const(32767)    # |(z - c) / s| bound, Q8: 128 spreads, so its square is < 2**30
_NEG_LIM = const(768)    # a term below the mode counts at most 3 spreads (distance())


def is_log_field(field):
    """True for the per-axis fields compared on a log2 scale (magnitudes: r.m.s., peak, crest,
    kurtosis, velocity); band powers are log2 already; mean and clip count stay linear."""
    return field == fi.F_RMS or field == fi.F_PEAK or field == fi.F_CREST or \
        field == fi.F_KURT or field == fi.F_VEL


def footprint_bytes(d):
    """Heap bytes of the arrays of ModeModel(d): mean_q4, sd_q4 and t_q8 of d ints, c_q8 and s_q8
    of d int16 for each of KMAX modes (object headers are extra)."""
    return 4 * d * 3 + 2 * 2 * d * KMAX


class ModeModel:
    """Baseline (mean_q4, sd_q4 per feature: Q4 of log2-Q8 units) and k <= KMAX modes."""

    def __init__(self, d):
        self.d = d
        self.k = 0
        z = bytes(4 * d)
        self.mean_q4 = array("i", z)
        self.sd_q4 = array("i", z)
        self.c_q8 = array("h", bytes(2 * d * KMAX))   # within +-Z_LIM (load, learning)
        self.s_q8 = array("h", bytes(2 * d * KMAX))
        self.mode = -1         # nearest mode of the last score(), -1 if no model
        self.drive = -1        # index j (0..d-1) of the feature that contributed most, -1 none
        self.zmax_q8 = 0       # largest single-feature |z - c| / s of the last distance(), Q8
        self.t_q8 = array("i", z)  # per feature (z - c) / s of the last distance(), clamped, Q8

    def load(self, mean_q4, sd_q4, k, c_q8, s_q8, sd_floor_q4, s_floor_q8):
        """Fill from parameter lists, flooring the spreads. Start-up only."""
        d = self.d
        if len(mean_q4) != d or len(sd_q4) != d or not 0 <= k <= KMAX or \
                len(c_q8) != k * d or len(s_q8) != k * d:
            raise ValueError("detector model lists do not match det_feat and det_modes")
        for j in range(d):
            self.mean_q4[j] = clamp(mean_q4[j], U_LIM << 4)
            self.sd_q4[j] = min(max(sd_q4[j], sd_floor_q4), U_LIM << 4)
        for i in range(k * d):
            self.c_q8[i] = clamp(c_q8[i], Z_LIM)
            self.s_q8[i] = min(max(s_q8[i], s_floor_q8), Z_LIM)
        self.k = k

    def standardise(self, u, z):
        """z[j] = (u[j] - mean) / sd, Q8 spreads, clamped to +-Z_LIM.

        mean_q4 may sit up to 4 spreads past U_LIM << 4 after drift, so the shifted difference
        stays under 2**28."""
        for j in range(self.d):
            z[j] = clamp((((u[j] << 4) - self.mean_q4[j]) << 8) // self.sd_q4[j], Z_LIM)

    def nearest(self, z):
        """The mode whose centroid is nearest to z in its own spreads (-1 if k == 0): the legacy
        choice for a model without operating points (a set learned without a speed estimate)."""
        d = self.d
        best = -1
        best_m = -1
        for m in range(self.k):
            b = m * d
            s = 0
            for j in range(d):
                t = clamp(((z[j] - self.c_q8[b + j]) << 8) // self.s_q8[b + j], _D_LIM)
                s += (t * t) >> 8
            if best < 0 or s < best:
                best = s
                best_m = m
        return best_m

    def distance(self, z, m):
        """Distance of z to mode m, Q8 mode spreads; sets mode, drive and zmax_q8 (the largest
        single-feature rise (z - c) / s, Q8 mode spreads: the per-feature channel).

        One-sided: a term below the mode counts at most _NEG_LIM (3 spreads). Every fault watched
        raises its lines (1x, 2x, 0.5x, envelope, broadband); a line that sinks into the noise
        floor is no symptom, and the log of a noise-level power has a long lower tail (log of a
        chi-square with few degrees of freedom) that would otherwise dominate healthy scores.
        Each term is within [-_NEG_LIM, _D_LIM], its square >> 8 is < 2**22, and the sum over
        d <= 64 terms (Q8 spreads squared) stays < 2**28. zmax_q8 is 0 when nothing rises. The
        clamped terms are kept in t_q8 (the detector's slow channel averages them).
        """
        d = self.d
        b = m * d
        s = 0
        top = 0
        self.drive = 0
        for j in range(d):
            t = ((z[j] - self.c_q8[b + j]) << 8) // self.s_q8[b + j]
            t = _D_LIM if t > _D_LIM else (-_NEG_LIM if t < -_NEG_LIM else t)
            self.t_q8[j] = t
            s += (t * t) >> 8
            if t > top:
                top = t
                self.drive = j
        self.mode = m
        self.zmax_q8 = top
        return sqrt_pow2(s, 8)


def clamp(x, lim):
    """x limited to [-lim, lim]."""
    if x > lim:
        return lim
    if x < -lim:
        return -lim
    return x


def transform(feats, idx, logf, u, d, tab):
    """u[j] = log2 Q8 of feats[idx[j]] (values < 1 taken as 1) where logf[j], else feats[idx[j]];
    clamped to +-U_LIM. tab: tables.log2_table()."""
    for j in range(d):
        x = feats[idx[j]]
        if logf[j]:
            x = log2_q8(x if x > 1 else 1, tab)
        u[j] = clamp(x, U_LIM)


# |slope| bound, Q8: 64 octaves of a level per octave of speed. A whole-window level follows at
# 2-4 (a power law), but a band whose edge a line's lobe straddles can swing 5 dB over a 3 % trim,
# some 20 octaves per octave (docs/detector.md); int16 holds it
FOLLOW_MAX = const(16384)
_DL_LIM = const(256)      # |log2 speed - reference| bound, Q8: one octave


def range_ref_q8(lo_q8, hi_q8, tab):
    """A mode's reference speed for follow(): log2 Q8 of the centre of its speed range [lo, hi]
    (Hz Q8, each under 2**30, halved before the sum so it stays a small int)."""
    c = (lo_q8 >> 1) + (hi_q8 >> 1)
    return log2_q8(c if c > 1 else 1, tab)


def speed_offset_q8(speed_q8, ref_q8, tab):
    """log2 of the speed (Hz Q8) less a mode's reference (log2 of its range centre, the same
    units), log2 Q8, clamped to one octave: a mode's range spans far less."""
    return clamp(log2_q8(speed_q8 if speed_q8 > 1 else 1, tab) - ref_q8, _DL_LIM)


def follow(u, slope_q8, off, dl_q8, d):
    """Bring each level to the mode's reference speed: u[j] -= slope_q8[off + j] * dl (log2 Q8),
    clamped to +-U_LIM (off: where the slopes in use start, 0 or a mode's m * d). slope_q8
    within +-FOLLOW_MAX and dl within +-_DL_LIM, so the product < 2**22."""
    for j in range(d):
        s = slope_q8[off + j]
        if s:
            u[j] = clamp(u[j] - ((s * dl_q8) >> 8), U_LIM)
