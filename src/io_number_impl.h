/* Private interface of io_number.c: the inline scanner of decimal numbers for the text loader. */
/*
 * io_decimal_scan() reads the plain decimal number at the start of some text and converts it to
 * the double strtod would give (bit for bit; "C" locale, rounding to nearest). It is inline so
 * that the loader's loop over fields (io_text.c) runs it without a call; the rare cases of the
 * conversion are out of line in io_number.c (io_number_slow: the Eisel-Lemire algorithm), whose
 * head comment describes the method. What it decides is documented at io_decimal_scan below;
 * everything else is left to strtod by the caller.
 *
 * Reading the digits. The mantissa's digits are accumulated into a uint64_t w, modulo 2^64:
 * leading zeros add nothing, and beyond 19 significant digits (where the modulus would matter)
 * the number is left to strtod. Data files have few digits before the point and many after it
 * ("-0.01779508537"), so the digits before the point are read one byte at a time, and those
 * after it in groups of eight bytes (SWAR, "SIMD within a register": one 64-bit load, the count
 * of its leading digits, and their value from three multiplications - D. Lemire, "Number parsing
 * at a gigabyte per second", Software: Practice and Experience 51(8), 1700-1727, 2021, section
 * 7, as in his fast_float library; the count of leading digits is our variant, so that the short
 * last group costs one step too). io_decimal_scan's eight-byte steps read only bytes inside
 * [b, e) (one byte at a time near e); io_decimal_scan_padded, for the loader's padded buffer,
 * has no bound. The steps are used on little-endian targets with GCC or Clang; elsewhere the
 * byte loop does all the work (the result is the same).
 */
#ifndef CS_IO_NUMBER_IMPL_H
#define CS_IO_NUMBER_IMPL_H

#include "io_internal.h"

#include <float.h>
#include <stddef.h>
#include <stdint.h>
#include <string.h>

#if defined(__GNUC__) && defined(__BYTE_ORDER__) && defined(__ORDER_LITTLE_ENDIAN__) && \
    __BYTE_ORDER__ == __ORDER_LITTLE_ENDIAN__
#define IO_NUMBER_SWAR 1
#else
#define IO_NUMBER_SWAR 0
#endif

#if defined(__GNUC__)
#define IO_NUMBER_INLINE static inline __attribute__((always_inline))
#else
#define IO_NUMBER_INLINE static inline
#endif

/* w * 10^q with the sign neg (w != 0, |q| < 2^21), for what the inline fast path does not
 * decide (Eisel-Lemire, io_number.c): 1 with *v bit-identical to strtod's, or 0 when it does
 * not decide (the result would be infinite, q is out of the table's range, or the rounding is
 * too close to call) - then strtod decides. */
CS_IO_INTERNAL int io_number_slow(uint64_t w, long q, int neg, double *v);

#if IO_NUMBER_SWAR
/* The eight bytes at p, the first one lowest (little-endian hosts only). */
IO_NUMBER_INLINE uint64_t io_number_load8(const char *p)
{
    uint64_t x;
    memcpy(&x, p, sizeof x);
    return x;
}

/* The first eight bytes at p less '0' each (*t), and the bytes that are not digits: the top bit
 * of each such byte set in the result (0 when all eight are digits). For a byte b with no carry
 * or borrow coming in, b + 0x46 has its top bit set for b in 0x3A..0xB9 and b - 0x30 (modulo
 * 256) for b in 0x00..0x2F and 0xB0..0xFF: together every byte but '0'..'9', for which neither
 * is set (0x76..0x7F, 0..9) and neither carries or borrows into the next byte. So carries and
 * borrows come only out of bytes that are not digits, the lowest flagged byte is exactly the
 * first byte that is not a digit, and the bytes of *t below it are exact digit values (what lies
 * above is discarded by the caller). The lowest set bit is then bit 8 n + 7, n the count of
 * leading digits. */
IO_NUMBER_INLINE uint64_t io_number_digits8(const char *p, uint64_t *t)
{
    const uint64_t x = io_number_load8(p);
    const uint64_t s = x - UINT64_C(0x3030303030303030);
    *t = s;
    return (s | (x + UINT64_C(0x4646464646464646))) & UINT64_C(0x8080808080808080);
}

