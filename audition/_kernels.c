/*
 * The inner loops of audition's streaming engine, in plain C (no Python API).
 *
 * Loaded with ctypes by audition/kernels.py, which holds the numpy versions of the
 * same loops (used when this library was not built) and documents each one; the
 * tests require both to agree bit for bit with their references (scipy.signal.sosfilt,
 * libsndfile). ctypes releases the GIL around every call, so the reading, filtering
 * and writing threads of a render run side by side.
 *
 * Compiled with floating-point contraction off (setup in pyproject.toml): a fused
 * multiply-add would round differently from the reference recursion.
 */

#include <math.h>
#include <stddef.h>
#include <stdint.h>

#if defined(_WIN32)
#define AU_EXPORT __declspec(dllexport)
#else
#define AU_EXPORT __attribute__((visibility("default")))
#endif

/* Second-order sections over a frame-major block, state carried in zi[sections][2][channels]:
 * the transposed direct form II of scipy.signal.sosfilt, operation for operation. y may be x.
 * One section at a time over the whole block (a section's recursion does not depend on how the
 * others are interleaved with it), two channels at a time with their state in registers: the
 * recursion is bound by the latency of its own additions, and two independent channels fill
 * the gaps. */
static void sos_section(const double *src, double *y, ptrdiff_t frames, ptrdiff_t channels, ptrdiff_t c,
                        int pair, const double *q, double *z)
{
    const double b0 = q[0], b1 = q[1], b2 = q[2], a1 = q[4], a2 = q[5];
    double z0 = z[c], z1 = z[channels + c];
    if (pair) {
        double u0 = z[c + 1], u1 = z[channels + c + 1];
        for (ptrdiff_t i = 0; i < frames; i++) {
            const double v = src[i * channels + c], p = src[i * channels + c + 1];
            const double w = b0 * v + z0, r = b0 * p + u0;
            z0 = b1 * v - a1 * w + z1;
            u0 = b1 * p - a1 * r + u1;
            z1 = b2 * v - a2 * w;
            u1 = b2 * p - a2 * r;
            y[i * channels + c] = w;
            y[i * channels + c + 1] = r;
        }
        z[c + 1] = u0;
        z[channels + c + 1] = u1;
    } else {
        for (ptrdiff_t i = 0; i < frames; i++) {
            const double v = src[i * channels + c];
            const double w = b0 * v + z0;
            z0 = b1 * v - a1 * w + z1;
            z1 = b2 * v - a2 * w;
            y[i * channels + c] = w;
        }
    }
    z[c] = z0;
    z[channels + c] = z1;
}

AU_EXPORT void au_sos_filter(const double *x, double *y, ptrdiff_t frames, ptrdiff_t channels,
                             const double *sos, ptrdiff_t sections, double *zi)
{
    if (sections == 0) {
        for (ptrdiff_t j = 0; j < frames * channels; j++)
            y[j] = x[j];
        return;
    }
    for (ptrdiff_t s = 0; s < sections; s++) {
        const double *src = s == 0 ? x : y;
        for (ptrdiff_t c = 0; c < channels; c += 2)
            sos_section(src, y, frames, channels, c, c + 1 < channels, sos + 6 * s, zi + 2 * s * channels);
    }
}

/* TPDF dither (two 16-bit uniform words per sample), rounding to the nearest step, saturation
 * to [-scale, scale - 1]. Writes the integers to k; hilo gets the largest and smallest rounded
 * level before saturation (0 included); returns the number of saturated samples. x is finite
 * (the reader refuses NaN and infinities); a NaN would be written as 0. */
AU_EXPORT int64_t au_tpdf_quantise(const double *x, int32_t *k, ptrdiff_t n, double scale,
                                   const uint16_t *words, int dither, double *hilo)
{
    const double top = scale - 1.0, bottom = -scale, gain = scale * 65536.0;
    double hi = 0.0, lo = 0.0;
    int64_t clipped = 0;
    for (ptrdiff_t m = 0; m < n; m++) {
        double t;
        if (dither) {
            int32_t d = (int32_t)words[2 * m] - (int32_t)words[2 * m + 1];
            t = (x[m] * gain + (double)d) * (1.0 / 65536.0);
        } else {
            t = x[m] * scale;
        }
        t = rint(t);
        if (t != t)
            t = 0.0;
        if (t > hi)
            hi = t;
        if (t < lo)
            lo = t;
        if (t > top) {
            t = top;
            clipped++;
        } else if (t < bottom) {
            t = bottom;
            clipped++;
        }
        k[m] = (int32_t)t;
    }
    hilo[0] = hi;
    hilo[1] = lo;
    return clipped;
}

