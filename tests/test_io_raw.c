/* Check suite for the raw digitizer binary loader (src/io_raw.c). */
/*
 * Inputs are made here, byte by byte, by an encoder that shares no code with the loader: every
 * sample type in both byte orders, offsets, scales, several shots, and every bad input the loader
 * must refuse, with the status code and the byte offset it must name.
 * Facts used: two's complement integers and IEEE 754 binary32/binary64 floats (ISO C11 7.20.1.1,
 * IEC 60559); "little-endian" stores the least significant byte first.
 */
#include <collshift/io.h>

#include <check.h>
#include <math.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/resource.h>
#include <unistd.h>

#include "testutil.h"

/* ---------------------------------------------------------------- a test-side encoder */

/* Store the low `size` bytes of bits at p in the given byte order. */
static void put_bits(unsigned char *p, size_t size, uint64_t bits, int big)
{
    for (size_t i = 0; i < size; i++) {
        unsigned char b = (unsigned char)(bits >> (8 * i));
        p[big ? size - 1 - i : i] = b;
    }
}

/* Encode value v as a scalar of `size` bytes, integer or float. */
static void put_value(unsigned char *p, size_t size, int is_float, double v, int big)
{
    uint64_t bits = 0;
    if (is_float && size == 4) {
        float f = (float)v;
        uint32_t u;
        memcpy(&u, &f, 4);
        bits = u;
    } else if (is_float) {
        memcpy(&bits, &v, 8);
    } else {
        int64_t i = (int64_t)v;
        memcpy(&bits, &i,
               8); /* the low bytes of a two's complement int64 are those of the narrower type */
    }
    put_bits(p, size, bits, big);
}

typedef struct raw_case {
    cs_raw_type type;
    const char *name;
    size_t scalar;
    int is_float, is_complex;
} raw_case;

static const raw_case cases[] = {
    {CS_RAW_I8, "i8", 1, 0, 0},     {CS_RAW_I16, "i16", 2, 0, 0},   {CS_RAW_I32, "i32", 4, 0, 0},
    {CS_RAW_F32, "f32", 4, 1, 0},   {CS_RAW_F64, "f64", 8, 1, 0},   {CS_RAW_CI8, "ci8", 1, 0, 1},
    {CS_RAW_CI16, "ci16", 2, 0, 1}, {CS_RAW_CI32, "ci32", 4, 0, 1}, {CS_RAW_CF32, "cf32", 4, 1, 1},
    {CS_RAW_CF64, "cf64", 8, 1, 1},
};
#define NCASES (sizeof cases / sizeof cases[0])

/* The k-th test scalar of a type: the extremes of integer types, awkward floats (denormal-free). */
static double test_value(const raw_case *c, size_t k)
{
    if (!c->is_float) {
        double lo = -ldexp(1.0, (int)(8 * c->scalar) - 1), hi = -lo - 1.0;
        const double v[] = {lo, -1.0, 0.0, 1.0, hi, lo + 1.0, 100.0, -100.0, 77.0, -3.0};
        return v[k % 10];
    }
    const double v[] = {-1.5, 0.0, 1e-3, 3.25e10, -7.0, 0.1, c->scalar == 4 ? 3.0e38 : 1.0e300,
                        -2.5e-30, 65504.0, 1.0 / 3.0};
    double x = v[k % 10];
    return c->scalar == 4 ? (double)(float)x : x; /* what a float32 file can hold */
}

/* Build a file of `nsamples` samples of case c (with `pre` bytes of preamble), return its path. */
static const char *write_case(const char *name, const raw_case *c, size_t nsamples, int big,
                              size_t pre)
{
    size_t comps = c->is_complex ? 2 : 1, ss = c->scalar * comps;
    size_t len = pre + nsamples * ss;
    unsigned char *b = malloc(len ? len : 1);
    ck_assert_ptr_nonnull(b);
    for (size_t i = 0; i < pre; i++)
        b[i] = (unsigned char)(0xA5 ^ i);
    for (size_t i = 0; i < nsamples * comps; i++)
        put_value(b + pre + i * c->scalar, c->scalar, c->is_float, test_value(c, i), big);
    const char *p = tu_write_file(name, b, len);
    free(b);
    return p;
}

static cs_load_options raw_opts(cs_raw_type t)
{
    cs_load_options o;
    cs_load_options_init(&o);
    o.format = CS_FORMAT_RAW;
    o.raw_type = t;
    o.sample_rate_hz = 50e6;
    return o;
}

