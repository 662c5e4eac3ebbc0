"""Operating modes on the host, turned into the detector's parameter keys: modes by the device's
speed estimate (speed_modes, never by the health features), each mode's centre and spread in the
detector's standardised features, and the ranges the device chooses a mode by.

The baseline and the standardisation run through the device's own code (firmware_py.detect.modes), so
the model the host fits is exactly in the space the device scores in.
"""
from __future__ import annotations

import functools
import math
from typing import Sequence
from array import array

import numpy as np
from scipy import special
from scipy.stats import chi2

import firmware_py  # noqa: F401  (installs the micropython stand-in)
from firmware_py.dsp import feature_index as fi, orders, tables
from firmware_py.detect import half_lines as hl, modes as dm
from firmware_py.detect.detector import CHI_Q8, pinned_limits_q8 as pinned_limits
from firmware_py.detect.half_lines import BLK, HALF_WIDTH, SHIFT as HALF_SHIFT, UNSET
from firmware_py.detect.welford import Welford
from firmware_py.dsp.fixmath import sqrt_pow2

MIN_MODE_N = 30         # a speed group with fewer windows joins its neighbour
# ... as does one seen in fewer recordings: a pump's levels wander over tens of seconds (1x,
# vane pass, flow noise), so the windows of one recording share its levels and count as one
# sample of them, however many there are; a centroid from one or two such samples carries their
# offset as a lasting departure, which the slow channel finds at once (docs/evaluation.md, Four
# fresh seeds: a trim seen in one 10 s snapshot made a mode and a false alert)
MIN_MODE_STRETCHES = 3


def transformed(feats: np.ndarray, params: dict) -> np.ndarray:
    """Rows of raw feature vectors -> the device's log-scale features u (log2 Q8), by its code."""
    idx = array("i", params["det_feat"])
    pa = fi.per_axis(params["det_bands"])
    logf = array("b", [1 if dm.is_log_field(i % pa) else 0 for i in idx])
    tab = tables.log2_table()
    u = array("i", bytes(4 * len(idx)))
    out = np.empty((len(feats), len(idx)), dtype=np.int64)
    for r, row in enumerate(np.asarray(feats, dtype=np.int64)):
        dm.transform(array("i", row.tolist()), idx, logf, u, len(idx), tab)
        out[r] = u
    return out


