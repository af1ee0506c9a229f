/* Check suite for the fast decimal-to-double parser of the text loader (src/io_number.c).
 *
 * Reference: the C standard library's strtod ("C" locale, rounding to nearest) - comparing a fast
 * parser bit for bit with strtod is common practice. The methods under test are Clinger's fast
 * path (W. D. Clinger, "How to read floating point numbers accurately", PLDI 1990) and the
 * Eisel-Lemire algorithm (D. Lemire, "Number parsing at a gigabyte per second", Software:
 * Practice and Experience 51(8), 1700-1727, 2021).
 *
 * The property: whenever cs_decimal_to_double decides a string, strtod reads the whole string
 * to a finite double (so the loader's old strtod path would have accepted it) with the same
 * bits; strings it does not decide go to that strtod path unchanged. The loader's own scanner,
 * io_decimal_scan (io_number_impl.h: digits eight at a time, then the same conversion), must
 * stop exactly where the number ends and decide exactly the same strings; so must its unbounded
 * form io_decimal_scan_padded, which the loader runs on its zero-padded read buffer. The file
 * under test is compiled into this program, since its functions are internal to the library. */
#include "../src/io_number.c"

#include <collshift/io.h>

#include <check.h>
#include <gsl/gsl_rng.h>
#include <inttypes.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "testutil.h"

/* The loader's strtod path (num_fast before io_number.c): the whole field, finite, decimal. */
static int ref_parse(const char *s, double *v)
{
    char *end;
    *v = strtod(s, &end);
    if (*s == '\0' || *end != '\0' || !isfinite(*v))
        return 0;
    const char *h = s + (*s == '-' || *s == '+');
    return !(h[0] == '0' && (h[1] == 'x' || h[1] == 'X'));
}

static uint64_t bits_of(double x)
{
    uint64_t u;
    memcpy(&u, &x, sizeof u);
    return u;
}

/* Compare one string with the reference; returns 1 when the fast parser decided it. */
static int check_one(const char *s)
{
    double f = 0.0, r = 0.0;
    int dec = cs_decimal_to_double(s, s + strlen(s), &f);
    int ok = ref_parse(s, &r);
    if (dec) {
        /* reference: C standard strtod (common practice) */
        ck_assert_msg(ok, "'%s': decided as %.17g, but strtod does not accept it", s, f);
        ck_assert_msg(bits_of(f) == bits_of(r),
                      "'%s': fast %.17g (0x%016" PRIx64 ") != strtod %.17g (0x%016" PRIx64 ")", s,
                      f, bits_of(f), r, bits_of(r));
    }
    return dec;
}

/* ---------------------------------------------------------------- hard cases */