/* ---------------------------------------------------------------- round trips */

/* Every type, both byte orders (loop index: 2 * case + big). */
START_TEST(roundtrip_every_type)
{
    const raw_case *c = &cases[_i / 2];
    int big = _i % 2;
    const size_t n = 23;
    const char *p = write_case("rt.bin", c, n, big, 0);
    cs_load_options o = raw_opts(c->type);
    o.big_endian = big;
    cs_loaded l;
    cs_loaded_init(&l);
    cs_error e;
    cs_error_clear(&e);
    ck_assert_int_eq(cs_io_raw_load(p, &o, &l, &e), CS_OK);
    ck_assert_int_eq(l.kind, CS_KIND_RECORD);
    ck_assert_uint_eq(l.nrecords, 1);
    const cs_record *r = l.records[0];
    ck_assert_uint_eq(r->n, n);
    ck_assert_int_eq(r->is_complex, c->is_complex);
    size_t comps = c->is_complex ? 2 : 1;
    for (size_t i = 0; i < n * comps; i++)
        ck_assert_msg(r->data[i] == test_value(c, i), "%s %s value %zu: got %.17g, want %.17g",
                      c->name, big ? "big" : "little", i, r->data[i], test_value(c, i));
    ck_assert_str_eq(r->source, p);
    ck_assert_str_eq(r->t_unit, "s");
    ck_assert_uint_eq(r->shot, 0);
    ck_assert(r->dt_s == 1.0 / 50e6);
    ck_assert(r->t0_s == 0.0);
    ck_assert_ptr_nonnull(strstr(l.notes, c->name));
    cs_loaded_release(&l);
}
END_TEST

/* Byte order is decoded from the bytes: 0x0102 little-endian is 513, big-endian 258. */
START_TEST(byte_order_literal)
{
    const unsigned char b[] = {0x02, 0x01, 0x03, 0x00, 0xFF, 0xFF};
    const char *p = tu_write_file("bo.bin", b, sizeof b);
    cs_load_options o = raw_opts(CS_RAW_I16);
    cs_loaded l;
    cs_loaded_init(&l);
    ck_assert_int_eq(cs_io_raw_load(p, &o, &l, NULL), CS_OK);
    ck_assert(l.records[0]->data[0] == 258.0);
    ck_assert(l.records[0]->data[1] == 3.0);
    ck_assert(l.records[0]->data[2] == -1.0);
    cs_loaded_release(&l);
    o.big_endian = 1;
    ck_assert_int_eq(cs_io_raw_load(p, &o, &l, NULL), CS_OK);
    ck_assert(l.records[0]->data[0] == 513.0);
    ck_assert(l.records[0]->data[1] == 768.0);
    ck_assert(l.records[0]->data[2] == -1.0);
    cs_loaded_release(&l);
}
END_TEST

START_TEST(offset_scale_t0)
{
    const raw_case *c = &cases[6]; /* ci16 */
    const char *p = write_case("off.bin", c, 10, 0, 37);
    cs_load_options o = raw_opts(c->type);
    o.offset_bytes = 37;
    o.scale = 0.25;
    o.t0_s = -2e-6;
    cs_loaded l;
    cs_loaded_init(&l);
    ck_assert_int_eq(cs_io_raw_load(p, &o, &l, NULL), CS_OK);
    const cs_record *r = l.records[0];
    ck_assert_uint_eq(r->n, 10);
    for (size_t i = 0; i < 20; i++)
        ck_assert(r->data[i] == 0.25 * test_value(c, i));
    ck_assert(r->t0_s == -2e-6);
    ck_assert_ptr_nonnull(strstr(l.notes, "37"));
    cs_loaded_release(&l);
}
END_TEST

START_TEST(several_shots)
{
    const raw_case *c = &cases[3]; /* f32 */
    const char *p = write_case("shots.bin", c, 3 * 40, 1, 8);
    cs_load_options o = raw_opts(c->type);
    o.big_endian = 1;
    o.offset_bytes = 8;
    o.records = 3;
    cs_loaded l;
    cs_loaded_init(&l);
    ck_assert_int_eq(cs_io_raw_load(p, &o, &l, NULL), CS_OK);
    ck_assert_uint_eq(l.nrecords, 3);
    for (size_t s = 0; s < 3; s++) {
        ck_assert_uint_eq(l.records[s]->n, 40);
        ck_assert_uint_eq(l.records[s]->shot, s);
        ck_assert_str_eq(l.records[s]->source, p);
        for (size_t i = 0; i < 40; i++)
            ck_assert(l.records[s]->data[i] == test_value(c, s * 40 + i));
    }
    ck_assert_ptr_nonnull(strstr(l.notes, "3 shots of 40 real samples"));
    cs_loaded_release(&l);
}
END_TEST

