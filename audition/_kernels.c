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
 * the transposed direct form II of scipy.signal.sosfilt, operation for operation. y may be x. */
AU_EXPORT void au_sos_filter(const double *x, double *y, ptrdiff_t frames, ptrdiff_t channels,
                             const double *sos, ptrdiff_t sections, double *zi)
{
    for (ptrdiff_t i = 0; i < frames; i++) {
        for (ptrdiff_t c = 0; c < channels; c++) {
            double v = x[i * channels + c];
            for (ptrdiff_t s = 0; s < sections; s++) {
                const double *q = sos + 6 * s;
                double *z0 = zi + (2 * s) * channels + c;
                double *z1 = z0 + channels;
                double w = q[0] * v + *z0;
                *z0 = q[1] * v - q[4] * w + *z1;
                *z1 = q[2] * v - q[5] * w;
                v = w;
            }
            y[i * channels + c] = v;
        }
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
