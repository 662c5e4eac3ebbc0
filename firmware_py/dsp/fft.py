"""Fixed-point FFT of a real window, through an n/2-point complex FFT, in place.

Scaling, stated once for all functions here:
- Input: buf (array('i'), n ints) holds the windowed real samples x[i] in bit-reversed complex
  order (tables.bitrev_positions), |x| <= 2**14, as complex points z[c] = x[2c] + j*x[2c+1].
- cfft: m = n/2 points, decimation in time: radix-4 stages (one radix-2 stage first when log2(m)
  is odd). A radix-2 stage halves its outputs (>> 1), a radix-4 stage quarters them (>> 2,
  floor), so after the last stage buf holds Z[k] / m, where Z is the exact DFT of z. Each output
  is at most the largest input in magnitude, so |component| <= 2**14 * sqrt(2) < 23171
  throughout and a twiddle product (Q15, |w| <= 2**15) stays below 23171 * 2**15 < 2**30.
- spectrum: the real-FFT split X[k] = E[k] - j*W**k*O[k], with E, O the halves
  (Z[k] + conj Z[m-k])/2 and (Z[k] - conj Z[m-k])/2, halved before the twiddle product for the
  same bound. Result: X[k] = DFT(x)[k] / m for k = 0..m, |X| <= 2**14 (the window sum bound).
  Power p[k] = re**2 + im**2 <= 2**28, and by Parseval sum(p) <= 1.5 * 2**28 < 2**30, so sums of
  any band of p never overflow. spectrum leaves X itself in buf (packed real-FFT layout), which
  the envelope stage reads.
Floor shifts bias each stage by at most -1/2 LSB; that error is what the tests' tolerance derives from.

What X holds, per window size (the feature core takes n = 64..4096, powers of two). x is Q0
(windowed counts, |x| <= 2**14); X[k] and buf are in the same Q0 units divided by m, so
multiplying by m (shifting left by the bits to restore) gives the exact DFT up to the floor error;
p[k] = |X[k]|**2 = |DFT(x)[k]|**2 / m**2.

        n      m  cfft stages            X[k] (k = 0..m)    bits to restore (log2 m)
       64     32  1 radix-2 + 2 radix-4  DFT(x)[k] / 32      5
      128     64  3 radix-4              DFT(x)[k] / 64      6
      256    128  1 radix-2 + 3 radix-4  DFT(x)[k] / 128     7
      512    256  4 radix-4              DFT(x)[k] / 256     8
     1024    512  1 radix-2 + 4 radix-4  DFT(x)[k] / 512     9
     2048   1024  5 radix-4              DFT(x)[k] / 1024   10
     4096   2048  1 radix-2 + 5 radix-4  DFT(x)[k] / 2048   11

Entry points: radix4_twiddles() (set-up), cfft(), spectrum(), power_sum() (per window,
viper-compiled on the boards, bytecode or CPython elsewhere: firmware_py.viper_stand)."""
import micropython

from firmware_py.viper_stand import SX32, ptr8, ptr16, ptr32


def radix4_twiddles(m, cos_t, sin_t):
    """Twiddles of every radix-4 stage of an m-point cfft, one array('i') (Q15).

    For a stage of quarter-span h and j = 0..h-1, with w = W_m**(j*m/(4h)) = W_n**(j*m/(2h)),
    six ints: w**2, w, w**3 as (cos, sin) pairs (W = cos - j*sin), stages in execution order.
    cos_t, sin_t cover 0..pi (tables.twiddles); angles up to 3*pi/2 use cos(t) = -cos(t - pi).
    """
    tw = []
    h = 2 if _odd_log2(m) else 1
    while h < m:
        for j in range(h):
            q = j * m // (2 * h)            # index of w in the n-point tables
            for e in (2, 1, 3):
                i = q * e
                if i <= m:
                    tw.append(cos_t[i])
                    tw.append(sin_t[i])
                else:
                    tw.append(-cos_t[i - m])
                    tw.append(-sin_t[i - m])
        h *= 4
    return _array_i(tw)


