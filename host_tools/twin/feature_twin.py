"""The numpy twin of the device feature stage: the same integer arithmetic, over all windows at once.

firmware_py.dsp.features is the truth; this module must give bit-identical features for every window,
which the tests prove against it under CPython and under a real MicroPython. Every elementwise
operation below mirrors one line of firmware_py (features._axis, fft.cfft, fft.spectrum,
features._finish, fixmath); all values stay below 2**30 in magnitude there, so int32 holds the
elementwise stages exactly and int64 the sums and the wider exact divisions.

Windows are consecutive, non-overlapping runs of n samples from the start of the recording, as
the device's ring delivers them.

Entry points: TwinConfig, FeatureTwin.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from firmware_py.dsp import fft, tables
from firmware_py.dsp.feature_index import (
    F_BAND0, F_CLIP, F_CREST, F_KURT, F_MEAN, F_PEAK, F_RMS, F_VEL, LOG2_ZERO_Q8, per_axis)
from firmware_py.dsp.features import Y_BITS, check_config
from firmware_py.dsp.fixmath import log2_q8


@dataclass
class TwinConfig:
    """What the device's FeatureCore is built from (same meaning as its constructor)."""
    n: int
    fs_hz: int
    adc_min: int
    adc_max: int
    bands: tuple = ()
    vel_lo_hz: int = 10
    vel_hi_hz: int = 1000


