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

Entry points: radix4_twiddles(), cfft(), spectrum()."""


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


def cfft(buf, m, tw):
    """In-place scaled complex FFT of m points (interleaved re, im; input bit-reversed).

    tw from radix4_twiddles(m, ...). Overwrites buf. Scaling: see the module comment.
    """
    end = 2 * m
    t = 0
    h = 1
    if _odd_log2(m):
        # radix-2 stage with W = 1: pairs of neighbours
        for a in range(0, end, 4):
            ur = buf[a]
            ui = buf[a + 1]
            xr = buf[a + 2]
            xi = buf[a + 3]
            buf[a] = (ur + xr) >> 1
            buf[a + 1] = (ui + xi) >> 1
            buf[a + 2] = (ur - xr) >> 1
            buf[a + 3] = (ui - xi) >> 1
        h = 2
    while h < m:
        q = 2 * h                          # ints between the four legs of a butterfly
        span = 8 * h
        for j in range(0, q, 2):
            w2r = tw[t]
            w2i = tw[t + 1]
            w1r = tw[t + 2]
            w1i = tw[t + 3]
            w3r = tw[t + 4]
            w3i = tw[t + 5]
            t += 6
            a = j
            while a < end:
                b = a + q
                c = b + q
                d = c + q
                # B = w**2 * x[b], C = w * x[c], D = w**3 * x[d]  (w = wr - j*wi)
                xr = buf[b]
                xi = buf[b + 1]
                br = (w2r * xr + w2i * xi) >> 15
                bi = (w2r * xi - w2i * xr) >> 15
                xr = buf[c]
                xi = buf[c + 1]
                cr = (w1r * xr + w1i * xi) >> 15
                ci = (w1r * xi - w1i * xr) >> 15
                xr = buf[d]
                xi = buf[d + 1]
                dr = (w3r * xr + w3i * xi) >> 15
                di = (w3r * xi - w3i * xr) >> 15
                ar = buf[a]
                ai = buf[a + 1]
                s0r = ar + br
                s0i = ai + bi
                s1r = ar - br
                s1i = ai - bi
                s2r = cr + dr
                s2i = ci + di
                s3r = cr - dr
                s3i = ci - di
                buf[a] = (s0r + s2r) >> 2          # y0 = (a + B) + (C + D)
                buf[a + 1] = (s0i + s2i) >> 2
                buf[c] = (s0r - s2r) >> 2          # y2 = (a + B) - (C + D)
                buf[c + 1] = (s0i - s2i) >> 2
                buf[b] = (s1r + s3i) >> 2          # y1 = (a - B) - j(C - D)
                buf[b + 1] = (s1i - s3r) >> 2
                buf[d] = (s1r - s3i) >> 2          # y3 = (a - B) + j(C - D)
                buf[d + 1] = (s1i + s3r) >> 2
                a += span
        h *= 4


def spectrum(buf, m, cos_t, sin_t, vmant, vsh2, p, keep_x):
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
    """
    zr = buf[0]
    zi = buf[1]
    x0 = zr + zi                      # DC: Re Z0 + Im Z0
    xm = zr - zi                      # Nyquist: Re Z0 - Im Z0
    p[0] = x0 * x0
    p[m] = xm * xm
    if keep_x:
        buf[0] = x0
        buf[1] = xm
    v = (xm * vmant[m]) >> 15
    vs = (v * v) >> vsh2[m]
    hm = m >> 1
    for k in range(1, hm):
        i = 2 * k
        q = 2 * (m - k)
        ar = buf[i]
        ai = buf[i + 1]
        br = buf[q]
        bi = buf[q + 1]
        er = (ar + br) >> 1
        ei = (ai - bi) >> 1
        orr = (ar - br) >> 1
        oi = (ai + bi) >> 1
        wr = cos_t[k]
        wi = sin_t[k]
        tr = (wr * orr + wi * oi) >> 15         # T = W_n**k * O
        ti = (wr * oi - wi * orr) >> 15
        xr = er + ti                            # X[k] = E - jT
        xi = ei - tr
        if keep_x:
            buf[i] = xr
            buf[i + 1] = xi
        p[k] = xr * xr + xi * xi
        g = vmant[k]
        vr = (xr * g) >> 15
        vi = (xi * g) >> 15
        vs += (vr * vr + vi * vi) >> vsh2[k]
        xr = er - ti                            # X[m-k] = conj(E + jT): (xr, -xi)
        xi = ei + tr
        if keep_x:
            buf[q] = xr
            buf[q + 1] = -xi
        p[m - k] = xr * xr + xi * xi
        g = vmant[m - k]
        vr = (xr * g) >> 15
        vi = (xi * g) >> 15
        vs += (vr * vr + vi * vi) >> vsh2[m - k]
    # k = m/2 pairs with itself: W = -j, so X = conj Z[m/2]
    ar = buf[m]
    ai = buf[m + 1]
    if keep_x:
        buf[m + 1] = -ai
    p[hm] = ar * ar + ai * ai
    g = vmant[hm]
    vr = (ar * g) >> 15
    vi = (ai * g) >> 15
    return vs + ((vr * vr + vi * vi) >> vsh2[hm])