def twiddle_bytes(m):
    """Bytes of radix4_twiddles(m, ...): six ints per j of every radix-4 stage."""
    b = 0
    h = 2 if _odd_log2(m) else 1
    while h < m:
        b += 4 * 6 * h
        h *= 4
    return b


def _array_i(values):
    import array
    return array.array('i', values)


def _odd_log2(m):
    k = 0
    while m > 1:
        m >>= 1
        k += 1
    return k & 1


@micropython.viper
def cfft(buf, m: int, tw):
    """In-place scaled complex FFT of m points (interleaved re, im; input bit-reversed).

    buf: array('i'); tw from radix4_twiddles(m, ...). Overwrites buf. Scaling: see the module
    comment. Viper: loads are sign-extended with SX32 (firmware_py.viper_stand); every
    intermediate is below 2**30 in magnitude (module comment), so a 32-bit word holds it.
    """
    p = ptr32(buf)
    w = ptr32(tw)
    sx = int(SX32)
    end = 2 * m
    t = 0
    h = 1
    if int(_odd_log2(m)):
        # radix-2 stage with W = 1: pairs of neighbours
        for a in range(0, end, 4):
            ur = (p[a] << sx) >> sx
            ui = (p[a + 1] << sx) >> sx
            xr = (p[a + 2] << sx) >> sx
            xi = (p[a + 3] << sx) >> sx
            p[a] = (ur + xr) >> 1
            p[a + 1] = (ui + xi) >> 1
            p[a + 2] = (ur - xr) >> 1
            p[a + 3] = (ui - xi) >> 1
        h = 2
    while h < m:
        q = 2 * h                          # ints between the four legs of a butterfly
        span = 8 * h
        for j in range(0, q, 2):
            w2r = (w[t] << sx) >> sx
            w2i = (w[t + 1] << sx) >> sx
            w1r = (w[t + 2] << sx) >> sx
            w1i = (w[t + 3] << sx) >> sx
            w3r = (w[t + 4] << sx) >> sx
            w3i = (w[t + 5] << sx) >> sx
            t += 6
            a = j
            while a < end:
                b = a + q
                c = b + q
                d = c + q
                # B = w**2 * x[b], C = w * x[c], D = w**3 * x[d]  (w = wr - j*wi)
                xr = (p[b] << sx) >> sx
                xi = (p[b + 1] << sx) >> sx
                br = (w2r * xr + w2i * xi) >> 15
                bi = (w2r * xi - w2i * xr) >> 15
                xr = (p[c] << sx) >> sx
                xi = (p[c + 1] << sx) >> sx
                cr = (w1r * xr + w1i * xi) >> 15
                ci = (w1r * xi - w1i * xr) >> 15
                xr = (p[d] << sx) >> sx
                xi = (p[d + 1] << sx) >> sx
                dr = (w3r * xr + w3i * xi) >> 15
                di = (w3r * xi - w3i * xr) >> 15
                ar = (p[a] << sx) >> sx
                ai = (p[a + 1] << sx) >> sx
                s0r = ar + br
                s0i = ai + bi
                s1r = ar - br
                s1i = ai - bi
                s2r = cr + dr
                s2i = ci + di
                s3r = cr - dr
                s3i = ci - di
                p[a] = (s0r + s2r) >> 2          # y0 = (a + B) + (C + D)
                p[a + 1] = (s0i + s2i) >> 2
                p[c] = (s0r - s2r) >> 2          # y2 = (a + B) - (C + D)
                p[c + 1] = (s0i - s2i) >> 2
                p[b] = (s1r + s3i) >> 2          # y1 = (a - B) - j(C - D)
                p[b + 1] = (s1i - s3r) >> 2
                p[d] = (s1r - s3i) >> 2          # y3 = (a - B) + j(C - D)
                p[d + 1] = (s1i + s3r) >> 2
                a += span
        h *= 4