/* Records longer than one 1 MiB chunk, with shot boundaries inside chunks: every value checked. */
START_TEST(chunk_boundaries)
{
    const size_t per = 300007, nshots = 3; /* ci16: 4 B/sample -> 1.2 MB per shot */
    const size_t n = per * nshots;
    unsigned char *b = calloc(n * 4 + 5, 1);   /* the 5-byte header is written as zeros */
    ck_assert_ptr_nonnull(b);
    for (size_t i = 0; i < 2 * n; i++)
        put_bits(b + 5 + 2 * i, 2, (uint64_t)(int64_t)((int)(i % 65536) - 32768), 1);
    const char *p = tu_write_file("chunks.bin", b, n * 4 + 5);
    free(b);
    cs_load_options o = raw_opts(CS_RAW_CI16);
    o.big_endian = 1;
    o.offset_bytes = 5;
    o.records = nshots;
    cs_loaded l;
    cs_loaded_init(&l);
    ck_assert_int_eq(cs_io_raw_load(p, &o, &l, NULL), CS_OK);
    for (size_t s = 0; s < nshots; s++)
        for (size_t i = 0; i < 2 * per; i++) {
            size_t g = s * 2 * per + i;
            double want = (double)((int)(g % 65536) - 32768);
            if (l.records[s]->data[i] != want)
                ck_abort_msg("shot %zu scalar %zu: got %g want %g", s, i, l.records[s]->data[i],
                             want);
        }
    cs_loaded_release(&l);
}
END_TEST

/* The f64/cf64 little-endian direct path, across chunks, with scale. */
START_TEST(direct_path_large)
{
    const size_t n = 200003; /* cf64: 3.2 MB */
    double *v = malloc(2 * n * sizeof *v);
    unsigned char *b = malloc(2 * n * 8);
    ck_assert(v && b);
    for (size_t i = 0; i < 2 * n; i++) {
        v[i] = sin(0.001 * (double)i) * 1e3 + (double)i;
        put_value(b + 8 * i, 8, 1, v[i], 0);
    }
    const char *p = tu_write_file("direct.bin", b, 2 * n * 8);
    cs_load_options o = raw_opts(CS_RAW_CF64);
    o.scale = 2.0;
    cs_loaded l;
    cs_loaded_init(&l);
    ck_assert_int_eq(cs_io_raw_load(p, &o, &l, NULL), CS_OK);
    for (size_t i = 0; i < 2 * n; i++)
        if (l.records[0]->data[i] != 2.0 * v[i])
            ck_abort_msg("value %zu differs", i);
    cs_loaded_release(&l);
    free(v);
    free(b);
}
END_TEST

/* Through the public dispatcher: raw_type set selects the raw loader. */
START_TEST(via_dispatcher)
{
    const char *p = write_case("disp.dat", &cases[1], 5, 0, 0);
    cs_load_options o;
    cs_load_options_init(&o);
    o.raw_type = CS_RAW_I16;
    o.sample_rate_hz = 1e3;
    cs_loaded l;
    cs_error e;
    ck_assert_int_eq(cs_io_load(p, &o, &l, &e), CS_OK);
    ck_assert_int_eq(l.format, CS_FORMAT_RAW);
    ck_assert_uint_eq(l.records[0]->n, 5);
    ck_assert(l.records[0]->dt_s == 1e-3);
    cs_loaded_release(&l);
}
END_TEST

/* ---------------------------------------------------------------- refusals */

static int load_err(const char *p, const cs_load_options *o, cs_error *e)
{
    cs_loaded l;
    cs_loaded_init(&l);
    cs_error_clear(e);
    int rc = cs_io_raw_load(p, o, &l, e);
    ck_assert_uint_eq(l.nrecords, 0); /* nothing handed out on failure */
    ck_assert_ptr_null(l.records);
    cs_loaded_release(&l);
    return rc;
}

START_TEST(needs_sample_rate)
{
    const char *p = write_case("nosr.bin", &cases[0], 10, 0, 0);
    cs_load_options o = raw_opts(CS_RAW_I8);
    o.sample_rate_hz = 0;
    cs_error e;
    ck_assert_int_eq(load_err(p, &o, &e), CS_EINVAL);
    ck_assert_ptr_nonnull(strstr(e.msg, "raw binary needs --sample-rate"));
    o.sample_rate_hz = NAN;
    ck_assert_int_eq(load_err(p, &o, &e), CS_EINVAL);
}
END_TEST