static const struct hard_case {
    const char *s;
    int decided; /* 1: the fast parser must decide it; 0: must leave it to strtod; -1: either */
} hard[] = {
    {"0.1", 1},
    {"1e22", 1},
    {"1e23", 1},                       /* beyond Clinger: Eisel-Lemire */
    {"9007199254740993", 1},           /* 2^53 + 1: halfway, ties to even */
    {"9007199254740995", 1},
    {"9007199254740992", 1},
    {"2.2250738585072011e-308", 1},    /* largest subnormal neighbourhood */
    {"2.2250738585072014e-308", 1},    /* smallest normal */
    {"4.9406564584124654e-324", 1},    /* smallest subnormal */
    {"2.4703282292062327e-324", 1},    /* just below half the smallest subnormal: 0 */
    {"2.4703282292062328e-324", 1},    /* just above: the smallest subnormal */
    {"1.7976931348623157e308", 1},     /* largest double */
    {"1.7976931348623158e308", 1},     /* rounds down to the largest double */
    {"1.7976931348623159e308", 0},     /* overflows: strtod path (refused, infinite) */
    {"1e308", 1},
    {"1e309", 0},
    {"1e-400", 0},                     /* underflow: strtod path (0, accepted) */
    {"1e-340", 1},                     /* underflow inside the table range: 0 */
    {"-1e-340", 1},
    {"-0", 1},
    {"0", 1},
    {"+0.0", 1},
    {"0e999999999999", 1},
    {"-0.0e-5", 1},
    {"+3.5", 1},
    {".5", 1},
    {"5.", 1},
    {"-.5e1", 1},
    {"1E5", 1},
    {"1e+5", 1},
    {"1e-5", 1},
    {"000000000000000000000000001.5", 1},
    {"0.000000000000000000000000000000000000000001", 1},
    {"9100001235", 1},
    {"0.00763774619", 1},
    {"0.0102551", 1},
    {"1.0000000000000000000001", 0},   /* more than 19 significant digits */
    {"12345678901234567890", 0},
    {"1234567890123456789", 1},
    {"18446744073709551615", 0},
    {"9999999999999999999", 1},
    {"7.2057594037927933e16", 1},
    {"3.0517578125e-05", 1},
    {"1.00000000000000011102230246251565404236316680908203125", 0}, /* exact halfway, long */
    {"4503599627370496.5", 1},         /* 2^52 + 0.5: halfway, ties to even */
    {"4503599627370497.5", 1},
    {"1e", 0},
    {"e5", 0},
    {"1.2.3", 0},
    {"", 0},
    {"-", 0},
    {"+", 0},
    {".", 0},
    {"-.", 0},
    {".e1", 0},
    {"1e+", 0},
    {"1e-", 0},
    {"1,5", 0},
    {"0x10", 0},
    {"0x1p3", 0},
    {"inf", 0},
    {"-Infinity", 0},
    {"nan", 0},
    {"NaN", 0},
    {" 1", 0},
    {"1 ", 0},
    {"1d5", 0},
    {"--1", 0},
    {"+-1", 0},
    {"1e5.5", 0},
    /* cases named for this suite: halfway and near-halfway values, 19 and 20 digits */
    {"8.589973e9", 1},
    {"9007199254740993e0", 1},         /* 2^53 + 1 again, with an exponent */
    {"9.007199254740993e15", 1},
    {"0.9007199254740993e16", 1},
    {"90071992547409930e-1", 1},       /* > 2^53 before the exponent: Eisel-Lemire */
    {"9007199254740994.5", 1},         /* 17 digits, w > 2^53: Eisel-Lemire */
    {"9007199254740995.0", 1},         /* halfway between 2^53 + 2 and 2^53 + 4: ties to even */
    {"2.2250738585072012e-308", 1},
    {"2.225073858507201136057409796709131975934819546351645648e-308", 0}, /* long: strtod */
    {"0.1e1", 1},
    {"0.1000000000000000055511151231257827", 0}, /* 0.1 exactly in binary, 34 digits */
    {"0.10000000000000000555", 0},     /* 20 significant digits */
    {"0.1000000000000000055", 1},      /* 19 */
    {"1000000000000000000", 1},        /* 10^18, 19 digits */
    {"10000000000000000000", 0},       /* 10^19, 20 digits */
    {"1000000000000000000.0", 0},      /* 20 digits written, trailing zero included */
    {"9223372036854775807", 1},        /* 2^63 - 1: 19 digits, beyond 2^53 */
    {"9223372036854775808", 1},        /* 2^63 */
    {"1.844674407370955161e19", 1},    /* 19 digits, just below 2^64 */
    {"0.000000000000000000001234567890123456789", 1}, /* 19 significant after 21 zeros */
    {"123456789012345678.9", 1},       /* 19 digits around the point */
    {"00000000000000000000000.00000000000000000000001", 1},
    {"1e-22", 1},                      /* the last power of Clinger's table */
    {"1e-23", 1},
    {"4.35e-22", 1},
    {"9007199254740992e22", 1},        /* 2^53 * 10^22: Clinger's largest product */
    {"9007199254740993e22", 1},        /* w > 2^53: Eisel-Lemire */
    {"3.4028236692093846346e38", 0},   /* 20 significant digits: strtod */
    {"7e-324", 1},                     /* rounds to the smallest subnormal */
    {"2e-324", 1},                     /* rounds to zero */
    {"1e-342", -1},                    /* the table's lower end (zero) */
    {"1e-343", 0},                     /* beyond the table: strtod (zero) */
    {"1e308", 1},
    {"10e307", 1},
    {"0.1e309", 1},
    {"1e00000000000000000000022", 1},  /* leading zeros of the exponent */
    {"-1E-0", 1},
    {"+.1", 1},
    /* malformed: never decided (strtod refuses them, or reads only a prefix) */
    {"1..2", 0},
    {"1.e", 0},
    {"+.", 0},
    {"1e+-5", 0},
    {"1ee5", 0},
    {"e", 0},
    {"E5", 0},
    {"1e5e5", 0},
    {".e", 0},
    {"0x", 0},
    {"0X1P-2", 0},
    {"infinity", 0},
    {"nan(123)", 0},
    {"\t1", 0},
    {"1\t", 0},
    {"1\r", 0},
    {"1_000", 0},
    {"1'000", 0},
    {"\"1\"", 0},
    {"\xef\xbc\x91", 0},            /* U+FF11, a full-width digit one */
    {"12345678\x80", 0},
    {"12345678:", 0},                  /* ':' is '9' + 1 */
    {"1234567/", 0},                   /* '/' is '0' - 1 */
    {"0.12345678/", 0},
    {"0.1234567:9", 0},
    {"0.123456789012345678", 1},      /* 8 + 8 + 2 digits after the point */
    {"0.12345678", 1},                 /* exactly eight, then the end */
    {"-0.1234567", 1},
    {"0.1234567890123456789", 1},      /* 19 after the point */
    {"0.12345678901234567890", 0},     /* 20 */
};