@micropython.viper
def spectrum(buf, m: int, cos_t, sin_t, vmant, vsh2, p, keep_x: int) -> int:
    """Split the complex FFT in buf into the real spectrum of the window.

    Writes the power p[k] = |X[k]|**2 for k = 0..m (array('i'), m + 1 entries) and returns
    sum over k of |X[k] * w[k] / 2**15|**2 with w[k] = vmant[k] * 2**-(vsh2[k]/2) (the weighted
    power behind velocity r.m.s., tables.velocity_weights): each component is scaled by the
    mantissa (Q15, >= 2**14, so it keeps its precision), squared, then shifted right by vsh2[k].
    The sum is < 2**30 like sum(p), since w < 2**15.

    With keep_x, overwrites buf with the spectrum X itself, in the packed real-FFT layout: X[k]
    for k = 1..m-1 at buf[2k] (re) and buf[2k+1] (im); buf[0] = X[0] and buf[1] = X[m] (both
    real). Each value read from buf is consumed before its slot is written (k and m-k are done
    together). Without it buf is left as it was (the stores cost a few per cent of the window).

    Each squared weighted component is below 2**29 (|X| <= 2**14, mantissa < 2**15), so a shift
    of 29 or more leaves 0: such bins are skipped, which keeps every shift count below 32 (the
    boards' shifters do not take larger counts modulo the word) and changes no result.
    """
    z = ptr32(buf)
    ct = ptr32(cos_t)
    st = ptr32(sin_t)
    vm = ptr16(vmant)          # unsigned: a zero-extended load is the value
    vh = ptr8(vsh2)
    pw = ptr32(p)
    sx = int(SX32)
    zr = (z[0] << sx) >> sx
    zi = (z[1] << sx) >> sx
    x0 = zr + zi                      # DC: Re Z0 + Im Z0
    xm = zr - zi                      # Nyquist: Re Z0 - Im Z0
    pw[0] = x0 * x0
    pw[m] = xm * xm
    if keep_x:
        z[0] = x0
        z[1] = xm
    v = (xm * vm[m]) >> 15
    vs = 0
    s = vh[m]
    if s < 31:
        vs = (v * v) >> s
    hm = m >> 1
    for k in range(1, hm):
        i = 2 * k
        q = 2 * (m - k)
        ar = (z[i] << sx) >> sx
        ai = (z[i + 1] << sx) >> sx
        br = (z[q] << sx) >> sx
        bi = (z[q + 1] << sx) >> sx
        er = (ar + br) >> 1
        ei = (ai - bi) >> 1
        orr = (ar - br) >> 1
        oi = (ai + bi) >> 1
        wr = (ct[k] << sx) >> sx
        wi = (st[k] << sx) >> sx
        tr = (wr * orr + wi * oi) >> 15         # T = W_n**k * O
        ti = (wr * oi - wi * orr) >> 15
        xr = er + ti                            # X[k] = E - jT
        xi = ei - tr
        if keep_x:
            z[i] = xr
            z[i + 1] = xi
        pw[k] = xr * xr + xi * xi
        s = vh[k]
        if s < 31:
            g = vm[k]
            vr = (xr * g) >> 15
            vi = (xi * g) >> 15
            vs += (vr * vr + vi * vi) >> s
        xr = er - ti                            # X[m-k] = conj(E + jT): (xr, -xi)
        xi = ei + tr
        if keep_x:
            z[q] = xr
            z[q + 1] = -xi
        pw[m - k] = xr * xr + xi * xi
        s = vh[m - k]
        if s < 31:
            g = vm[m - k]
            vr = (xr * g) >> 15
            vi = (xi * g) >> 15
            vs += (vr * vr + vi * vi) >> s
    # k = m/2 pairs with itself: W = -j, so X = conj Z[m/2]
    ar = (z[m] << sx) >> sx
    ai = (z[m + 1] << sx) >> sx
    if keep_x:
        z[m + 1] = -ai
    pw[hm] = ar * ar + ai * ai
    s = vh[hm]
    if s < 31:
        g = vm[hm]
        vr = (ar * g) >> 15
        vi = (ai * g) >> 15
        vs += (vr * vr + vi * vi) >> s
    return vs


@micropython.viper
def power_sum(p, lo: int, hi: int) -> int:
    """sum(p[lo:hi]) of an array('i') of powers (each >= 0, every band sum < 2**30, see the
    module comment), without making a slice."""
    pw = ptr32(p)
    s = 0
    for k in range(lo, hi):
        s += pw[k]
    return s