/* The value of eight digits x (bytes already less '0', each 0..9), the first one in the lowest
 * byte: pairs (10 a + b in every 16-bit lane), then groups of four and the whole by two
 * multiplications with constants that place 100 a + b and 10^6 a + 10^4 b ... in the top 32
 * bits. */
IO_NUMBER_INLINE uint64_t io_number_eight_value(uint64_t x)
{
    const uint64_t mask = UINT64_C(0x000000FF000000FF);
    const uint64_t mul1 = UINT64_C(0x000F424000000064); /* 100 + (1000000 << 32) */
    const uint64_t mul2 = UINT64_C(0x0000271000000001); /* 1 + (10000 << 32) */
    x = x * 10 + (x >> 8);
    return (((x & mask) * mul1) + (((x >> 16) & mask) * mul2)) >> 32;
}
#endif

/*
 * The longest plain decimal number at b, not beyond e: an optional '-' or '+', digits with at
 * most one '.' (at least one digit), an optional exponent 'e' or 'E' with an optional sign and at
 * least one digit. Returns its end, with *v set to the double strtod gives for exactly those
 * characters, when it decides the number: at most 19 significant digits, and a finite result
 * (underflow to zero or a subnormal included). Returns NULL, with *v untouched, when there is no
 * such number at b, when an 'e' is not followed by a well-formed exponent, or when it does not
 * decide (more digits, overflow, an exponent far out of range, a rounding too close to call).
 * Blanks, hexadecimal, "inf" and "nan" are never numbers here. Only [b, e) is read. The scan
 * stops at the first character that cannot continue the number, and what it decides there
 * depends on nothing after that character; so with [b, f) a field and the character at f (if
 * f < e) a blank or a delimiter - never a digit, '.', 'e' or 'E' - io_decimal_scan(b, e, v)
 * returns f exactly when cs_decimal_to_double(b, f, v) decides the field, with the same value
 * (cs_decimal_to_double is this scan with e = f and the end checked).
 *
 * io_decimal_scan_padded(b, v) is the same scan without the bound: the text at b must go on to
 * a character that cannot continue a number (a delimiter, a line end, a NUL), and eight bytes
 * must be readable from every position up to and including that character. It returns what
 * io_decimal_scan(b, e, v) returns for any e at or after that character (the scan never looks
 * beyond the first character that ends it, whatever the eight-byte loads bring in). The text
 * loader runs it on its read buffer, which is padded for it.
 *
 * After the point the digits are taken in groups of eight bytes: the count of leading digits
 * in a group (io_number_digits8) gives at once a whole group of eight (w * 10^8 + its value)
 * or the last, short group (w * 10^n + the value of its n digits, moved to the top of the word
 * so that the bytes below act as leading zeros), so a tail of 1 to 7 digits costs one step.
 * Without the padding, a group is loaded only while eight bytes remain before e, and the
 * remaining digits are read one byte at a time.
 */