START_TEST(test_hard_cases)
{
    for (size_t i = 0; i < sizeof hard / sizeof hard[0]; i++) {
        int dec = check_one(hard[i].s);
        if (hard[i].decided >= 0)
            ck_assert_msg(dec == hard[i].decided, "'%s': decided %d, expected %d", hard[i].s, dec,
                          hard[i].decided);
    }
    /* a few exact values (method: Clinger 1990 / Lemire 2021; reference strtod) */
    double v;
    const char *z = "-0";
    ck_assert(cs_decimal_to_double(z, z + 2, &v) && v == 0.0 && signbit(v));
    const char *h = "9007199254740993";
    ck_assert(cs_decimal_to_double(h, h + strlen(h), &v) && v == 9007199254740992.0);
    const char *u = "1e-340";
    ck_assert(cs_decimal_to_double(u, u + strlen(u), &v) && v == 0.0 && !signbit(v));
    /* only [b, e) is read: the rest of a line is not part of the field */
    const char *line = "2.5,7";
    ck_assert(cs_decimal_to_double(line, line + 3, &v) && v == 2.5);
}
END_TEST

/* ---------------------------------------------------------------- random strings */

/* Random decimal strings of varied shapes, compared with strtod (reference: C standard strtod,
 * common practice); seed fixed so that a failure is reproducible. */
START_TEST(test_random_strings)
{
    gsl_rng *g = gsl_rng_alloc(gsl_rng_mt19937);
    ck_assert_ptr_nonnull(g);
    gsl_rng_set(g, 20210801);
    const long n = 1200000;
    long decided = 0;
    char s[128];
    for (long k = 0; k < n; k++) {
        unsigned shape = (unsigned)(k % 6);
        if (shape == 0) {
            /* any finite double, printed with 17 (round-trip), 16 or 15 significant digits */
            uint64_t u = ((uint64_t)gsl_rng_get(g) << 32) ^ gsl_rng_get(g);
            double x;
            memcpy(&x, &u, sizeof x);
            if (!isfinite(x))
                x = 1.5;
            snprintf(s, sizeof s, "%.*g", 15 + (int)gsl_rng_uniform_int(g, 3), x);
        } else if (shape == 1) {
            /* lab-like values: uniform magnitudes over 1e-12 .. 1e12, 1..17 digits, %g/%e/%f */
            double x = pow(10.0, -12.0 + 24.0 * gsl_rng_uniform(g)) *
                       (gsl_rng_uniform(g) < 0.5 ? -1.0 : 1.0);
            int prec = 1 + (int)gsl_rng_uniform_int(g, 17);
            unsigned f = (unsigned)gsl_rng_uniform_int(g, 3);
            if (f == 0)
                snprintf(s, sizeof s, "%.*g", prec, x);
            else if (f == 1)
                snprintf(s, sizeof s, "%.*e", prec, x);
            else
                snprintf(s, sizeof s, "%.*f", prec, fmod(x, 1e6));
        } else if (shape == 2 || shape == 3) {
            /* random digit strings: 1..22 digits, a point anywhere (or none), leading zeros,
             * an exponent over the whole range and beyond */
            size_t len = 0;
            if (gsl_rng_uniform(g) < 0.3)
                s[len++] = gsl_rng_uniform(g) < 0.5 ? '-' : '+';
            int nd = 1 + (int)gsl_rng_uniform_int(g, 22);
            int lead = gsl_rng_uniform(g) < 0.2 ? (int)gsl_rng_uniform_int(g, 5) : 0;
            int point = (int)gsl_rng_uniform_int(g, (unsigned long)(nd + lead + 2)) - 1;
            for (int i = 0; i < lead + nd; i++) {
                if (i == point)
                    s[len++] = '.';
                s[len++] = i < lead ? '0' : (char)('0' + gsl_rng_uniform_int(g, 10));
            }
            if (point == lead + nd)
                s[len++] = '.';
            if (gsl_rng_uniform(g) < 0.7) {
                long ex = (long)gsl_rng_uniform_int(g, 700) - 360;
                len += (size_t)snprintf(s + len, sizeof s - len, "%c%s%ld",
                                        gsl_rng_uniform(g) < 0.5 ? 'e' : 'E',
                                        ex >= 0 && gsl_rng_uniform(g) < 0.3 ? "+" : "", ex);
            }
            s[len] = '\0';
        } else if (shape == 4) {
            /* integers near powers of two (halfway cases of round-to-even), times 10^k */
            int b = 53 + (int)gsl_rng_uniform_int(g, 11);
            uint64_t base = (uint64_t)1 << b;
            uint64_t off = gsl_rng_uniform_int(g, 4096);
            uint64_t m = gsl_rng_uniform(g) < 0.5 ? base + off : base - off;
            int k2 = (int)gsl_rng_uniform_int(g, 41) - 20;
            if (k2 == 0)
                snprintf(s, sizeof s, "%" PRIu64, m);
            else
                snprintf(s, sizeof s, "%" PRIu64 "e%d", m, k2);
        } else {
            /* exact binary fractions written out: m / 2^j, up to 19 digits (exactly halfway
             * between doubles when m has 54 significant bits) */
            uint64_t m = ((uint64_t)gsl_rng_get(g) << 22) ^ gsl_rng_get(g);
            m &= ((uint64_t)1 << 54) - 1;
            m |= 1;
            int j = 1 + (int)gsl_rng_uniform_int(g, 8);
            /* m / 2^j = m * 5^j / 10^j */
            uint64_t p5 = 1;
            for (int i = 0; i < j; i++)
                p5 *= 5;
            if (m > UINT64_MAX / p5)
                m >>= 8;
            uint64_t w = m * p5;
            snprintf(s, sizeof s, "%" PRIu64 "e-%d", w, j);
        }
        decided += check_one(s);
    }
    gsl_rng_free(g);
    /* the fast parser must carry most of the load (else it is not worth its place) */
    ck_assert_msg(decided > n / 2, "only %ld of %ld random strings decided", decided, n);
}
END_TEST

