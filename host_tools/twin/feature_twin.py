"""The numpy twin of the device feature stage: the same integer arithmetic, over all windows at once.

firmware_py.dsp.features is the truth; this module must give bit-identical features for every window,
which the tests prove against it under CPython and under a real MicroPython. Every elementwise
operation below mirrors one line of firmware_py (features._axis, fft.cfft, fft.spectrum,
features._finish, speed, orders, envelope, fixmath); all values stay below 2**30 in magnitude
there, so int32 holds the elementwise stages exactly and int64 the sums and the wider exact
divisions (fixmath.mul_shift and div_pow2 are exact floors, so a plain int64 product and floor
division give the same bits).

Windows are consecutive, non-overlapping runs of n samples from the start of the recording, as
the device's ring delivers them. Each window's features depend on its own samples, except its
half-order taps (firmware_py/dsp/half_taps.py), which also read the window before, mixed at the
speed its 1x's phase advanced by from the one before that: features() takes those LEAD_WINDOWS
as `lead` where a run continues one computed before (lead_after() keeps them), so that a stream
cut into chunks gives the same bits as one pass.

Entry points: LEAD_WINDOWS, TwinConfig, FeatureTwin.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from firmware_py.dsp import envelope, fft, half_taps, orders, speed, tables
from firmware_py.dsp.feature_index import (
    F_BAND0, F_CLIP, F_CREST, F_ENV_BPFO, F_ENV_FTF, F_HALF, F_KURT, F_MEAN, F_ORD_1X, F_ORD_2X,
    F_ORD_3X, F_ORD_HALF, F_ORD_VANE, F_PEAK, F_RMS, F_SPEED, F_SPEED_CONF, F_STUCK, F_TAP_RE,
    F_TAP_X1, F_VEL, F_ZERO, LOG2_ZERO_Q8, per_axis)
from firmware_py.dsp.features import Y_BITS, check_config
from firmware_py.dsp.fixmath import log2_q8


# Windows before a window that its features depend on: its tap's first half, summed in the window
# before at the speed from the one before that (half_taps)
LEAD_WINDOWS = 2


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
    speed_lo_q8: int = 0
    speed_hi_q8: int = 0
    vane: int = 0
    env_band: tuple = ()
    bear_q12: tuple = ()


class FeatureTwin:
    """Vectorised FeatureCore: features(counts) -> int32 array (windows, axes * per_axis)."""

    def __init__(self, cfg: TwinConfig, axes: int = 1):
        check_config(cfg.n, axes, cfg.fs_hz, cfg.bands, cfg.vel_lo_hz, cfg.vel_hi_hz,
                     cfg.speed_lo_q8, cfg.speed_hi_q8, cfg.vane, cfg.env_band, cfg.bear_q12)
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
        self.stages = self._stage_twiddles(fft.radix4_twiddles(self.m, cos_t, sin_t), self.m)
        self.log2_4_3_q8 = 512 - log2_q8(3, tables.log2_table())
        self.per = per_axis(len(cfg.bands))
        # speed.SpeedEstimator's range, quarter bins, and the bins its confidence sums
        self.speed_on = cfg.speed_hi_q8 > 0
        if self.speed_on:
            self.c_lo_q2 = speed.bins_q2(cfg.speed_lo_q8, n, cfg.fs_hz, True)
            self.c_hi_q2 = speed.bins_q2(cfg.speed_hi_q8, n, cfg.fs_hz, False)
            self.b_lo_q8 = speed.bins_q(cfg.speed_lo_q8, n, cfg.fs_hz, 8, True)
            self.b_hi_q8 = speed.bins_q(cfg.speed_hi_q8, n, cfg.fs_hz, 8, False)
            self.reach = (max(((self.c_lo_q2 + 2) >> 2) - 3, 0), ((3 * self.c_hi_q2 + 2) >> 2) + 4)
        # envelope.Envelope's set-up: M points, the window and bit-reversed slots at a stride
        self.env_on = len(cfg.env_band) == 2 and len(cfg.bear_q12) == 4 and cfg.speed_hi_q8 > 0
        if self.env_on:
            mz = envelope.points(n, cfg.fs_hz, cfg.env_band, cfg.bear_q12, cfg.speed_hi_q8)
            st = self.m // mz
            tw = fft.radix4_twiddles(mz, [cos_t[k * st] for k in range(mz + 1)],
                                     [sin_t[k * st] for k in range(mz + 1)])
            self.env_mz = mz
            self.env_stages = self._stage_twiddles(tw, mz)
            h = self.hann_q15[:: n // mz].astype(np.int64) >> 1
            self.w2_q14 = (h * h) >> 14
            self.w2sum_q14 = int(self.w2_q14.sum())
            self.cpos = self.pos[:: 2 * st] // 2          # bit-reversed slot of complex point c
            self.env_c_ms_q8 = 2048 - log2_q8(35, tables.log2_table())

    # --- set-up -------------------------------------------------------------------------------

    @staticmethod
    def _stage_twiddles(tw, m):
        """Split fft.radix4_twiddles' flat table for an m-point cfft into (h, w2, w1, w3) per
        stage, each w an (cos, sin) pair of int32 arrays over j = 0..h-1."""
        tw = np.array(tw, dtype=np.int32).reshape(-1, 6)
        out, t = [], 0
        h = 2 if fft._odd_log2(m) else 1
        while h < m:
            rows = tw[t:t + h]
            t += h
            out.append((h, (rows[:, 0], rows[:, 1]), (rows[:, 2], rows[:, 3]), (rows[:, 4], rows[:, 5])))
            h *= 4
        return out

    # --- the feature stage --------------------------------------------------------------------

    def windows(self, counts: np.ndarray) -> int:
        return counts.shape[0] // self.n

    def features(self, counts: np.ndarray, keep_power: bool = False, lead: np.ndarray | None = None,
                 follows: bool = True):
        """counts: int16 (frames, axes). Returns feats (windows, axes*per) int32, and with
        keep_power also the power spectra (windows, axes, m+1) int32. lead: whole windows just
        before counts, when the device processed them as the windows before the first (their
        features are not returned; the last LEAD_WINDOWS count); follows: False where the
        windows are not consecutive (taken one in every few, or spliced), so none follows the one
        before."""
        counts = np.asarray(counts)
        if counts.ndim == 1:
            counts = counts[:, None]
        if lead is not None:
            lead = np.asarray(lead)
            lead = lead[:, None] if lead.ndim == 1 else lead
            k = min(len(lead) // self.n, LEAD_WINDOWS)
            out = self.features(np.concatenate([lead[len(lead) - k * self.n:], counts]), keep_power, None,
                                follows)
            return (out[0][k:], out[1][k:]) if keep_power else out[k:]
        if counts.shape[1] != self.axes:
            raise ValueError(f"expected {self.axes} axes, got {counts.shape[1]}")
        w = self.windows(counts)
        feats = np.zeros((w, self.axes * self.per), dtype=np.int32)
        power = np.zeros((w, self.axes, self.m + 1), dtype=np.int32) if keep_power else None
        for a in range(self.axes):
            x = counts[: w * self.n, a].astype(np.int32).reshape(w, self.n)
            p = self._axis(x, feats[:, a * self.per:(a + 1) * self.per], follows)
            if keep_power:
                power[:, a] = p
        return (feats, power) if keep_power else feats

    def lead_after(self, lead: np.ndarray | None, counts: np.ndarray) -> np.ndarray:
        """The lead for the chunk after counts (whole windows, frames x axes) that followed lead:
        the last LEAD_WINDOWS windows of the two."""
        both = counts if lead is None else np.concatenate([lead, counts])
        return both[max(0, len(both) - LEAD_WINDOWS * self.n):]

    def mean_square_per_bin(self, feats, power):
        """Spectra from features(keep_power=True) as mean square per bin, counts**2, shape
        (windows, axes, m+1): one-sided and Hann-normalised, the scale of the band powers (a
        band's mean square is the sum over its bins; white noise reads PSD * bin width). The
        window's normalisation 2**u is undone from its F_PEAK; a flat window reads zero."""
        pk = feats[:, F_PEAK::self.per][:, : self.axes].astype(np.int64) >> 8
        u = np.where(pk > 0, Y_BITS - _msb(np.maximum(pk, 1)), 0)
        return power.astype(np.float64) * np.exp2(-2.0 * u)[..., None] * (4.0 / 3.0)

    def _axis(self, x, f, follows):
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
        f[:, F_STUCK], f[:, F_ZERO] = _runs(x)
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
        p, vs, xr, xi = self._spectrum(re, im)
        self._finish(f, pk, u, g.astype(np.int64), sh.astype(np.int64), sq, s4, vs, p)
        f1 = self._speed(p, f)
        self._orders(p, f1, self.log2_4_3_q8 - 512 * u, f)
        self._taps(x, mean, u, self._mixing(xr, xi, np.where(live, f1, 0), follows), follows, f)
        self._envelope(xr, xi, f1, f)
        f[:, F_HALF] = LOG2_ZERO_Q8
        # a flat window: no spectrum, zero features (features._flat)
        dead = ~live
        if dead.any():
            f[dead, F_RMS] = 0
            f[dead, F_CREST] = 0
            f[dead, F_KURT] = 0
            f[dead, F_VEL] = 0
            f[dead, F_SPEED] = 0
            f[dead, F_SPEED_CONF] = 0
            f[dead, F_ORD_HALF:F_ENV_FTF + 1] = LOG2_ZERO_Q8
            f[dead, F_TAP_X1:F_TAP_RE + 6] = 0
            f[dead, F_BAND0:] = LOG2_ZERO_Q8
            p[dead] = 0
        return p

    def _cfft(self, re, im, stages=None):
        """fft.cfft over all windows: re, im (windows, m) in bit-reversed order; stages from
        _stage_twiddles for that m (the window's own m-point FFT by default)."""
        wn, m = re.shape
        if fft._odd_log2(m):
            r2, i2 = re.reshape(wn, m // 2, 2), im.reshape(wn, m // 2, 2)
            ur, ui, xr, xi = r2[:, :, 0], i2[:, :, 0], r2[:, :, 1], i2[:, :, 1]
            re = np.stack(((ur + xr) >> 1, (ur - xr) >> 1), axis=2).reshape(wn, m)
            im = np.stack(((ui + xi) >> 1, (ui - xi) >> 1), axis=2).reshape(wn, m)
        for h, (w2r, w2i), (w1r, w1i), (w3r, w3i) in (self.stages if stages is None else stages):
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
        xre = np.zeros((wn, m + 1), dtype=np.int32)     # X[k], k = 0..m (fft.spectrum leaves it in buf)
        xim = np.zeros((wn, m + 1), dtype=np.int32)
        vmant, vsh2 = self.vmant, self.vsh2
        zr, zi = re[:, 0], im[:, 0]
        x0 = zr + zi
        xm = zr - zi
        xre[:, 0] = x0
        xre[:, m] = xm
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
        for xr, xi, kk, sg in ((er + ti, ei - tr, k, 1), (er - ti, ei + tr, m - k, -1)):
            xre[:, kk] = xr
            xim[:, kk] = sg * xi
            p[:, kk] = xr * xr + xi * xi
            g = vmant[kk]
            vr, vi = (xr * g) >> 15, (xi * g) >> 15
            vs += ((vr * vr + vi * vi) >> vsh2[kk]).sum(axis=1, dtype=np.int64)
        ar, ai = re[:, hm], im[:, hm]
        xre[:, hm] = ar
        xim[:, hm] = -ai
        p[:, hm] = ar * ar + ai * ai
        g = vmant[hm]
        vr, vi = (ar * g) >> 15, (ai * g) >> 15
        vs += (vr * vr + vi * vi) >> vsh2[hm]
        return p, vs, xre, xim

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


    def _speed(self, p, f):
        """speed.SpeedEstimator.run over all windows; returns 1x in bins Q8 (int64, 0: none)."""
        wn = p.shape[0]
        if not self.speed_on:
            f[:, F_SPEED] = 0
            f[:, F_SPEED_CONF] = 0
            return np.zeros(wn, dtype=np.int64)
        p = p.astype(np.int64)
        c = np.arange(self.c_lo_q2, self.c_hi_q2 + 1)
        s = np.zeros((wn, c.size), dtype=np.int64)
        for h in (2, 3):
            j = (h * c + 2) >> 2
            s += p[:, j - 1] + p[:, j] + p[:, j + 1]
        j = (c + 2) >> 2
        s = (s >> 1) + p[:, j - 1] + p[:, j] + p[:, j + 1]
        best = s.max(axis=1)
        cb = c[s.argmax(axis=1)]                    # first largest, as the device's strict >
        fq, pw = [], []
        rows = np.arange(wn)[:, None]
        for h in (1, 2, 3):
            ch = (h * cb + 2) >> 2
            # speed._harmonic's search: ch - 2 .. ch + 2, cut to start at bin 1 (a repeated last
            # bin never wins: the first largest is taken, as the device's strict >)
            cand = np.minimum(np.maximum(ch - 2, 1)[:, None] + np.arange(5), (ch + 2)[:, None])
            k = cand[rows[:, 0], p[rows, cand].argmax(axis=1)]
            top = p[rows[:, 0], k]
            lo = p[rows[:, 0], k - 1]
            hi = p[rows[:, 0], k + 1]
            pw.append(lo + top + hi)
            e = 28 - _msb(np.maximum(top, 1))
            a0 = _sqrt_pow2(top, e)
            a1 = _sqrt_pow2(np.where(hi >= lo, hi, lo), e)
            d = ((((2 * a1 - a0) << 9) // np.maximum(a1 + a0, 1)) + 1) >> 1
            fq.append(np.where(top == 0, k << 8, np.where(hi >= lo, (k << 8) + d, (k << 8) - d)))
        hs = np.where(pw[1] > pw[0], 2, 1)
        hs = np.where(pw[2] > np.choose(hs - 1, pw), 3, hs)
        top = np.choose(hs - 1, pw)
        fr = np.choose(hs - 1, fq)
        sh = np.maximum(_msb(np.maximum(top, 1)) - 7, 0)
        w1, w2, w3 = ((pw[h - 1] >> sh) * (np.abs(hs * fq[h - 1] - h * fr) <= 128 * hs)
                      for h in (1, 2, 3))
        den = np.maximum(w1 + 4 * w2 + 9 * w3, 1)
        f1 = (w1 * fq[0] + 2 * w2 * fq[1] + 3 * w3 * fq[2] + (den >> 1)) // den
        f1 = np.clip(f1, self.b_lo_q8, self.b_hi_q8)
        fam = pw[0] + pw[1] + pw[2]
        tot = p[:, self.reach[0]:self.reach[1]].sum(axis=1)
        conf = np.where(tot > 0, (fam << 8) // np.maximum(tot, 1), 0)
        live = best > 0
        f[:, F_SPEED] = np.where(live, (f1 * self.cfg.fs_hz) >> self.L, 0)
        f[:, F_SPEED_CONF] = np.where(live, np.minimum(conf, 256), 0)
        return np.where(live, f1, 0)

    def _orders(self, p, f1, c, f):
        """orders.OrderReader.run over all windows (c: log2 offset per window)."""
        p = p.astype(np.int64)
        rows = np.arange(p.shape[0])
        live = f1 > 0
        vane = self.cfg.vane
        for field, x in ((F_ORD_HALF, f1 >> 1), (F_ORD_1X, f1), (F_ORD_2X, 2 * f1),
                         (F_ORD_3X, 3 * f1), (F_ORD_VANE, vane * f1)):
            if field == F_ORD_VANE and not vane:
                f[:, field] = LOG2_ZERO_Q8
                continue
            k = np.where(live, x >> 8, 1)
            s = p[rows, k] + p[rows, k + 1]
            v = _log2_q8(np.maximum(s, 1), self.log2_q15) + c + orders.scallop_q8(x & 255)
            f[:, field] = np.where(live & (s > 0), v, LOG2_ZERO_Q8)

    @staticmethod
    def _mixing(xr, xi, f1, follows):
        """Each window's mixing speed as half_taps.HalfTaps.speed finds it (bins Q8, 0: none): from
        the spectra X (xr, xi: windows, m+1) at the bin nearest the window before's own 1x, f1 the
        windows' own (bins Q8, 0 where the window is flat or has none)."""
        f1 = f1.astype(np.int64)
        x1 = np.zeros(len(f1), dtype=np.int64)
        if not follows or len(f1) < 2:
            return x1
        kb = (f1[:-1] + 128) >> 8                 # the bin each window keeps for the next
        ok = (kb > 0) & (f1[1:] > 0)
        k = np.where(ok, kb, 1)
        j = np.arange(1, len(f1))
        x = [a.astype(np.int64) for a in (xr[j - 1, k], xi[j - 1, k], xr[j, k], xi[j, k])]
        x1[1:] = np.where(ok, half_taps.mix_speed(k, *x, f1[1:]), 0)
        return x1

    def _taps(self, x, mean, u, f1, follows, f):
        """half_taps.HalfTaps.run over all windows of a run: window j's tap is the half summed
        in window j - 1 (at its mixing speed, L and mean) plus the half of window j at the same;
        x: the windows' counts (windows, n), mean and u their integer means and gain exponents,
        f1 their mixing speeds (bins Q8, 0: none)."""
        n = self.n
        wn = x.shape[0]
        f1 = f1.astype(np.int64)
        own = (f1 >= half_taps.X1_MIN) & (f1 < half_taps.X1_MAX)
        f1s = np.where(own, f1, half_taps.X1_MIN)
        L = ((((f1s + 1023) >> 10) * n * 1024 // f1s) + 1) >> 1      # half_taps.span
        mean = mean.astype(np.int64)
        u = u.astype(np.int64)
        prev = np.zeros(wn, dtype=bool)
        prev[1:] = own[:-1] & follows
        b = np.maximum(np.arange(wn) - 1, 0)                          # the window before
        before = self._half(x[:, ::-1], mean, u, (n << 10) - f1s, L, u)
        after = self._half(x, mean[b], u, f1s[b], L[b], u)
        f[:, F_TAP_X1] = np.where(prev, f1[b], 0)
        f[:, F_TAP_RE:F_TAP_RE + 6] = np.where(prev[:, None], before[b] + after, 0)

    def _half(self, xs, dc, u, f1m, L, uq):
        """HalfTaps._mix and _q8 over all windows: xs (windows, n) the samples walked from the
        boundary outward, dc, u, the mixing 1x f1m and L per window; returns (windows, 6) int64,
        each half's (re, im) per half order in counts Q8 (uq: the gain exponent of the window
        the samples are from)."""
        n, h = self.n, self.n >> 1
        pm = (n << 10) - 1
        out = np.zeros((xs.shape[0], 6), dtype=np.int64)
        step = max(1, (1 << 22) // n)                 # rows at a time: temporaries of a few MB
        for r0 in range(0, xs.shape[0], step):
            sl = slice(r0, r0 + step)
            j = np.arange(n, dtype=np.int64)[None, :]
            Lr, ur = L[sl][:, None], u[sl][:, None]
            y = xs[sl].astype(np.int64) - dc[sl][:, None]
            lim = np.where(ur >= 0, 32767 >> np.maximum(ur, 0), 65535)
            y = np.where(y > lim, 32767, np.where(y < -lim, -32767,
                         np.where(ur >= 0, y << np.maximum(ur, 0), y >> np.maximum(-ur, 0))))
            inv = (1 << 27) // Lr
            v = (y * np.maximum(((2 * Lr - 1) * inv - 2 * inv * j) >> 16, 0)) >> 12
            v = np.where(j < Lr, v, 0)
            for i, odd in enumerate(half_taps.ODDS):
                hh = odd * f1m[sl][:, None]
                ph = ((hh & pm) + j * ((2 * hh) & pm)) & pm
                k = ((ph + 512) >> 10) & (n - 1)
                lo = k <= h
                idx = np.where(lo, k, n - k)
                c = self.cos[idx].astype(np.int64)
                s = np.where(lo, self.sin[idx], -self.sin[idx]).astype(np.int64)
                out[sl, 2 * i] = ((v * c + 16384) >> 15).sum(axis=1)
                out[sl, 2 * i + 1] = -((v * s + 16384) >> 15).sum(axis=1)
            q = (((out[sl] << 3) // L[sl][:, None]) + 1) >> 1
            uu = uq[sl][:, None]
            out[sl] = np.where(uu <= 6, q << np.maximum(6 - uu, 0),
                               (q + (1 << np.maximum(uu - 7, 0))) >> np.maximum(uu - 6, 0))
        return out

    def _envelope(self, xr, xi, f1, f):
        """envelope.Envelope.run over all windows, from the spectra X (re, im: windows, m+1)."""
        fields = slice(F_ENV_BPFO, F_ENV_FTF + 1)
        f[:, fields] = LOG2_ZERO_Q8
        if not self.env_on:
            return
        m = self.env_mz
        lo, hi = self.cfg.env_band
        br, bi = xr[:, lo:hi].astype(np.int64), xi[:, lo:hi].astype(np.int64)
        mx = np.maximum(np.abs(br).max(axis=1), np.abs(bi).max(axis=1))
        u = 13 - _msb(np.maximum(mx, 1))
        g = (1 << np.maximum(u, 0))[:, None]
        sh = (u < 0).astype(np.int64)[:, None]
        wn = xr.shape[0]
        er = np.zeros((wn, m), dtype=np.int64)
        ei = np.zeros((wn, m), dtype=np.int64)
        slots = self.cpos[: hi - lo]
        er[:, slots] = (br * g) >> sh
        ei[:, slots] = -((bi * g) >> sh)
        zr, zi = self._cfft(er.astype(np.int32), ei.astype(np.int32), self.env_stages)
        s = zr.astype(np.int64) ** 2 + zi.astype(np.int64) ** 2
        top = s.max(axis=1)
        w = _msb(np.maximum(top, 1)) - envelope._S_TOP
        s = (s << np.maximum(-w, 0)[:, None]) >> np.maximum(w, 0)[:, None]
        tot = s.sum(axis=1)
        eq = (((tot << 15) // self.w2sum_q14) + 1) >> 1
        d = s - ((eq[:, None] * self.w2_q14 + 8192) >> 14)
        dr = np.empty_like(d)
        dr[:, self.cpos] = d
        Dr, Di = self._cfft(dr.astype(np.int32), np.zeros_like(dr, dtype=np.int32), self.env_stages)
        pe = Dr.astype(np.int64) ** 2 + Di.astype(np.int64) ** 2
        live = (f1 > 0) & (mx > 0) & (top > 0) & (eq > 0)
        c = self.env_c_ms_q8 - 2 * _log2_q8(np.maximum(eq, 1), self.log2_q15)
        rows = np.arange(wn)[:, None]
        for j, o in enumerate(self.cfg.bear_q12):
            x = (f1 * o) >> 12
            k0 = np.maximum((x >> 8) - 2, 0)
            ks = k0[:, None] + np.arange(6)
            inside = ks <= ((x >> 8) + 3)[:, None]
            sl = (pe[rows, np.minimum(ks, m - 1)] * inside).sum(axis=1)
            f[:, F_ENV_BPFO + j] = np.where(live & (sl > 0),
                                            _log2_q8(np.maximum(sl, 1), self.log2_q15) + c,
                                            LOG2_ZERO_Q8)


# --- fixmath, vectorised: each gives exactly what its firmware_py.dsp.fixmath namesake gives ---------

def _runs(x):
    """Longest run of equal consecutive samples and longest run of zeros per row of x (the
    per-sample pass of features._axis): run length at i = i - start of its run + 1."""
    n = x.shape[1]
    i = np.arange(n)
    starts = np.ones(x.shape, dtype=bool)
    starts[:, 1:] = x[:, 1:] != x[:, :-1]
    first = np.maximum.accumulate(np.where(starts, i, 0), axis=1)
    length = i - first + 1
    return length.max(axis=1), np.where(x == 0, length, 0).max(axis=1)


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
