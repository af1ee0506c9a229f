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
 * bits; strings it does not decide go to that strtod path unchanged. The file under test is
 * compiled into this program, since its function is internal to the library. */
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

/* ---------------------------------------------------------------- through the loader */

/* The loader gives the values strtod gives (reference: C standard strtod), keeps reading an
 * underflowing value as 0 (as with strtod's ERANGE result before), and still refuses
 * overflow, hexadecimal, NaN and decimal commas with its messages. */
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
    cs_load_options o;
    cs_load_options_init(&o);
    cs_loaded out;
    cs_error err;
    cs_loaded_init(&out);
    cs_error_clear(&err);
    int rc = cs_io_text_load(tu_write_text("num.csv", text), &o, &out, &err);
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
        cs_loaded_init(&out);
        cs_error_clear(&err);
        rc = cs_io_text_load(tu_write_text("bad.csv", text), &o, &out, &err);
        ck_assert_msg(rc != CS_OK, "'%s' accepted", bad[i].field);
        ck_assert_msg(strstr(err.msg, bad[i].msg), "'%s': message '%s' lacks '%s'", bad[i].field,
                      err.msg, bad[i].msg);
        ck_assert_int_eq(err.line, 2);
        cs_loaded_release(&out);
    }
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
    tc = tcase_create("loader");
    tcase_add_test(tc, test_loader_values);
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