/* ---------------------------------------------------------------- the loader's scanner */

/* io_decimal_scan_padded on the n bytes at s followed by eight zero bytes, in a block of
 * exactly that size (under AddressSanitizer a read beyond it fails): it must end where
 * io_decimal_scan(s, s + n) ends (*end, NULL for none), with the same bits (*a). */
static void check_padded(const char *s, size_t n, const char *end, double a)
{
    char *blk = malloc(n + 8);
    ck_assert_ptr_nonnull(blk);
    memcpy(blk, s, n);
    memset(blk + n, 0, 8);
    double p = 0.0;
    const char *pend = io_decimal_scan_padded(blk, &p);
    long got = pend ? (long)(pend - blk) : -1, want = end ? (long)(end - s) : -1;
    ck_assert_msg(got == want, "'%.*s': padded scan ends at %ld, bounded at %ld", (int)n, s, got,
                  want);
    ck_assert_msg(!end || bits_of(p) == bits_of(a), "'%.*s': padded %.17g != bounded %.17g",
                  (int)n, s, p, a);
    free(blk);
}

/* io_decimal_scan on [s, s + n) (n may run past the number into what follows it), checked
 * against cs_decimal_to_double on the number alone: the scan ends exactly at the end of a
 * number that cs_decimal_to_double decides, with the same bits, and nowhere else. The padded
 * scan is checked against it (check_padded). */
static void check_scan(const char *s, size_t n, size_t numlen)
{
    double a = 0.0, b = 0.0;
    const char *end = io_decimal_scan(s, s + n, &a);
    check_padded(s, n, end, a);
    int dec = cs_decimal_to_double(s, s + numlen, &b);
    if (dec) {
        ck_assert_msg(end == s + numlen, "'%.*s' + '%.*s': scan ends at %td, expected %zu",
                      (int)numlen, s, (int)(n - numlen), s + numlen, end ? end - s : -1, numlen);
        ck_assert_msg(bits_of(a) == bits_of(b), "'%.*s': scan %.17g != %.17g", (int)numlen, s, a,
                      b);
    } else {
        ck_assert_msg(end != s + numlen, "'%.*s': scanned, but not decided as a field",
                      (int)numlen, s);
    }
    if (end) {
        /* whatever the scan reads is a field cs_decimal_to_double decides, with the same value */
        double c = 0.0;
        ck_assert_msg(cs_decimal_to_double(s, end, &c) && bits_of(c) == bits_of(a),
                      "'%.*s': scan to %td not decided alone", (int)n, s, end - s);
        ck_assert(end > s && end <= s + n);
    }
}

