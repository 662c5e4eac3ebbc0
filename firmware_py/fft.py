# Fixed-point FFT of a real window, through an n/2-point complex FFT, in place.
#
# Scaling, stated once for both functions:
# - Input: buf (array('i'), n ints) holds the windowed real samples x[i] in bit-reversed complex
#   order (tables.bitrev_positions), |x| <= 2**14, as complex points z[c] = x[2c] + j*x[2c+1].
# - cfft: radix-2 decimation in time, m = n/2 points, log2(m) stages; every butterfly halves its
#   outputs (>> 1, floor), so after the last stage buf holds Z[k] / m, where Z is the exact DFT
#   of z. Halving each stage keeps |component| <= 2**14 * sqrt(2) < 23171 throughout, so a
#   twiddle product (Q15, |w| <= 2**15) stays below 23171 * 2**15 < 2**30.
# - spectrum: the real-FFT split X[k] = E[k] - j*W**k*O[k], with E, O the halves
#   (Z[k] + conj Z[m-k])/2 and (Z[k] - conj Z[m-k])/2, halved before the twiddle product for the
#   same bound. Result: X[k] = DFT(x)[k] / m for k = 0..m, |X| <= 2**14 (the window sum bound).
#   Power p[k] = re**2 + im**2 <= 2**28, and by Parseval sum(p) <= 1.5 * 2**28 < 2**30, so sums of
#   any band of p never overflow.
# Floor shifts bias each stage by at most -1/2 LSB; that error is what the tests' tolerance derives from.


def cfft(buf, m, cos_t, sin_t):
    """In-place scaled complex FFT of m points (interleaved re, im; input bit-reversed).

    Twiddles W_m**j = cos - j*sin come from the n = 2m point tables (W_m**j = W_n**(2j)).
    Overwrites buf. Scaling: see the module comment.
    """
    h = 1
    end = 2 * m
    while h < m:
        step = m // h                 # table index stride: W_m**(j*m/(2h)) = W_n**(j*m/h)
        span = 4 * h                  # ints between successive butterflies of one twiddle
        off = 2 * h                   # ints from a butterfly's top to its bottom
        t = 0
        for j in range(0, 2 * h, 2):
            wr = cos_t[t]
            wi = sin_t[t]
            a = j
            while a < end:
                b = a + off
                xr = buf[b]
                xi = buf[b + 1]
                tr = (wr * xr + wi * xi) >> 15      # (wr - j wi)(xr + j xi)
                ti = (wr * xi - wi * xr) >> 15
                ur = buf[a]
                ui = buf[a + 1]
                buf[a] = (ur + tr) >> 1
                buf[a + 1] = (ui + ti) >> 1
                buf[b] = (ur - tr) >> 1
                buf[b + 1] = (ui - ti) >> 1
                a += span
            t += step
        h <<= 1


def spectrum(buf, m, cos_t, sin_t, vmant, vsh2, p):
    """Split the complex FFT in buf into the real spectrum of the window.

    Writes the power p[k] = |X[k]|**2 for k = 0..m (array('i'), m + 1 entries) and returns
    sum over k of |X[k] * w[k] / 2**15|**2 with w[k] = vmant[k] * 2**-(vsh2[k]/2) (the weighted
    power behind velocity r.m.s., tables.velocity_weights): each component is scaled by the
    mantissa (Q15, >= 2**14, so it keeps its precision), squared, then shifted right by vsh2[k].
    The sum is < 2**30 like sum(p), since w < 2**15. Reads buf, does not change it.
    """
    zr = buf[0]
    zi = buf[1]
    x0 = zr + zi                      # DC: Re Z0 + Im Z0
    xm = zr - zi                      # Nyquist: Re Z0 - Im Z0
    p[0] = x0 * x0
    p[m] = xm * xm
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
        p[k] = xr * xr + xi * xi
        g = vmant[k]
        vr = (xr * g) >> 15
        vi = (xi * g) >> 15
        vs += (vr * vr + vi * vi) >> vsh2[k]
        xr = er - ti                            # X[m-k] = conj(E + jT); sign is lost in power
        xi = ei + tr
        p[m - k] = xr * xr + xi * xi
        g = vmant[m - k]
        vr = (xr * g) >> 15
        vi = (xi * g) >> 15
        vs += (vr * vr + vi * vi) >> vsh2[m - k]
    # k = m/2 pairs with itself: W = -j, so X = conj Z[m/2]
    ar = buf[m]
    ai = buf[m + 1]
    p[hm] = ar * ar + ai * ai
    g = vmant[hm]
    vr = (ar * g) >> 15
    vi = (ai * g) >> 15
    return vs + ((vr * vr + vi * vi) >> vsh2[hm])