def speed_modes(speed_hz: np.ndarray, gap: float, min_n: int, k_max: int = dm.KMAX,
                stretch: np.ndarray | None = None, min_stretches: int = 1) -> tuple[int, np.ndarray]:
    """Operating modes from the shaft speed alone, by the gaps between speeds: sorted speeds are
    cut wherever two neighbours lie more than `gap` (a fraction of the speed) apart (with
    `stretch`, the recordings' median speeds, each weighing its windows), groups with
    fewer than min_n windows, or windows from fewer than min_stretches distinct values of
    `stretch` (a recording id per window, when given), join their nearer neighbour, and while
    more than k_max remain the two nearest merge. A gap may hold a few strays (up to 1 window in STRAY_DIV: an estimate that
    missed by a bin). A continuum of speeds (a drive trimmed slowly) stays one mode; distinct
    set points, with (almost) no speeds between them, become modes. Returns (k, label per window),
    numbered by rising speed."""
    x = np.log(np.asarray(speed_hz, dtype=float))
    order = np.argsort(x, kind="stable")
    xs = x[order]
    wide = math.log1p(gap)
    # With the recordings known, the gaps are sought among their median speeds, each weighing
    # its windows: a window's estimate can miss by a bin (at 2 bins, by a tenth of the speed), a
    # recording's median does not; every window then falls on its side of each cut by its speed.
    ks, ws = xs, np.ones(len(xs), np.int64)
    if stretch is not None:
        ids, inv = np.unique(np.asarray(stretch), return_inverse=True)
        med = np.array([np.median(x[inv == i]) for i in range(len(ids))])
        o = np.argsort(med, kind="stable")
        ks, ws = med[o], np.bincount(inv)[o]
    # a gap is a stretch wider than `gap` holding at most `stray` windows: single estimates that
    # miss by a bin (0.16 s windows), or a short recording caught between set points, must not
    # bridge them. And it must be wider than a continuum of set points would leave somewhere
    # among the N speeds: with the density found within `gap` either side, a Poisson process of
    # density r leaves a stretch of width g empty somewhere with chance N exp(-r g) (the
    # spacings of a Poisson process, common practice); a cut needs that under GAP_ALPHA (a few
    # dozen recordings of a drive trimmed anywhere leave gaps wider than the tolerance by chance)
    stray = len(xs) // STRAY_DIV
    cum = np.concatenate([[0], np.cumsum(ws)])
    need = math.log(len(ks) / GAP_ALPHA)
    cut_at = set()
    for i in range(len(ks)):
        j = int(np.searchsorted(ks, ks[i] + wide, side="right"))
        if j < len(ks) and cum[j] - cum[i + 1] <= stray:
            near = (int(np.searchsorted(ks, ks[j] + wide, side="right"))
                    - int(np.searchsorted(ks, ks[i] - wide, side="left")) - (j - i - 1))
            if near / (2 * wide) * (ks[j] - ks[i]) >= need:
                cut_at.add(int(np.searchsorted(xs, 0.5 * (ks[i] + ks[j]))))
    cuts = [0] + sorted(c for c in cut_at if 0 < c < len(xs)) + [len(xs)]
    groups = [[a, b] for a, b in zip(cuts[:-1], cuts[1:])]

    def centre(g):
        return float(np.median(xs[g[0]:g[1]]))
    st = None if stretch is None else np.asarray(stretch)[order]

    def size(g):
        """A group's windows, 0 when they come from too few recordings (it joins a neighbour)."""
        if st is not None and len(np.unique(st[g[0]:g[1]])) < min_stretches:
            return 0
        return g[1] - g[0]
    while len(groups) > 1:
        sizes = [size(g) for g in groups]
        small = int(np.argmin(sizes))
        if sizes[small] >= min_n and len(groups) <= k_max:
            break
        if sizes[small] >= min_n:       # too many modes: merge the two nearest
            d = [centre(groups[i + 1]) - centre(groups[i]) for i in range(len(groups) - 1)]
            i = int(np.argmin(d))
        else:                           # too small: into its nearer neighbour
            i = small - 1 if small == len(groups) - 1 or (
                small > 0 and centre(groups[small]) - centre(groups[small - 1]) <
                centre(groups[small + 1]) - centre(groups[small])) else small
        groups[i] = [groups[i][0], groups[i + 1][1]]
        del groups[i + 1]
    lab = np.empty(len(x), int)
    for m, (a, b) in enumerate(groups):
        lab[order[a:b]] = m
    return len(groups), lab


STRAY_DIV = 200         # up to 1 window in 200 may stray into a gap between set points
GAP_ALPHA = 0.01        # chance that a continuum of set points leaves a gap that cuts it
STRAY_Q = 0.005         # a mode's speed range: its windows' 0.5-99.5 % points (strays left out), widened


def pinned_limits_q8(params: dict) -> tuple[int, int]:
    """The least and greatest speed (Hz Q8) a mode may cover: just inside the estimator's search
    range (fc_speed_lo_q8 .. fc_speed_hi_q8). A shaft slower or faster than the range, or one
    the window cannot resolve, reads at an end of the range window after window: a steady label,
    but not a speed, and windows of different operating points share it. Keeping the ends out of
    every mode leaves such windows unscored (off_point) instead of judging them against the
    wrong mode."""
    return pinned_limits(params.get("fc_speed_lo_q8") or 0, params.get("fc_speed_hi_q8") or 0,
                         params["fs_hz"], params["n"])