static const struct scan_case {
    const char *s;
    long end; /* where io_decimal_scan stops; -1: NULL */
} scan_cases[] = {
    {"1.5,2", 3},
    {"1.5 ", 3},
    {"-0.01779508537,0.003903551624", 14},
    {"0.003903551624\t1", 14},
    {"131.071;1", 7},
    {"1e5,", 3},
    {"1E-5x", 4},
    {"1e", -1},       /* an 'e' without exponent digits: no number here (strtod's "1" is not) */
    {"1e,5", -1},
    {"1e+", -1},
    {"1e-x", -1},
    {"1.2.3", 3},     /* a number, then more: the field "1.2.3" is refused by the end check */
    {"1..2", 2},
    {".5.", 2},
    {"5.,", 2},
    {".", -1},
    {"-", -1},
    {"+", -1},
    {"-.e1", -1},
    {"", -1},
    {" 1", -1},       /* blanks are the loader's to trim */
    {"x1", -1},
    {"0x10", 1},      /* "0", then 'x': the field "0x10" is refused by the end check */
    {"12345678901234567890,1", -1}, /* 20 digits: left to strtod */
    {"0.12345678,", 10},
    {"0.123456789,", 11},
    {"0.1234567890123456,", 18},
    {"0.12345678\"", 10},
    {"1e400,", -1},   /* overflow: left to strtod */
    {"-0,", 2},
    {"1e-400,", -1},  /* beyond the table: left to strtod */
    /* the eight-byte groups after the point: every count of digits in the last group, and bytes
     * next to the digits that a group must not take for digits ('/' and ':' border '0'..'9';
     * bytes >= 0x80, and >= 0xFA, which carry when 0x46 is added) */
    {"0.1/2", 3},
    {"0.1:2", 3},
    {"0.1234567\xff" "1", 9},
    {"0.12345678\xfa" "1", 10},
    {"0.12345678\x80", 10},
    {"0.123456789\xba", 11},
    {"2.25\xc0", 4},
    {"0.1234567812345678,", 18},
    {"0.12345678123456789,", 19},
    {"0.123456781234567891;", 20},
    {"0.1234567812345678e3,", 20},
    {"3.00000000\t", 10},
};

START_TEST(test_scan_cases)
{
    for (size_t i = 0; i < sizeof scan_cases / sizeof scan_cases[0]; i++) {
        const char *s = scan_cases[i].s;
        size_t n = strlen(s);
        double v = 0.0;
        const char *end = io_decimal_scan(s, s + n, &v);
        long got = end ? (long)(end - s) : -1;
        ck_assert_msg(got == scan_cases[i].end, "'%s': scan ends at %ld, expected %ld", s, got,
                      scan_cases[i].end);
        check_padded(s, n, end, v);
        if (end) {
            /* reference: C standard strtod on the scanned characters (common practice) */
            char tmp[64];
            snprintf(tmp, sizeof tmp, "%.*s", (int)got, s);
            ck_assert_msg(bits_of(v) == bits_of(strtod(tmp, NULL)), "'%s': %.17g", tmp, v);
        }
    }
    /* nothing beyond e is read: "1.25" cut after "1.2", or after "1." */
    const char *t = "1.25";
    double v;
    ck_assert(io_decimal_scan(t, t + 3, &v) == t + 3 && v == 1.2);
    ck_assert(io_decimal_scan(t, t + 2, &v) == t + 2 && v == 1.0);
}
END_TEST

/* A random decimal string as this suite's brief asks: a sign or none, 1-25 digits (leading
 * zeros as they come), a point anywhere or none, an exponent in -330..330 or none ('e' or 'E',
 * with or without '+', sometimes with leading zeros). Returns its length. */
static size_t random_decimal(gsl_rng *g, char *s, size_t cap)
{
    size_t len = 0;
    double u = gsl_rng_uniform(g);
    if (u < 0.25)
        s[len++] = '-';
    else if (u < 0.35)
        s[len++] = '+';
    int nd = 1 + (int)gsl_rng_uniform_int(g, 25);
    int point = (int)gsl_rng_uniform_int(g, (unsigned long)nd + 2) - 1; /* -1: none */
    for (int i = 0; i < nd; i++) {
        if (i == point)
            s[len++] = '.';
        s[len++] = (char)('0' + gsl_rng_uniform_int(g, 10));
    }
    if (point == nd)
        s[len++] = '.';
    if (gsl_rng_uniform(g) < 0.75) {
        long ex = (long)gsl_rng_uniform_int(g, 661) - 330;
        int zeros = gsl_rng_uniform(g) < 0.1 ? (int)gsl_rng_uniform_int(g, 4) : 0;
        len += (size_t)snprintf(s + len, cap - len, "%c%s%0*ld",
                                gsl_rng_uniform(g) < 0.5 ? 'e' : 'E',
                                ex >= 0 && gsl_rng_uniform(g) < 0.3 ? "+" : "",
                                ex < 0 ? zeros + 2 : zeros + 1, ex);
    }
    s[len] = '\0';
    return len;
}

/* Random decimal strings (reference: C standard strtod, common practice), each also scanned by
 * the loader's scanner with a delimiter or other non-number character after it, and in a
 * mutated copy (one character replaced, inserted or removed) that is often malformed. */