class FeatureTwin:
    """Vectorised FeatureCore: features(counts) -> int32 array (windows, axes * per_axis)."""

    def __init__(self, cfg: TwinConfig, axes: int = 1):
        check_config(cfg.n, axes, cfg.fs_hz, cfg.bands, cfg.vel_lo_hz, cfg.vel_hi_hz)
        self.cfg = cfg
        self.axes = axes
        n = cfg.n
        self.n = n
        self.m = n // 2
        self.L = n.bit_length() - 1
        cos_t, sin_t = tables.twiddles(n)           # the device's own tables, built the same way
        self.cos = np.array(cos_t, dtype=np.int32)
        self.sin = np.array(sin_t, dtype=np.int32)
        self.hann_q15 = np.array(tables.hann(n, cos_t), dtype=np.int32)
        self.pos = np.array(tables.bitrev_positions(n), dtype=np.intp)
        self.log2_q15 = np.array(tables.log2_table(), dtype=np.int64)
        vm, vs, self.vel_exp = tables.velocity_weights(n, cfg.fs_hz, cfg.vel_lo_hz, cfg.vel_hi_hz)
        self.vmant = np.array(vm, dtype=np.int32)
        self.vsh2 = np.array(vs, dtype=np.int32)
        self.stages = self._stage_twiddles(fft.radix4_twiddles(self.m, cos_t, sin_t))
        self.log2_4_3_q8 = 512 - log2_q8(3, tables.log2_table())
        self.per = per_axis(len(cfg.bands))

    # --- set-up -------------------------------------------------------------------------------

    def _stage_twiddles(self, tw):
        """Split fft.radix4_twiddles' flat table into (h, w2, w1, w3) per stage, each w an
        (cos, sin) pair of int32 arrays over j = 0..h-1."""
        tw = np.array(tw, dtype=np.int32).reshape(-1, 6)
        out, t = [], 0
        h = 2 if fft._odd_log2(self.m) else 1
        while h < self.m:
            rows = tw[t:t + h]
            t += h
            out.append((h, (rows[:, 0], rows[:, 1]), (rows[:, 2], rows[:, 3]), (rows[:, 4], rows[:, 5])))
            h *= 4
        return out

    # --- the feature stage --------------------------------------------------------------------

    def windows(self, counts: np.ndarray) -> int:
        return counts.shape[0] // self.n

    def features(self, counts: np.ndarray, keep_power: bool = False):
        """counts: int16 (frames, axes). Returns feats (windows, axes*per) int32, and with
        keep_power also the power spectra (windows, axes, m+1) int32."""
        counts = np.asarray(counts)
        if counts.ndim == 1:
            counts = counts[:, None]
        if counts.shape[1] != self.axes:
            raise ValueError(f"expected {self.axes} axes, got {counts.shape[1]}")
        w = self.windows(counts)
        feats = np.zeros((w, self.axes * self.per), dtype=np.int32)
        power = np.zeros((w, self.axes, self.m + 1), dtype=np.int32) if keep_power else None
        for a in range(self.axes):
            x = counts[: w * self.n, a].astype(np.int32).reshape(w, self.n)
            p = self._axis(x, feats[:, a * self.per:(a + 1) * self.per])
            if keep_power:
                power[:, a] = p
        return (feats, power) if keep_power else feats

    def mean_square_per_bin(self, feats, power):
        """Spectra from features(keep_power=True) as mean square per bin, counts**2, shape
        (windows, axes, m+1): one-sided and Hann-normalised, the scale of the band powers (a
        band's mean square is the sum over its bins; white noise reads PSD * bin width). The
        window's normalisation 2**u is undone from its F_PEAK; a flat window reads zero."""
        pk = feats[:, F_PEAK::self.per][:, : self.axes].astype(np.int64) >> 8
        u = np.where(pk > 0, Y_BITS - _msb(np.maximum(pk, 1)), 0)
        return power.astype(np.float64) * np.exp2(-2.0 * u)[..., None] * (4.0 / 3.0)

    def _axis(self, x, f):
        n, L, cfg = self.n, self.L, self.cfg
        s = x.sum(axis=1, dtype=np.int64)
        mx = x.max(axis=1).astype(np.int64)
        mn = x.min(axis=1).astype(np.int64)
        mean = (s + (n >> 1)) >> L
        pk = np.maximum(mx - mean, mean - mn)
        clip = ((x >= cfg.adc_max) | (x <= cfg.adc_min)).sum(axis=1)
        f[:, F_MEAN] = (s + (1 << (L - 9)) >> (L - 8)) if L > 8 else s << (8 - L)
        f[:, F_PEAK] = pk << 8
        f[:, F_CLIP] = clip
        live = pk > 0
        u = np.where(live, Y_BITS - _msb(np.maximum(pk, 1)), 0)
        g = (1 << np.maximum(u, 0)).astype(np.int32)
        sh = np.maximum(-u, 0).astype(np.int32)
        y = ((x - mean[:, None].astype(np.int32)) * g[:, None]) >> sh[:, None]
        yy = y * y
        sq = (yy >> (L - 1)).sum(axis=1, dtype=np.int64)
        r = (yy + 8192) >> 14
        s4 = ((r * r) >> L).sum(axis=1, dtype=np.int64)
        buf = np.empty_like(y)
        buf[:, self.pos] = (y * self.hann_q15) >> 15
        re, im = self._cfft(buf[:, 0::2].copy(), buf[:, 1::2].copy())
        p, vs = self._spectrum(re, im)
        self._finish(f, pk, u, g.astype(np.int64), sh.astype(np.int64), sq, s4, vs, p)
        # a flat window: no spectrum, zero features (features._flat)
        dead = ~live
        if dead.any():
            f[dead, F_RMS] = 0
            f[dead, F_CREST] = 0
            f[dead, F_KURT] = 0
            f[dead, F_VEL] = 0
            f[dead, F_BAND0:] = LOG2_ZERO_Q8
            p[dead] = 0
        return p

    def _cfft(self, re, im):
        """fft.cfft over all windows: re, im (windows, m) in bit-reversed order."""
        wn, m = re.shape
        if fft._odd_log2(m):
            r2, i2 = re.reshape(wn, m // 2, 2), im.reshape(wn, m // 2, 2)
            ur, ui, xr, xi = r2[:, :, 0], i2[:, :, 0], r2[:, :, 1], i2[:, :, 1]
            re = np.stack(((ur + xr) >> 1, (ur - xr) >> 1), axis=2).reshape(wn, m)
            im = np.stack(((ui + xi) >> 1, (ui - xi) >> 1), axis=2).reshape(wn, m)
        for h, (w2r, w2i), (w1r, w1i), (w3r, w3i) in self.stages:
            r4 = re.reshape(wn, m // (4 * h), 4, h)
            i4 = im.reshape(wn, m // (4 * h), 4, h)
            xr, xi = r4[:, :, 1], i4[:, :, 1]
            br = (w2r * xr + w2i * xi) >> 15
            bi = (w2r * xi - w2i * xr) >> 15
            xr, xi = r4[:, :, 2], i4[:, :, 2]
            cr = (w1r * xr + w1i * xi) >> 15
            ci = (w1r * xi - w1i * xr) >> 15
            xr, xi = r4[:, :, 3], i4[:, :, 3]
            dr = (w3r * xr + w3i * xi) >> 15
            di = (w3r * xi - w3i * xr) >> 15
            ar, ai = r4[:, :, 0], i4[:, :, 0]
            s0r, s0i, s1r, s1i = ar + br, ai + bi, ar - br, ai - bi
            s2r, s2i, s3r, s3i = cr + dr, ci + di, cr - dr, ci - di
            re = np.stack(((s0r + s2r) >> 2, (s1r + s3i) >> 2, (s0r - s2r) >> 2, (s1r - s3i) >> 2),
                          axis=2).reshape(wn, m)
            im = np.stack(((s0i + s2i) >> 2, (s1i - s3r) >> 2, (s0i - s2i) >> 2, (s1i + s3r) >> 2),
                          axis=2).reshape(wn, m)
        return re, im

    def _spectrum(self, re, im):
        """fft.spectrum over all windows: power (windows, m+1) int32 and weighted sum (int64)."""
        m = self.m
        hm = m // 2
        wn = re.shape[0]
        p = np.empty((wn, m + 1), dtype=np.int32)
        vmant, vsh2 = self.vmant, self.vsh2
        zr, zi = re[:, 0], im[:, 0]
        x0 = zr + zi
        xm = zr - zi
        p[:, 0] = x0 * x0
        p[:, m] = xm * xm
        v = (xm * vmant[m]) >> 15
        vs = ((v * v) >> vsh2[m]).astype(np.int64)
        k = np.arange(1, hm)
        ar, ai, br, bi = re[:, k], im[:, k], re[:, m - k], im[:, m - k]
        er, ei = (ar + br) >> 1, (ai - bi) >> 1
        orr, oi = (ar - br) >> 1, (ai + bi) >> 1
        wr, wi = self.cos[k], self.sin[k]
        tr = (wr * orr + wi * oi) >> 15
        ti = (wr * oi - wi * orr) >> 15
        for xr, xi, kk in ((er + ti, ei - tr, k), (er - ti, ei + tr, m - k)):
            p[:, kk] = xr * xr + xi * xi
            g = vmant[kk]
            vr, vi = (xr * g) >> 15, (xi * g) >> 15
            vs += ((vr * vr + vi * vi) >> vsh2[kk]).sum(axis=1, dtype=np.int64)
        ar, ai = re[:, hm], im[:, hm]
        p[:, hm] = ar * ar + ai * ai
        g = vmant[hm]
        vr, vi = (ar * g) >> 15, (ai * g) >> 15
        vs += (vr * vr + vi * vi) >> vsh2[hm]
        return p, vs

    def _finish(self, f, pk, u, g, sh, sq, s4, vs, p):
        """features._finish over all windows (zero-peak windows are overwritten by the caller)."""
        sq1 = np.maximum(sq, 1)
        f[:, F_RMS] = _sqrt_pow2(sq, 15 - 2 * u)
        rms_y_q8 = _sqrt_pow2(sq, np.full_like(sq, 15))
        f[:, F_CREST] = ((pk * g) >> sh << 20) // np.maximum(rms_y_q8, 1)
        f[:, F_KURT] = (((s4 << 21) // sq1) << 21) // sq1
        f[:, F_VEL] = _sqrt_pow2(vs, 62 - 2 * self.vel_exp - 2 * u)
        c = self.log2_4_3_q8 - 512 * u
        for b, (lo, hi) in enumerate(self.cfg.bands):
            ps = p[:, lo:hi].sum(axis=1, dtype=np.int64)
            f[:, F_BAND0 + b] = np.where(ps > 0, _log2_q8(np.maximum(ps, 1), self.log2_q15) + c,
                                         LOG2_ZERO_Q8)


# --- fixmath, vectorised: each gives exactly what its firmware_py.dsp.fixmath namesake gives ---------

def _msb(x):
    """fixmath.msb for positive int64 arrays (< 2**53: frexp is exact there)."""
    return (np.frexp(x.astype(np.float64))[1] - 1).astype(np.int64)


def _isqrt(x):
    """Exact floor(sqrt(x)) for int64 arrays 0 <= x < 2**52 (fixmath.isqrt is exact too)."""
    r = np.floor(np.sqrt(x.astype(np.float64))).astype(np.int64)
    r = np.where(r * r > x, r - 1, r)
    return np.where((r + 1) * (r + 1) <= x, r + 1, r)


def _sqrt_pow2(s, e):
    """fixmath.sqrt_pow2 over arrays (s int64 >= 0, e int64)."""
    s = np.asarray(s, dtype=np.int64)
    e = np.asarray(e, dtype=np.int64)
    pos = s > 0
    k = 28 - _msb(np.maximum(s, 1))
    k = np.where((e - k) & 1, k - 1, k)
    v = np.where(k >= 0, s << np.maximum(k, 0), s >> np.maximum(-k, 0))
    r = _isqrt(v)
    h = (e - k) >> 1
    out = np.where(h >= 0, r << np.maximum(h, 0),
                   (r + (1 << np.maximum(-h - 1, 0))) >> np.maximum(-h, 0))
    return np.where(pos, out, 0)


def _log2_q8(x, table_q15):
    """fixmath.log2_q8 over int64 arrays (0 < x < 2**30)."""
    e = _msb(x)
    sh = e - 15
    m = np.where(sh >= 0, x >> np.maximum(sh, 0), x << np.maximum(-sh, 0)) & 32767
    i = m >> 7
    fr = m & 127
    t0 = table_q15[i]
    lin = t0 + (((table_q15[i + 1] - t0) * fr) >> 7)
    return (e << 8) + ((lin + 64) >> 7)