START_TEST(needs_type_and_sane_options)
{
    const char *p = write_case("opts.bin", &cases[0], 10, 0, 0);
    cs_load_options o = raw_opts(CS_RAW_NONE);
    cs_error e;
    ck_assert_int_eq(load_err(p, &o, &e), CS_EINVAL);
    ck_assert_ptr_nonnull(strstr(e.msg, "--raw"));
    o = raw_opts(CS_RAW_I8);
    o.offset_bytes = -1;
    ck_assert_int_eq(load_err(p, &o, &e), CS_EINVAL);
    o = raw_opts(CS_RAW_I8);
    o.scale = 0.0;
    ck_assert_int_eq(load_err(p, &o, &e), CS_EINVAL);
    o = raw_opts(CS_RAW_I8);
    o.kind = CS_KIND_SPECTRUM;
    ck_assert_int_eq(load_err(p, &o, &e), CS_EINVAL);
}
END_TEST

START_TEST(missing_file)
{
    cs_load_options o = raw_opts(CS_RAW_I8);
    cs_error e;
    const char *p = tu_tmp_path("does-not-exist.bin");
    ck_assert_int_eq(load_err(p, &o, &e), CS_EIO);
    ck_assert_str_eq(e.file, p);
}
END_TEST

/* f32 after a 7-byte preamble: 5 whole samples (20 bytes) and 3 stray bytes; the partial sample
 * starts at byte 7 + 20 = 27. */
START_TEST(partial_trailing_sample)
{
    unsigned char b[7 + 23] = {0};
    const char *p = tu_write_file("partial.bin", b, sizeof b);
    cs_load_options o = raw_opts(CS_RAW_F32);
    o.offset_bytes = 7;
    cs_error e;
    ck_assert_int_eq(load_err(p, &o, &e), CS_EFORMAT);
    ck_assert_int_eq(e.offset, 27);
    ck_assert_str_eq(e.file, p);
    ck_assert_ptr_nonnull(strstr(e.msg, "partial"));
    /* cf64 (16 B/sample), no preamble: 30 bytes = 1 sample + 14 -> byte 16 */
    o = raw_opts(CS_RAW_CF64);
    ck_assert_int_eq(load_err(p, &o, &e), CS_EFORMAT);
    ck_assert_int_eq(e.offset, 16);
}
END_TEST

START_TEST(offset_beyond_end)
{
    unsigned char b[16] = {0};
    const char *p = tu_write_file("short.bin", b, sizeof b);
    cs_load_options o = raw_opts(CS_RAW_I8);
    o.offset_bytes = 17;
    cs_error e;
    ck_assert_int_eq(load_err(p, &o, &e), CS_EFORMAT);
    ck_assert_int_eq(e.offset, 17);
    ck_assert_ptr_nonnull(strstr(e.msg, "beyond the end"));
    o.offset_bytes = 16; /* exactly at the end: no data */
    ck_assert_int_eq(load_err(p, &o, &e), CS_EDATA);
}
END_TEST

START_TEST(empty_file)
{
    const char *p = tu_write_file("empty.bin", "", 0);
    cs_load_options o = raw_opts(CS_RAW_I16);
    cs_error e;
    ck_assert_int_eq(load_err(p, &o, &e), CS_EDATA);
    ck_assert_str_eq(e.file, p);
}
END_TEST

START_TEST(too_few_points)
{
    const char *p = write_case("few.bin", &cases[1], 6, 0, 0);
    cs_load_options o = raw_opts(CS_RAW_I16);
    o.records = 3; /* 2 samples per shot < min_points 3 */
    cs_error e;
    ck_assert_int_eq(load_err(p, &o, &e), CS_EDATA);
    o.records = 2; /* 3 per shot: fine */
    cs_loaded l;
    cs_loaded_init(&l);
    ck_assert_int_eq(cs_io_raw_load(p, &o, &l, &e), CS_OK);
    cs_loaded_release(&l);
    o.records = 1;
    o.min_points = 7;
    ck_assert_int_eq(load_err(p, &o, &e), CS_EDATA);
}
END_TEST

START_TEST(shots_do_not_divide)
{
    const char *p = write_case("nodiv.bin", &cases[1], 10, 0, 0);
    cs_load_options o = raw_opts(CS_RAW_I16);
    o.records = 3;
    cs_error e;
    ck_assert_int_eq(load_err(p, &o, &e), CS_EFORMAT);
    ck_assert_ptr_nonnull(strstr(e.msg, "3 shots"));
}
END_TEST