START_TEST(test_random_decimals)
{
    static const char after[] = ",; \t\"x#\r/:Z";
    static const char mut[] = "0123456789.eE+-, x/:";
    gsl_rng *g = gsl_rng_alloc(gsl_rng_mt19937);
    ck_assert_ptr_nonnull(g);
    gsl_rng_set(g, 20261202);
    const long n = 250000;
    long decided = 0;
    char s[128], m[128];
    for (long k = 0; k < n; k++) {
        size_t len = random_decimal(g, s, sizeof s - 40);
        decided += check_one(s);
        /* followed by a character that cannot continue a number, then more text */
        memcpy(m, s, len);
        m[len] = after[gsl_rng_uniform_int(g, sizeof after - 1)];
        memcpy(m + len + 1, "12345678.9", 11);
        check_scan(m, len + 11, len);
        check_scan(s, len, len);
        /* mutated: replace, insert or remove one character */
        size_t at = gsl_rng_uniform_int(g, len + 1), ml = 0;
        unsigned op = (unsigned)gsl_rng_uniform_int(g, 3);
        char ch = mut[gsl_rng_uniform_int(g, sizeof mut - 1)];
        for (size_t i = 0; i <= len; i++) {
            if (i == at && op != 2)
                m[ml++] = ch;
            if (i < len && !(i == at && op != 1))
                m[ml++] = s[i];
        }
        m[ml] = '\0';
        check_one(m);
        check_scan(m, ml, ml);
    }
    gsl_rng_free(g);
    /* most strings have at most 19 significant digits and an exponent in range: most must be
     * decided without strtod (about 0.7 of them here) */
    ck_assert_msg(decided > n / 2, "only %ld of %ld random strings decided", decided, n);
}
END_TEST

/* ---------------------------------------------------------------- through the loader */

/* The loader gives the values strtod gives (reference: C standard strtod), keeps reading an
 * underflowing value as 0 (as with strtod's ERANGE result before), and still refuses
 * overflow, hexadecimal, NaN and decimal commas with its messages. */
/* Load `text` as a file called `name` with default options. */
static int load_text(const char *name, const char *text, cs_loaded *out, cs_error *err)
{
    cs_load_options o;
    cs_load_options_init(&o);
    cs_loaded_init(out);
    cs_error_clear(err);
    return cs_io_text_load(tu_write_text(name, text), &o, out, err);
}

START_TEST(test_loader_values)
{
    static const char *vals[] = {
        "0.1",  "1e23", "9007199254740993", "2.2250738585072011e-308", "-0", "+3.5", ".5", "5.",
        "1e-400", "4.9406564584124654e-324", "1.7976931348623157e308", "0.00763774619",
        "0.0102551", "1.00000000000000011102230246251565404236316680908203125"};
    size_t n = sizeof vals / sizeof vals[0];
    char text[4096];
    size_t len = 0;
    for (size_t i = 0; i < n; i++)
        len += (size_t)snprintf(text + len, sizeof text - len, "%zu,%s\n", i + 1, vals[i]);
    cs_loaded out;
    cs_error err;
    int rc = load_text("num.csv", text, &out, &err);
    ck_assert_msg(rc == CS_OK, "load failed (%d): line %ld: %s", rc, err.line, err.msg);
    const double *y = NULL;
    size_t got = 0;
    if (out.kind == CS_KIND_SPECTRUM) {
        y = out.spectrum->y;
        got = out.spectrum->n;
    } else {
        ck_assert_int_eq(out.kind, CS_KIND_RECORD);
        y = out.records[0]->data;
        got = out.records[0]->n;
    }
    ck_assert_uint_eq(got, n);
    for (size_t i = 0; i < n; i++) {
        double r = strtod(vals[i], NULL);
        ck_assert_msg(bits_of(y[i]) == bits_of(r), "'%s' loaded as %.17g, strtod %.17g", vals[i],
                      y[i], r);
    }
    cs_loaded_release(&out);

    static const struct {
        const char *field, *msg;
    } bad[] = {
        {"1e400", "too large for a double"},
        {"0x10", "hexadecimal"},
        {"nan", "NaN"},
        {"inf", "infinite"},
        {"1e", "not a number"},
        {"1.2.3", "not a number"},
        {"e5", "not a number"},
    };
    for (size_t i = 0; i < sizeof bad / sizeof bad[0]; i++) {
        snprintf(text, sizeof text, "1,1\n2,%s\n3,3\n4,4\n", bad[i].field);
        rc = load_text("bad.csv", text, &out, &err);
        ck_assert_msg(rc != CS_OK, "'%s' accepted", bad[i].field);
        ck_assert_msg(strstr(err.msg, bad[i].msg), "'%s': message '%s' lacks '%s'", bad[i].field,
                      err.msg, bad[i].msg);
        ck_assert_int_eq(err.line, 2);
        cs_loaded_release(&out);
    }
}
END_TEST