IO_NUMBER_INLINE const char *io_decimal_scan_impl(const char *b, const char *e, double *v,
                                                  int padded)
{
    static const double p10[] = {1e0,  1e1,  1e2,  1e3,  1e4,  1e5,  1e6,  1e7,
                                 1e8,  1e9,  1e10, 1e11, 1e12, 1e13, 1e14, 1e15,
                                 1e16, 1e17, 1e18, 1e19, 1e20, 1e21, 1e22};
#if IO_NUMBER_SWAR
    static const uint64_t u10[] = {1u,      10u,      100u,      1000u,     10000u,
                                   100000u, 1000000u, 10000000u, 100000000u};
#endif
/* p is before the end: always true when padded (the character ending the number stops the scan) */
#define IO_NUMBER_IN(p) (padded || (p) < e)
    const char *p = b;
    if (!IO_NUMBER_IN(p))
        return NULL;
    int neg = *p == '-';
    p += neg | (*p == '+');
    uint64_t w = 0;
    const char *ds = p; /* the mantissa's first character */
    if ((padded || e - p >= 2) && (unsigned)(unsigned char)*p - '0' <= 9 && p[1] == '.') {
        w = (unsigned)(unsigned char)*p - '0'; /* one digit before the point, the common case */
        p++;
    } else {
        for (; IO_NUMBER_IN(p); p++) {
            unsigned d = (unsigned)(unsigned char)*p - '0';
            if (d > 9)
                break;
            w = w * 10 + d;
        }
    }
    long frac = 0; /* digits after the point */
    int point = 0;
    if (IO_NUMBER_IN(p) && *p == '.') {
        const char *fs = ++p;
        point = 1;
#if IO_NUMBER_SWAR
        while (padded || e - p >= 8) {
            uint64_t t, nd = io_number_digits8(p, &t);
            if (!nd) {
                w = w * 100000000u + io_number_eight_value(t);
                p += 8;
                continue;
            }
            unsigned z = (unsigned)__builtin_ctzll(nd); /* 8 n + 7, n digits */
            if (z > 7) {
                w = w * u10[z >> 3] + io_number_eight_value(t << (71 - z));
                p += z >> 3;
            }
            goto fraction_done;
        }
#endif
        for (; IO_NUMBER_IN(p); p++) {
            unsigned d = (unsigned)(unsigned char)*p - '0';
            if (d > 9)
                break;
            w = w * 10 + d;
        }
#if IO_NUMBER_SWAR
    fraction_done:
#endif
        frac = (long)(p - fs);
    }
    long ndig = (long)(p - ds) - point; /* every mantissa digit */
    if ((unsigned long)ndig - 1 >= 19) { /* none, or more than 19 */
        if (ndig <= 0)
            return NULL;
        /* w is exact when at most 19 digits follow the leading zeros (w < 10^19 < 2^64); more
         * than 4096 digits go to strtod in any case, so that q below stays exact although only
         * the exponent's first six digits are read */
        long zeros = 0;
        for (const char *s = ds; s < p && (*s == '0' || *s == '.'); s++)
            zeros += *s == '0';
        if (ndig - zeros > 19 || ndig > 4096)
            return NULL;
    }
    long ex = 0;
    if (IO_NUMBER_IN(p) && (*p | 0x20) == 'e') {
        int eneg = 0;
        p++;
        if (IO_NUMBER_IN(p) && (*p == '-' || *p == '+'))
            eneg = *p++ == '-';
        if (!IO_NUMBER_IN(p) || (unsigned)(unsigned char)*p - '0' > 9)
            return NULL;
        for (; IO_NUMBER_IN(p); p++) {
            unsigned d = (unsigned)(unsigned char)*p - '0';
            if (d > 9)
                break;
            if (ex < 100000)
                ex = ex * 10 + (long)d;
        }
        if (eneg)
            ex = -ex;
    }
#undef IO_NUMBER_IN
    long q = ex - frac; /* |ex| < 10^6, frac <= 4096 */
#if defined(FLT_EVAL_METHOD) && FLT_EVAL_METHOD == 0
    /* Clinger's fast path (W. D. Clinger, "How to read floating point numbers accurately",
     * PLDI 1990): w and 10^|q| are exact doubles, so one correctly rounded operation gives the
     * correctly rounded result. It needs no extended intermediate precision (FLT_EVAL_METHOD 0);
     * elsewhere io_number_slow decides these numbers too. */
    if ((unsigned long)(q + 22) <= 44 && w <= (uint64_t)1 << 53) {
        double d = (double)(int64_t)w; /* w = 0 gives +0 and, negated, -0 */
        d = q < 0 ? d / p10[-q] : d * p10[q];
        *v = neg ? -d : d;
        return p;
    }
#else
    (void)p10;
#endif
    if (w == 0) {
        *v = neg ? -0.0 : 0.0;
        return p;
    }
    return io_number_slow(w, q, neg, v) ? p : NULL;
}

IO_NUMBER_INLINE const char *io_decimal_scan(const char *b, const char *e, double *v)
{
    return io_decimal_scan_impl(b, e, v, 0);
}

IO_NUMBER_INLINE const char *io_decimal_scan_padded(const char *b, double *v)
{
    return io_decimal_scan_impl(b, NULL, v, 1);
}

#endif /* CS_IO_NUMBER_IMPL_H */
