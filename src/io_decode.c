/* Binary numbers of every integer and IEEE type in either byte order, as doubles (raw, .npy). */
/*
 * The raw and .npy loaders read the same kinds of numbers: two's complement and unsigned integers
 * of 1, 2, 4 and 8 bytes and IEEE 754 binary32 / binary64, little- or big-endian, real or as the
 * two halves of a complex value. Each value is assembled from its bytes in the stated order, so
 * the result does not depend on the host's byte order, and checked for NaN/Inf as it is decoded,
 * so that a loader can report the first bad value with its byte offset without a second pass.
 * The exact-width signed types are two's complement by the C standard, so memcpy from the
 * unsigned pattern is well defined.
 */
#include "io_internal.h"

#include <math.h>
#include <stdint.h>
#include <string.h>

_Static_assert(sizeof(float) == 4 && sizeof(double) == 8, "IEEE 754 binary32/binary64 expected");

int io_host_is_little_endian(void)
{
    const uint16_t one = 1;
    unsigned char b;
    memcpy(&b, &one, 1);
    return b == 1;
}

static uint16_t rd16(const unsigned char *p, int big)
{
    return big ? (uint16_t)((unsigned)p[0] << 8 | p[1]) : (uint16_t)(p[0] | (unsigned)p[1] << 8);
}

static uint32_t rd32(const unsigned char *p, int big)
{
    if (big)
        return (uint32_t)p[0] << 24 | (uint32_t)p[1] << 16 | (uint32_t)p[2] << 8 | p[3];
    return (uint32_t)p[3] << 24 | (uint32_t)p[2] << 16 | (uint32_t)p[1] << 8 | p[0];
}

static uint64_t rd64(const unsigned char *p, int big)
{
    uint64_t hi = rd32(p + (big ? 0 : 4), big), lo = rd32(p + (big ? 4 : 0), big);
    return hi << 32 | lo;
}

static double v_i8(const unsigned char *p, int big)
{
    (void)big;
    int8_t s;
    memcpy(&s, p, 1);
    return s;
}

static double v_u8(const unsigned char *p, int big)
{
    (void)big;
    return p[0];
}

static double v_i16(const unsigned char *p, int big)
{
    uint16_t u = rd16(p, big);
    int16_t s;
    memcpy(&s, &u, sizeof s);
    return s;
}

static double v_u16(const unsigned char *p, int big)
{
    return rd16(p, big);
}

static double v_i32(const unsigned char *p, int big)
{
    uint32_t u = rd32(p, big);
    int32_t s;
    memcpy(&s, &u, sizeof s);
    return s;
}

static double v_u32(const unsigned char *p, int big)
{
    return rd32(p, big);
}

static double v_i64(const unsigned char *p, int big)
{
    uint64_t u = rd64(p, big);
    int64_t s;
    memcpy(&s, &u, sizeof s);
    return (double)s; /* rounds beyond 2^53 */
}

static double v_u64(const unsigned char *p, int big)
{
    return (double)rd64(p, big);
}

static double v_f32(const unsigned char *p, int big)
{
    uint32_t u = rd32(p, big);
    float f;
    memcpy(&f, &u, sizeof f);
    return f;
}

static double v_f64(const unsigned char *p, int big)
{
    uint64_t u = rd64(p, big);
    double d;
    memcpy(&d, &u, sizeof d);
    return d;
}

size_t io_decode(const unsigned char *src, size_t n, const io_numtype *t, double scale,
                 double *dst)
{
    size_t i, sc = t->scalar;
    int big = t->big;
#define IO_LOOP(FN)                                                         \
    for (i = 0; i < n; i++) {                                               \
        double v = FN(src + i * sc, big) * scale;                           \
        dst[i] = v;                                                         \
        if (!isfinite(v))                                                   \
            return i;                                                       \
    }                                                                       \
    return n
    if (t->kind == IO_NUM_FLOAT) {
        if (sc == 4) {
            IO_LOOP(v_f32);
        }
        IO_LOOP(v_f64);
    }
    int s = t->kind == IO_NUM_SIGNED;
    switch (sc) {
    case 1: if (s) { IO_LOOP(v_i8); } IO_LOOP(v_u8);
    case 2: if (s) { IO_LOOP(v_i16); } IO_LOOP(v_u16);
    case 4: if (s) { IO_LOOP(v_i32); } IO_LOOP(v_u32);
    default: if (s) { IO_LOOP(v_i64); } IO_LOOP(v_u64);
    }
#undef IO_LOOP
}

size_t io_first_nonfinite(const double *v, size_t n)
{
    for (size_t i = 0; i < n; i++)
        if (!isfinite(v[i]))
            return i;
    return n;
}