/* Integers to two's-complement PCM of `width` bytes (2, 3 or 4), little- or big-endian. */
AU_EXPORT void au_pack_pcm(const int32_t *k, uint8_t *out, ptrdiff_t n, int width, int big_endian)
{
    for (ptrdiff_t j = 0; j < n; j++) {
        uint32_t v = (uint32_t)k[j];
        uint8_t *o = out + j * width;
        for (int b = 0; b < width; b++) {
            int shift = 8 * (big_endian ? width - 1 - b : b);
            o[b] = (uint8_t)(v >> shift);
        }
    }
}

/* Two's-complement PCM of `width` bytes to doubles with full scale 1.0 (k / 2^(8 width - 1)),
 * exactly as libsndfile's normalised reads give them. */
AU_EXPORT void au_unpack_pcm(const uint8_t *raw, double *y, ptrdiff_t n, int width, int big_endian)
{
    const double step = 1.0 / 2147483648.0;
    for (ptrdiff_t j = 0; j < n; j++) {
        const uint8_t *r = raw + j * width;
        uint32_t u = 0;
        for (int b = 0; b < width; b++) {
            /* byte b into its place in a left-justified 32-bit word */
            int shift = 32 - 8 * width + 8 * (big_endian ? width - 1 - b : b);
            u |= (uint32_t)r[b] << shift;
        }
        y[j] = (double)(int32_t)u * step;
    }
}

/* The true-peak scan of one block (ITU-R BS.1770-4 Annex 2, 4x; see audition/truepeak.py and annex2.py for the
 * maths of the screen). xx holds `rows` = n + 11 frames of `channels` (frame-major): 11 frames of
 * history, then the block. Window k (0 <= k < n) is xx[k .. k+11], oldest first; its four
 * interpolated values are summed one tap column at a time, oldest first (taps[col][phase]), the
 * order annex2.interpolate_windows uses, so each value is the same to the bit. With `screen`,
 * a window is interpolated only when its bound gain*max(|x[k+5]|, |x[k+6]|) + diff*max|first
 * differences| reaches t*(1 - slack), t the running maximum; the bound is a proof, so the
 * returned maximum equals that of interpolating every window. scratch: 3*rows doubles.
 * Returns the new maximum (never below t); *interpolated gets the windows interpolated. */
AU_EXPORT double au_true_peak_scan(const double *xx, ptrdiff_t n, ptrdiff_t channels, double t,
                                   const double *taps, double gain, double diff, double slack,
                                   int screen, double *scratch, int64_t *interpolated)
{
    const ptrdiff_t W = 11, rows = n + 11, nd = rows - 1;
    double *e = scratch, *g = scratch + rows, *h = scratch + 2 * rows;
    int64_t count = 0;
    for (ptrdiff_t c = 0; c < channels; c++) {
        if (screen) {
            /* |first differences|, then their maxima over 11 by prefix and suffix maxima within
             * aligned runs of 11 (van Herk / Gil-Werman): max e[k..k+10] = max(h[k], g[k+10]) */
            for (ptrdiff_t j = 0; j < nd; j++)
                e[j] = fabs(xx[(j + 1) * channels + c] - xx[j * channels + c]);
            for (ptrdiff_t start = 0; start < nd; start += W) {
                ptrdiff_t end = start + W < nd ? start + W : nd;
                g[start] = e[start];
                for (ptrdiff_t j = start + 1; j < end; j++)
                    g[j] = e[j] > g[j - 1] ? e[j] : g[j - 1];
                h[end - 1] = e[end - 1];
                for (ptrdiff_t j = end - 2; j >= start; j--)
                    h[j] = e[j] > h[j + 1] ? e[j] : h[j + 1];
            }
        }
        double threshold = t * (1.0 - slack);
        for (ptrdiff_t k = 0; k < n; k++) {
            const double *w = xx + k * channels + c;
            if (screen) {
                double a5 = fabs(w[5 * channels]), a6 = fabs(w[6 * channels]);
                double centre = a5 > a6 ? a5 : a6;
                double big = h[k] > g[k + W - 1] ? h[k] : g[k + W - 1];
                if (gain * centre + diff * big < threshold)
                    continue;
            }
            double y[4];
            for (int p = 0; p < 4; p++)
                y[p] = w[0] * taps[p];
            for (ptrdiff_t col = 1; col < 12; col++) {
                double v = w[col * channels];
                for (int p = 0; p < 4; p++)
                    y[p] = y[p] + v * taps[4 * col + p];
            }
            for (int p = 0; p < 4; p++) {
                double m = fabs(y[p]);
                if (m > t)
                    t = m;
            }
            threshold = t * (1.0 - slack);
            count++;
        }
    }
    *interpolated = count;
    return t;
}