@functools.lru_cache(maxsize=1)
def half_block_spread() -> float:
    """The standard deviation (log2) of one block's half-order prominence on noise alone, the
    largest over the places a line and the whole orders' images can take in the block
    (half_lines.cell_kind). With white taps the Hann-windowed cells Y_c are complex normal with
    Cov(Y_c, Y_c') proportional to R(c - c'), the DFT of the squared window, so the powers have
    Cov(|Y_c|**2, |Y_c'|**2) proportional to |R(c - c')|**2 (Isserlis' theorem): the line's and
    the floor's sums have the mean and variance of Gamma(k) variables with k = mean**2 / variance,
    whose logs have variance trigamma(k) (textbook properties of the Gamma distribution), less
    twice their relative covariance (the delta method) for the cells where they touch. Hann's
    neighbouring cells correlate (-2/3 in amplitude), so k falls short of the cell count, and
    the floor holds about 15 cells, so its spread counts beside the line's. Three taps, each on
    its own frequencies, are averaged. Against the device's own integer code on noise this is a
    few per cent high (tests/test_modes_fit.py): a floor on the safe side."""
    b = BLK
    w = np.asarray(tables.hann(b, tables.twiddles(b)[0]), dtype=np.float64) / 32768.0
    r = np.abs(np.fft.fft(w * w)) ** 2
    cells = np.arange(b)
    cov = r[(cells[:, None] - cells[None, :]) % b] / r[0]      # the powers' covariance, mean 1 each
    worst = 0.0
    # c0 = off * every * b mod b * 256 (half_lines._prominence) is a multiple of b, and the images'
    # distance d a multiple of b / 2 (Q8 cells)
    for c0 in range(0, 256, math.gcd(b, 256)):
        for d in range(0, b << 8, b >> 1):
            kind = np.array([hl.cell_kind(c, c0, d, b) for c in range(b)])
            on, fl = (kind == 1).astype(np.float64), (kind == 0).astype(np.float64)
            nl, nf = on.sum(), fl.sum()
            k_line = nl * nl / (on @ cov @ on)
            k_floor = nf * nf / (fl @ cov @ fl)
            touch = (on @ cov @ fl) / (nl * nf)
            v = float(special.polygamma(1, k_line) + special.polygamma(1, k_floor)) - 2.0 * touch
            worst = max(worst, v)
    return math.sqrt(worst / 3.0) / math.log(2.0)


def half_spread_floor_q8() -> float:
    """The least spread of a half-order prominence (F_HALF) within a mode, log2 Q8: what its
    average wanders by on noise alone (half_block_spread), so that a thin training set cannot make
    it look steadier than the statistics allow. Blocks enter an EWMA of weight lam = 2**-SHIFT,
    whose spread is sqrt(lam / (2 - lam)) of its input's (Montgomery, EWMA chart; common
    practice). A device analysing every window feeds it consecutive blocks: on noise they are
    independent, and the spread holds as it does for snapshots hours apart."""
    lam = 2.0 ** -HALF_SHIFT
    return 256.0 * half_block_spread() * math.sqrt(lam / (2.0 - lam))