/* Random numbers in the I and Q columns of records written with each delimiter, blanks around
 * fields and some fields quoted: the loader (whose fields in use go through io_decimal_scan, or
 * the general path when quoted or not decided there) gives strtod's value for every one
 * (reference: C standard strtod, common practice). Numbers that strtod reads as infinite are
 * left out (the loader refuses them; test_loader_malformed). */
START_TEST(test_loader_random)
{
    static const char delims[] = {',', ';', '\t', ' '};
    static const char *blanks[] = {"", "", "", " ", "  ", "\t", " \t "}; /* no tab with '\t' */
    gsl_rng *g = gsl_rng_alloc(gsl_rng_mt19937);
    ck_assert_ptr_nonnull(g);
    gsl_rng_set(g, 8);
    enum { ROWS = 4000 };
    static char nums[ROWS][2][64];
    size_t cap = (size_t)ROWS * 200 + 64;
    char *text = malloc(cap);
    ck_assert_ptr_nonnull(text);
    for (size_t di = 0; di < sizeof delims; di++) {
        char d = delims[di];
        unsigned long nb = d == '\t' ? 5 : 7;
        size_t len = (size_t)snprintf(text, cap, "time_us%ci%cq\n", d, d);
        for (size_t r = 0; r < ROWS; r++) {
            const char *lead = blanks[gsl_rng_uniform_int(g, nb)];
            len += (size_t)snprintf(text + len, cap - len, "%s%zu", lead, r);
            for (int k = 0; k < 2; k++) {
                char *x = nums[r][k];
                do
                    random_decimal(g, x, 64);
                while (!isfinite(strtod(x, NULL)));
                const char *q = d != ' ' && gsl_rng_uniform(g) < 0.05 ? "\"" : "";
                const char *b1 = blanks[gsl_rng_uniform_int(g, nb)];
                const char *b2 = blanks[gsl_rng_uniform_int(g, nb)];
                const char *b3 = k == 1 ? blanks[gsl_rng_uniform_int(g, nb)] : "";
                len += (size_t)snprintf(text + len, cap - len, "%s%c%s%s%s%s%s", b1, d, b2, q, x,
                                        q, b3);
            }
            text[len++] = '\n';
            text[len] = '\0';
        }
        cs_loaded out;
        cs_error err;
        int rc = load_text("random.csv", text, &out, &err);
        ck_assert_msg(rc == CS_OK, "delimiter '%c': load failed (%d): line %ld: %s", d, rc,
                      err.line, err.msg);
        ck_assert_int_eq(out.kind, CS_KIND_RECORD);
        const cs_record *rec = out.records[0];
        ck_assert_uint_eq(rec->n, ROWS);
        ck_assert_int_eq(rec->is_complex, 1);
        for (size_t r = 0; r < ROWS; r++)
            for (int k = 0; k < 2; k++) {
                double want = strtod(nums[r][k], NULL);
                ck_assert_msg(bits_of(rec->data[2 * r + (size_t)k]) == bits_of(want),
                              "delimiter '%c', line %zu: '%s' loaded as %.17g, strtod %.17g", d,
                              r + 2, nums[r][k], rec->data[2 * r + (size_t)k], want);
            }
        cs_loaded_release(&out);
    }
    free(text);
    gsl_rng_free(g);
}
END_TEST

/* A malformed field in a random row and column of an otherwise good record is refused with the
 * message, line and column the loader has always given (the messages of bad_field in
 * io_text.c, written out here), whatever blanks surround it and whichever delimiter is used. */