/* A NaN as the 4th f32 value after a 12-byte preamble is at byte 12 + 3*4 = 24; an Inf as the Q
 * part of cf64 sample 2 is at byte 2*16 + 8 = 40; in a big-endian f64 file at 5*8 = 40. */
START_TEST(nan_inf_offsets)
{
    unsigned char b[12 + 6 * 4];
    memset(b, 0, sizeof b);
    put_value(b + 12 + 3 * 4, 4, 1, NAN, 0);
    const char *p = tu_write_file("nan.bin", b, sizeof b);
    cs_load_options o = raw_opts(CS_RAW_F32);
    o.offset_bytes = 12;
    cs_error e;
    ck_assert_int_eq(load_err(p, &o, &e), CS_EDATA);
    ck_assert_int_eq(e.offset, 24);
    ck_assert_ptr_nonnull(strstr(e.msg, "NaN"));

    unsigned char c[4 * 16];
    memset(c, 0, sizeof c);
    put_value(c + 2 * 16 + 8, 8, 1, INFINITY, 0);
    p = tu_write_file("inf.bin", c, sizeof c);
    o = raw_opts(CS_RAW_CF64);
    ck_assert_int_eq(load_err(p, &o, &e), CS_EDATA);
    ck_assert_int_eq(e.offset, 40);
    ck_assert_ptr_nonnull(strstr(e.msg, "infinite"));
    ck_assert_ptr_nonnull(strstr(e.msg, "(Q)"));

    memset(c, 0, sizeof c);
    put_value(c + 5 * 8, 8, 1, -INFINITY, 1);
    p = tu_write_file("infbe.bin", c, sizeof c);
    o = raw_opts(CS_RAW_F64);
    o.big_endian = 1;
    ck_assert_int_eq(load_err(p, &o, &e), CS_EDATA);
    ck_assert_int_eq(e.offset, 40);
}
END_TEST

/* A NaN deep in the second shot, past several chunks: offset must count across chunks/shots. */
START_TEST(nan_offset_across_chunks)
{
    const size_t n = 2 * 400000; /* f32, two shots of 1.6 MB */
    unsigned char *b = calloc(n, 4);
    ck_assert_ptr_nonnull(b);
    size_t k = 400000 + 333333;
    put_value(b + 4 * k, 4, 1, NAN, 0);
    const char *p = tu_write_file("nanfar.bin", b, n * 4);
    free(b);
    cs_load_options o = raw_opts(CS_RAW_F32);
    o.records = 2;
    cs_error e;
    ck_assert_int_eq(load_err(p, &o, &e), CS_EDATA);
    ck_assert_int_eq(e.offset, (long long)(4 * k));
    ck_assert_ptr_nonnull(strstr(e.msg, "sample 333333 of shot 1"));
}
END_TEST

START_TEST(scale_overflow_is_data_error)
{
    const raw_case *c = &cases[4]; /* f64 */
    unsigned char b[4 * 8];
    for (size_t i = 0; i < 4; i++)
        put_value(b + 8 * i, 8, 1, i == 2 ? 1e300 : 1.0, 0);
    const char *p = tu_write_file("ovf.bin", b, sizeof b);
    cs_load_options o = raw_opts(c->type);
    o.scale = 1e10;
    cs_error e;
    ck_assert_int_eq(load_err(p, &o, &e), CS_EDATA);
    ck_assert_int_eq(e.offset, 16);
}
END_TEST

START_TEST(max_samples_limit)
{
    const char *p = write_case("max.bin", &cases[1], 101, 0, 0);
    cs_load_options o = raw_opts(CS_RAW_I16);
    o.max_samples = 100;
    cs_error e;
    ck_assert_int_eq(load_err(p, &o, &e), CS_ERANGE);
    o.max_samples = 101;
    cs_loaded l;
    cs_loaded_init(&l);
    ck_assert_int_eq(cs_io_raw_load(p, &o, &l, &e), CS_OK);
    cs_loaded_release(&l);
}
END_TEST