def line_mask(feats: np.ndarray, params: dict, speed_hz: np.ndarray) -> np.ndarray:
    """(rows, d) booleans: True where a scored order or envelope line or half-order prominence
    (F_HALF) was read around an axis's own 1x estimate (F_SPEED) more than the steady tolerance
    (det_speed_tol_q12) from the window's operating speed, or where a half-order prominence has no
    average yet: the device sets such a term neutral (firmware_py/detect/detector.py,
    _mask_lines), so the model is fitted without it. Integer arithmetic as the device's."""
    feats = np.asarray(feats, dtype=np.int64)
    pa = fi.per_axis(params["det_bands"])
    idx = np.asarray(params["det_feat"])
    op = np.rint(np.asarray(speed_hz, dtype=np.float64) * 256).astype(np.int64)
    tol = (int(params["det_speed_tol_q12"]) * op) >> 12
    out = np.zeros((len(feats), len(idx)), bool)
    for j, i in enumerate(idx.tolist()):
        f = i % pa
        if f == fi.F_HALF or fi.F_ORD_HALF <= f <= fi.F_ENV_FTF:
            e = feats[:, (i // pa) * pa + fi.F_SPEED] - op
            out[:, j] = (e > tol) | (e < -tol)
        if f == fi.F_HALF:
            out[:, j] |= feats[:, i] == UNSET
    return out


def set_aside(params: dict, lo_hz: float) -> list[int]:
    """Positions j in det_feat that a mode whose slowest speed is lo_hz cannot read: the 0.5x
    lines when 1x lies under orders.HALF_CLEAR_BINS there (their 2-bin read reaches into the 1x's
    main lobe, training._feature_list). fit() gives them the largest spread in that mode, so their
    departures count for next to nothing there (at most Z_LIM / Z_LIM spreads)."""
    if lo_hz * params["n"] / params["fs_hz"] >= orders.HALF_CLEAR_BINS:
        return []
    pa = fi.per_axis(params["det_bands"])
    return [j for j, i in enumerate(params["det_feat"]) if i % pa == fi.F_ORD_HALF]


def half_spread_bound(s: float, readings: int, least: float) -> float:
    """The spread a mode's half-order prominence (F_HALF) is judged with, in the unit of s and
    least: the one-sided 95 % upper confidence limit of its standard deviation s measured over
    `readings` windows, at least `least` (half_spread_floor_q8 in that unit), widened by the
    error of the mode's centre; or Z_LIM (set aside) when the windows hold fewer than 2
    independent values. Each window holds its axis's average of blocks, an EWMA of weight
    lam = 2**-SHIFT over blocks of BLK windows that overlap by half (nearly independent,
    half_lines): a first-order autoregression of coefficient phi = 1 - lam over n blocks (counted
    as readings / (BLK / 2), exact without gaps; snapshots hold a block's value over more windows,
    so they count a little high), whose sample variance counts
    as n_eff = n (1 - phi**2) / (1 + phi**2) independent values (its variance is 2 sigma**4 (1 + 2
    sum rho_k**2) / n, rho_k = phi**k: Bartlett 1946, from memory) and, taken about the sample
    mean, falls short by a factor 1 - 1 / n_mean, n_mean = n (1 - phi) / (1 + phi) (the effective
    count for a mean, Bayley and Hammersley 1946); then
    sigma <= s sqrt(nu / chi2.ppf(0.05, nu) / (1 - 1 / n_mean)) with nu = n_eff - 1 (the
    chi-square interval for a normal standard deviation; a textbook result). The centre is that
    mean, off by sigma / sqrt(n_mean), so a new reading departs from it by sigma sqrt(1 + 1 /
    n_mean) (the prediction interval; a textbook result). A mode that held the speed for a few
    blocks only in training, with its centre and spread from a handful of averages, would
    otherwise judge the device's steady readings many spreads off."""
    phi = 1.0 - 2.0 ** -HALF_SHIFT
    blocks = readings / (BLK // 2)
    n_eff = blocks * (1.0 - phi * phi) / (1.0 + phi * phi)
    n_mean = blocks * (1.0 - phi) / (1.0 + phi)
    if n_eff < 2.0 or n_mean <= 1.0:
        return float(dm.Z_LIM)
    nu = n_eff - 1.0
    sigma = max(s * math.sqrt(nu / float(chi2.ppf(0.05, nu)) / (1.0 - 1.0 / n_mean)), least)
    return sigma * math.sqrt(1.0 + 1.0 / n_mean)


def line_spans(params: dict, ranges_hz: Sequence[tuple[float, float]]) -> list[tuple[float, float]]:
    """Where the shaft lines' main lobes reach, in bins, over the modes' speed ranges (lo, hi) Hz:
    for each mode and line (1x, 2x, 3x and the vane pass), the band edges e (between bins e - 1
    and e) with lobe bins on both sides. A tone at x bins fills the Hann main lobe, the bins k
    with |k - x| < 2 (Harris, "On the use of windows for harmonic analysis with the discrete
    Fourier transform", Proc. IEEE 66, 1978), which has bins k >= e and k <= e - 1 for
    x - 1 < e < x + 2; returned closed, [o lo - 1, o hi + 2] in bins, the cautious side."""
    per_bin = params["n"] / params["fs_hz"]
    lines = [1, 2, 3] + ([params["fc_vane"]] if params.get("fc_vane") else [])
    return [(o * lo * per_bin - 1.0, o * hi * per_bin + 2.0) for lo, hi in ranges_hz for o in lines]


def place_edges(params: dict, ranges_hz: Sequence[tuple[float, float]]) -> list[list[int]]:
    """The set's bands (fc_bands, contiguous [lo, hi) bin ranges) with each edge that a shaft
    line's lobe reaches in some mode (line_spans) moved to the nearest bin no lobe reaches, by at
    most a quarter of the edge (at least 1 bin) and keeping every band at least 1 bin wide; an
    edge with no such bin stays. A band whose edge a line sits on gains or loses that line as the
    speed moves within the mode: its power follows the speed, not the health (at 1024 samples the
    evaluation histories' 2-pole pump raised false alerts on its 2x at the 103 Hz edge;
    docs/evaluation.md). Bands that are not contiguous stay as they are."""
    bands = [[int(b[0]), int(b[1])] for b in params["fc_bands"]]
    if not bands or any(bands[i][1] != bands[i + 1][0] for i in range(len(bands) - 1)):
        return bands
    spans = line_spans(params, ranges_hz)
    edges = [b[0] for b in bands] + [bands[-1][1]]
    top = params["n"] // 2
    for i, e in enumerate(edges):
        if e <= 1 or e >= top or not any(a <= e <= z for a, z in spans):
            continue
        lo = edges[i - 1] + 1 if i > 0 else 2
        hi = edges[i + 1] - 1 if i + 1 < len(edges) else top - 1
        reach = max(1, e // 4)
        for c in sorted(range(e - reach, e + reach + 1), key=lambda c: (abs(c - e), c)):
            if lo <= c <= hi and not any(a <= c <= z for a, z in spans):
                edges[i] = c
                break
    return [[edges[i], edges[i + 1]] for i in range(len(bands))]


def mode_ranges_hz(params: dict) -> list[tuple[float, float]]:
    """The learned modes' speed ranges (det_op_speed_q8), Hz."""
    op = params.get("det_op_speed_q8") or []
    return [(op[2 * i] / 256.0, op[2 * i + 1] / 256.0) for i in range(len(op) // 2)]


def edge_ranges_hz(params: dict) -> list[tuple[float, float]]:
    """The speeds place_edges keeps the band edges clear over, Hz: each mode's trained speeds
    (det_op_seen_q8), where the slow channel gathers its evidence and would find the lasting
    offset of a band gaining part of a line; the modes' whole ranges (mode_ranges_hz) for a set
    without them. A mode's range reaches twice the steady tolerance past its trained speeds, and
    an unsteady duty widens it to where no edge is clear (docs/evaluation.md, "The night
    scored"); there windows are judged one by one, where a few dB are a few spreads."""
    seen = params.get("det_op_seen_q8") or []
    if not seen:
        return mode_ranges_hz(params)
    return [(seen[2 * i] / 256.0, seen[2 * i + 1] / 256.0) for i in range(len(seen) // 2)]


FOLLOW_T = 4.0          # a slope is kept only this many standard errors from 0
# magnitudes whose level follows the speed as a smooth power law: broadband r.m.s., peak and
# velocity, sums of many lines. Not the band powers (a line crossing an edge makes an S over its
# lobe, not a power law), nor the lines read at an order: a slope, pooled or of each mode's own,
# there made imbalance show later on the evaluation histories (docs/detector.md, "Levels that
# follow the speed within a mode"); nor the shape figures (crest factor, kurtosis), which do not
# scale with the speed.
_FOLLOWS = (fi.F_RMS, fi.F_PEAK, fi.F_VEL)


def follows(field: int) -> bool:
    """Whether a per-axis field may follow the speed within a mode (det_follow_q8; why these:
    docs/detector.md, Levels that follow the speed)."""
    return field in _FOLLOWS


def follows_in_mode(field: int) -> bool:
    """Whether a per-axis field may have a slope of each mode's own over the speeds it was trained
    at (det_mfollow_q8): the band powers. Within the few per cent of a mode's speeds the S that a
    line makes crossing an edge is close to a line, and the device holds the speed within those
    speeds, so the fitted line is never carried past them (docs/detector.md)."""
    return field >= fi.F_BAND0


def follow_refs_q8(op: Sequence[int]) -> list[int]:
    """Each mode's reference speed, log2 Q8 (modes.range_ref_q8, as the device's Detector._refs)."""
    tab = tables.log2_table()
    return [dm.range_ref_q8(op[2 * m], op[2 * m + 1], tab) for m in range(len(op) // 2)]


def speed_offsets_q8(speed_hz: np.ndarray, refs: Sequence[int], lab: np.ndarray,
                     seen: Sequence[int] = ()) -> np.ndarray:
    """Per window, log2 of its speed less its mode's reference, log2 Q8 (modes.speed_offset_q8);
    with seen (det_op_seen_q8, Hz Q8 pairs), the speed held within its mode's pair first, as the
    device does for det_mfollow_q8."""
    tab = tables.log2_table()
    sq = np.rint(np.asarray(speed_hz, dtype=np.float64) * 256).astype(np.int64)
    if len(seen):
        pairs = np.asarray(seen, np.int64).reshape(-1, 2)[lab]
        sq = np.clip(sq, pairs[:, 0], pairs[:, 1])
    return np.array([dm.speed_offset_q8(int(v), refs[m], tab) for v, m in zip(sq.tolist(), lab.tolist())], np.int64)


def _ar1(x: np.ndarray) -> float:
    """Lag-1 autocorrelation of a series, 0 for fewer than 3 values or no spread."""
    x = x - x.mean()
    ss = float(x @ x)
    return float(x[1:] @ x[:-1]) / ss if len(x) > 2 and ss > 0 else 0.0


def follow_slopes(u: np.ndarray, dl_q8: np.ndarray, lab: np.ndarray, mask: np.ndarray,
                  cand: np.ndarray) -> tuple[list[int], list[float]]:
    """Each candidate feature's slope on log2 of the speed within the modes, Q8 (det_follow_q8),
    and its t value: ordinary least squares pooled within the modes (each mode's own mean taken
    out of both, so that levels differing between modes do not pass for a slope; Wooldridge,
    "Introductory Econometrics", the within estimator), over the windows that read the feature
    (mask False), in the rows' order (time). Its standard error allows for the windows'
    autocorrelation: residuals and speeds that both run as AR(1) with lag-1 correlations re and
    rx inflate the slope's variance by (1 + rx re) / (1 - rx re) (the AR(1) form of Bartlett's
    correction, common practice; from memory). A slope under FOLLOW_T standard errors, or a
    feature not a candidate, is 0 (a fixed centroid); the rest are clamped to +-FOLLOW_MAX."""
    d = u.shape[1]
    out, tv = [0] * d, [0.0] * d
    for j in np.flatnonzero(cand):
        ok = ~mask[:, j]
        out[j], tv[j] = _slope(dl_q8[ok], u[ok, j], lab[ok])
    return out, tv


def mode_slopes(u: np.ndarray, dl_q8: np.ndarray, lab: np.ndarray, mask: np.ndarray,
                cand: np.ndarray, k: int) -> list[int]:
    """Each mode's own slope of each candidate feature on log2 of the speed, Q8, k x d mode-major
    (det_mfollow_q8; dl_q8 from the speed held within the mode's trained speeds): follow_slopes'
    estimate and test over one mode's windows at a time, 0 where it fails the test."""
    d = u.shape[1]
    out = [0] * (k * d)
    for m in range(k):
        rows = lab == m
        for j in np.flatnonzero(cand):
            ok = rows & ~mask[:, j]
            out[m * d + j] = _slope(dl_q8[ok], u[ok, j], lab[ok])[0]
    return out


def _slope(dl_q8: np.ndarray, u: np.ndarray, lab: np.ndarray) -> tuple[int, float]:
    """follow_slopes' estimate for one feature, in the rows' order: the slope (Q8, 0 unless it is
    FOLLOW_T standard errors from 0) and its t value (0 when too few rows)."""
    x, y, g = dl_q8.astype(np.float64), u.astype(np.float64), lab
    if len(x) < 3:
        return 0, 0.0
    groups = np.unique(g)
    for m in groups:
        x[g == m] -= x[g == m].mean()
        y[g == m] -= y[g == m].mean()
    sxx = float(x @ x)
    dof = len(x) - len(groups) - 1
    if sxx <= 0 or dof < 1:
        return 0, 0.0
    b = float(x @ y) / sxx
    e = y - b * x
    r = _ar1(x) * _ar1(e)
    r = min(max(r, 0.0), 0.99)
    se = math.sqrt(float(e @ e) / dof / sxx * (1 + r) / (1 - r))
    t = b / se if se > 0 else math.inf
    return (int(np.clip(round(256 * b), -dm.FOLLOW_MAX, dm.FOLLOW_MAX)) if abs(t) >= FOLLOW_T else 0), t


def _follow(u: np.ndarray, slopes: list[int], dl_q8: np.ndarray, lab: np.ndarray, step: int) -> None:
    """Bring each row of u to its mode's reference speed in place, with the device's modes.follow:
    slopes start at lab * step (0: one slope per feature for every mode; d: each mode's own)."""
    if not any(slopes):
        return
    sl = array("h", slopes)
    for r in range(len(u)):
        row = array("i", u[r].tolist())
        dm.follow(row, sl, int(lab[r]) * step, int(dl_q8[r]), u.shape[1])
        u[r] = row


def fit(feats: np.ndarray, params: dict, speed_hz: np.ndarray | None = None, speed_tol: float = 0.01,
        k_max: int = dm.KMAX, margin_q8: int | None = None, stretch: np.ndarray | None = None) -> dict:
    """Baseline, operating modes and conservative thresholds from healthy running windows (rows
    of raw feature vectors). Returns the detector keys to merge into the parameter set.

    Modes come from the operating point, never from the health features: with speed_hz (the
    device's speed estimate of each window, Hz), speed_modes() groups the windows at gaps wider
    than speed_tol (the steady tolerance, at least 1 %; with `stretch`, each window's recording,
    a group must come from MIN_MODE_STRETCHES recordings), and each mode's speed range
    (det_op_speed_q8) is its windows' range widened by twice that each side; the range itself,
    unwidened, is where the slow channel gathers evidence (det_op_seen_q8); the load proxy is
    left open (docs/detector.md, Operating point); within the modes, the broadband levels' pooled
    slopes on the speed (follow_slopes, det_follow_q8), then each mode's own band slopes on the
    speed held within its trained speeds (mode_slopes, det_mfollow_q8), each taken out of the
    windows with the device's modes.follow. Without speed_hz: one mode and no operating
    points. The baseline is the device's fixed-point Welford; z is standardised by the device's
    code; each mode's centroid and spread are its members' mean and standard deviation per
    feature, the spread floored at det_s_floor_q8. Thresholds: the chi-square tail point of the
    device (CHI_Q8, p = 1e-4) times the margin (training replaces them with the fitted raise
    rate). The idle floor
    (det_idle_vel_q16, counts/s Q16) is a quarter of the quietest window's broadband velocity, as
    the device's own learning sets it, and never under the set's.
    """
    u = transformed(feats, params)
    d = u.shape[1]
    pa = fi.per_axis(params["det_bands"])
    vel = np.asarray(feats)[:, fi.F_VEL::pa][:, :params["det_axes"]]
    idle = max(int(params["det_idle_vel_q16"]), int(vel.max(1).min()) >> 2)
    mask = line_mask(feats, params, speed_hz) if speed_hz is not None else np.zeros(u.shape, bool)
    # the modes first: each feature's slope on the speed is fitted within them, and every window
    # is brought to its mode's reference speed (the device's modes.follow) before the baseline
    op: list[int] = []
    seen: list[int] = []
    slopes: list[int] = []
    if speed_hz is not None:
        widen = 2.0 * max(speed_tol, 0.01)
        k, lab = speed_modes(speed_hz, widen / 2, MIN_MODE_N, k_max, stretch, MIN_MODE_STRETCHES)
        lo_q8, hi_q8 = pinned_limits_q8(params)
        for m in range(k):
            sp = np.asarray(speed_hz)[lab == m]
            a, b = np.percentile(sp, [100 * STRAY_Q, 100 * (1 - STRAY_Q)])
            seen += [int(math.floor(a * 256)), int(math.ceil(b * 256))]
            op += [max(int(math.floor(a * (1 - widen) * 256)), lo_q8),
                   min(int(math.ceil(b * (1 + widen) * 256)), hi_q8)]
        refs = follow_refs_q8(op)
        dl = speed_offsets_q8(speed_hz, refs, lab)
        slopes = follow_slopes(u, dl, lab, mask, np.array([follows(i % pa) for i in params["det_feat"]], bool))[0]
        _follow(u, slopes, dl, lab, 0)
        dls = speed_offsets_q8(speed_hz, refs, lab, seen)
        mslopes = mode_slopes(u, dls, lab, mask, np.array([follows_in_mode(i % pa) for i in params["det_feat"]], bool), k)
        _follow(u, mslopes, dls, lab, d)
        slopes = slopes if any(slopes) else []
        mslopes = mslopes if any(mslopes) else []
    else:
        k, lab, mslopes = 1, np.zeros(len(u), int), []
    w = Welford(d)
    for row, mk in zip(u, mask):
        for j in range(d):
            if not mk[j]:
                w.add(j, int(row[j]))
    for j in range(d):
        if w.n[j] < 2:      # a line never read at the right place: a neutral baseline
            w.add(j, 0)
            w.add(j, 256)
    model = dm.ModeModel(d)
    mean = [w.mean_q(j, 4) for j in range(d)]
    sd = [sqrt_pow2(w.var(j), 8) for j in range(d)]
    model.load(mean, sd, 0, [], [], params["det_sd_floor_q4"], params["det_s_floor_q8"])
    zb = array("i", bytes(4 * d))
    z = np.empty_like(u)
    for r, row in enumerate(u):
        model.standardise(array("i", row.tolist()), zb)
        z[r] = zb
    floor = params["det_s_floor_q8"]
    # per mode, each feature's mean and spread (population) over the windows that read its line;
    # a line masked in every window of a mode is neutral there (centre 0, spread 256). Counted
    # here rather than by nanmean/nanstd, whose empty-slice warning would need a warnings filter,
    # and filters are process-wide: two trainings in threads (a Dask worker) undo each other's
    centers = np.zeros((k, d))
    spread = np.full((k, d), 256.0)
    half = np.array([i % pa == fi.F_HALF for i in params["det_feat"]], bool)
    least = half_spread_floor_q8()
    for m in range(k):
        zk, ok = z[lab == m].astype(np.float64), ~mask[lab == m]
        cnt = ok.sum(0)
        has = cnt > 0
        centers[m, has] = np.where(ok, zk, 0.0).sum(0)[has] / cnt[has]
        dev = np.where(ok, zk - centers[m], 0.0)
        spread[m, has] = np.sqrt((dev * dev).sum(0)[has] / cnt[has])
        for j in np.flatnonzero(half):
            spread[m, j] = half_spread_bound(spread[m, j], int(cnt[j]),
                                             least * 256.0 * 16.0 / max(int(model.sd_q4[j]), 1))
    for m in range(k if op else 0):
        spread[m, set_aside(params, op[2 * m] / 256.0)] = dm.Z_LIM
    margin = params["det_learn_margin_q8"] if margin_q8 is None else margin_q8
    alert = (CHI_Q8[d - 1] * margin) >> 8
    return {
        "det_base_mean_q4": [int(v) for v in model.mean_q4],
        "det_base_sd_q4": [int(v) for v in model.sd_q4],
        "det_modes": int(k),
        "det_mode_c_q8": [int(v) for v in np.clip(np.rint(centers), -dm.Z_LIM, dm.Z_LIM).ravel()],
        "det_mode_s_q8": [int(v) for v in np.clip(np.rint(spread), floor, dm.Z_LIM).ravel()],
        "det_op_speed_q8": op, "det_op_load_q8": [], "det_follow_q8": slopes, "det_op_seen_q8": seen,
        "det_mfollow_q8": mslopes,
        "det_thr_alert_q8": int(alert),
        "det_thr_alarm_q8": int((alert * params["det_learn_alarm_q8"]) >> 8),
        "det_idle_vel_q16": idle,
    }