START_TEST(test_loader_malformed)
{
    static const struct {
        const char *field, *fmt; /* fmt: the message, with the column number and the field */
        int code;
    } bad[] = {
        {"1e", "column %d: '%s' is not a number", CS_EFORMAT},
        {"1e+", "column %d: '%s' is not a number", CS_EFORMAT},
        {"e5", "column %d: '%s' is not a number", CS_EFORMAT},
        {"1.2.3", "column %d: '%s' is not a number", CS_EFORMAT},
        {"1..2", "column %d: '%s' is not a number", CS_EFORMAT},
        {".", "column %d: '%s' is not a number", CS_EFORMAT},
        {"-", "column %d: '%s' is not a number", CS_EFORMAT},
        {"+.e3", "column %d: '%s' is not a number", CS_EFORMAT},
        {"--1", "column %d: '%s' is not a number", CS_EFORMAT},
        {"1d5", "column %d: '%s' is not a number", CS_EFORMAT},
        {"0.12345678x", "column %d: '%s' is not a number", CS_EFORMAT},
        {"0.1234567/", "column %d: '%s' is not a number", CS_EFORMAT},
        {"12:5", "column %d: '%s' is not a number", CS_EFORMAT},
        {"1 2", "column %d: '%s' is not a number", CS_EFORMAT},
        {"\"1.5", "column %d: '%s' is not a number", CS_EFORMAT},
        {"0x1A", "column %d: '%s' is hexadecimal: only decimal numbers are accepted", CS_EFORMAT},
        {"-0X1p3", "column %d: '%s' is hexadecimal: only decimal numbers are accepted",
         CS_EFORMAT},
        {"nan", "column %d: '%s' is NaN (not a number)", CS_EDATA},
        {"-inf", "column %d: '%s' is infinite", CS_EDATA},
        {"Infinity", "column %d: '%s' is infinite", CS_EDATA},
        {"1e999", "column %d: '%s' is too large for a double (infinite)", CS_EDATA},
        {"-1.7976931348623159e308", "column %d: '%s' is too large for a double (infinite)",
         CS_EDATA},
        {"123456789012345678901234567890e300",
         "column %d: '%s' is too large for a double (infinite)", CS_EDATA},
    };
    static const char delims[] = {',', ';', '\t'};
    gsl_rng *g = gsl_rng_alloc(gsl_rng_mt19937);
    ck_assert_ptr_nonnull(g);
    gsl_rng_set(g, 13);
    char text[8192], want[256];
    for (size_t i = 0; i < sizeof bad / sizeof bad[0]; i++) {
        for (int rep = 0; rep < 6; rep++) {
            char d = delims[gsl_rng_uniform_int(g, sizeof delims)];
            size_t rows = 20, badrow = gsl_rng_uniform_int(g, rows);
            int badcol = 2 + (int)gsl_rng_uniform_int(g, 2); /* 1-based: I or Q */
            /* the file: a header, then one line per row; line 1 + comments before */
            size_t len = (size_t)snprintf(text, sizeof text, "# kind = record\ntime_us%ci%cq\n",
                                          d, d);
            for (size_t r = 0; r < rows; r++) {
                const char *f2 = badrow == r && badcol == 2 ? bad[i].field : "0.001953125";
                const char *f3 = badrow == r && badcol == 3 ? bad[i].field : "-1.5e-3";
                len += (size_t)snprintf(text + len, sizeof text - len, "%zu%c %s %c%s\n", r, d,
                                        f2, d, f3);
            }
            cs_loaded out;
            cs_error err;
            int rc = load_text("malformed.csv", text, &out, &err);
            snprintf(want, sizeof want, bad[i].fmt, badcol, bad[i].field);
            ck_assert_msg(rc == bad[i].code, "'%s': code %d, expected %d (%s)", bad[i].field, rc,
                          bad[i].code, err.msg);
            ck_assert_msg(err.line == (long)badrow + 3, "'%s': line %ld, expected %zu",
                          bad[i].field, err.line, badrow + 3);
            ck_assert_msg(strcmp(err.msg, want) == 0, "'%s': message '%s', expected '%s'",
                          bad[i].field, err.msg, want);
            ck_assert_uint_eq(out.nrecords, 0);
            cs_loaded_release(&out);
        }
    }
    gsl_rng_free(g);
}
END_TEST

static Suite *io_number_suite(void)
{
    Suite *s = suite_create("io_number");
    TCase *tc = tcase_create("hard");
    tcase_add_test(tc, test_hard_cases);
    suite_add_tcase(s, tc);
    tc = tcase_create("random");
    tcase_set_timeout(tc, 120);
    tcase_add_test(tc, test_random_strings);
    suite_add_tcase(s, tc);
    tc = tcase_create("scan");
    tcase_add_test(tc, test_scan_cases);
    suite_add_tcase(s, tc);
    tc = tcase_create("random decimals");
    tcase_set_timeout(tc, 120);
    tcase_add_test(tc, test_random_decimals);
    suite_add_tcase(s, tc);
    tc = tcase_create("loader");
    tcase_set_timeout(tc, 60);
    tcase_add_test(tc, test_loader_values);
    tcase_add_test(tc, test_loader_random);
    tcase_add_test(tc, test_loader_malformed);
    suite_add_tcase(s, tc);
    return s;
}

int main(void)
{
    SRunner *sr = srunner_create(io_number_suite());
    srunner_run_all(sr, CK_ENV);
    int failed = srunner_ntests_failed(sr);
    srunner_free(sr);
    return failed ? EXIT_FAILURE : EXIT_SUCCESS;
}