/* A sparse 1 TiB file: the size alone must be refused, before any allocation is tried. */
START_TEST(huge_sparse_file)
{
    const char *p = tu_write_file("huge.bin", "", 0);
    FILE *f = fopen(p, "r+b");
    ck_assert_ptr_nonnull(f);
    if (ftruncate(fileno(f), (off_t)1 << 40) != 0) {
        fclose(f);
        return; /* the file system cannot hold a sparse file this size: nothing to test */
    }
    fclose(f);
    cs_load_options o = raw_opts(CS_RAW_CF64);
    cs_error e;
    ck_assert_int_eq(load_err(p, &o, &e), CS_ERANGE);
    ck_assert_ptr_nonnull(strstr(e.msg, "limit"));
    unlink(p);
}
END_TEST

/* Sanity check of the one-pass design, not a benchmark: loading a 2^20-sample cf64 file (16 MiB
 * of doubles) must not raise the peak resident size by more than 1.5x the data. A loader that
 * read the whole file into a second buffer would need 2x. Check forks each test, so the baseline
 * is this small process. Skipped under AddressSanitizer, whose shadow memory and quarantine
 * change the numbers. */
START_TEST(peak_memory_one_pass)
{
#if defined(__SANITIZE_ADDRESS__)
    return;
#elif defined(__has_feature)
#if __has_feature(address_sanitizer)
    return;
#endif
#endif
    const size_t n = (size_t)1 << 20;
    const char *p = tu_tmp_path("mem.bin");
    FILE *f = fopen(p, "wb");
    ck_assert_ptr_nonnull(f);
    unsigned char chunk[4096 * 16];
    for (size_t i = 0; i < n; i += 4096) {
        for (size_t j = 0; j < 2 * 4096; j++)
            put_value(chunk + 8 * j, 8, 1, (double)((i * 2 + j) % 1000), 1);
        ck_assert_uint_eq(fwrite(chunk, 1, sizeof chunk, f), sizeof chunk);
    }
    ck_assert_int_eq(fclose(f), 0);
    struct rusage before, after;
    getrusage(RUSAGE_SELF, &before);
    cs_load_options o = raw_opts(CS_RAW_CF64);
    o.big_endian = 1; /* the chunked decoding path */
    cs_loaded l;
    cs_loaded_init(&l);
    ck_assert_int_eq(cs_io_raw_load(p, &o, &l, NULL), CS_OK);
    getrusage(RUSAGE_SELF, &after);
    double grown =
        (double)(after.ru_maxrss - before.ru_maxrss) * 1024.0; /* ru_maxrss is KiB on Linux */
    double data = (double)n * 16.0;
    ck_assert_msg(grown < 1.5 * data, "peak grew by %.1f MiB for %.1f MiB of data",
                  grown / 1048576.0, data / 1048576.0);
    ck_assert(l.records[0]->data[2 * n - 1] == (double)((2 * n - 1) % 1000));
    cs_loaded_release(&l);
}
END_TEST

static Suite *raw_suite(void)
{
    Suite *s = suite_create("io_raw");
    TCase *tc = tcase_create("roundtrip");
    tcase_add_loop_test(tc, roundtrip_every_type, 0, (int)(2 * NCASES));
    tcase_add_test(tc, byte_order_literal);
    tcase_add_test(tc, offset_scale_t0);
    tcase_add_test(tc, several_shots);
    tcase_add_test(tc, chunk_boundaries);
    tcase_add_test(tc, direct_path_large);
    tcase_add_test(tc, via_dispatcher);
    suite_add_tcase(s, tc);

    tc = tcase_create("refusals");
    tcase_add_test(tc, needs_sample_rate);
    tcase_add_test(tc, needs_type_and_sane_options);
    tcase_add_test(tc, missing_file);
    tcase_add_test(tc, partial_trailing_sample);
    tcase_add_test(tc, offset_beyond_end);
    tcase_add_test(tc, empty_file);
    tcase_add_test(tc, too_few_points);
    tcase_add_test(tc, shots_do_not_divide);
    tcase_add_test(tc, nan_inf_offsets);
    tcase_add_test(tc, nan_offset_across_chunks);
    tcase_add_test(tc, scale_overflow_is_data_error);
    tcase_add_test(tc, max_samples_limit);
    tcase_add_test(tc, huge_sparse_file);
    suite_add_tcase(s, tc);

    tc = tcase_create("memory");
    tcase_add_test(tc, peak_memory_one_pass);
    suite_add_tcase(s, tc);
    return s;
}

int main(void)
{
    SRunner *sr = srunner_create(raw_suite());
    srunner_run_all(sr, CK_NORMAL);
    int failed = srunner_ntests_failed(sr);
    srunner_free(sr);
    return failed ? EXIT_FAILURE : EXIT_SUCCESS;
}
