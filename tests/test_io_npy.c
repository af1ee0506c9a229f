/* Check suite for the NumPy .npy reader and writer (src/io_npy.c, src/io_npy_*.c). */
/*
 * Every input file is assembled here byte by byte, independently of the library's writer, following
 * the NumPy format specification (numpy.lib.format, NEP 1):
 *   "\x93NUMPY", major, minor, HEADER_LEN (u16 little-endian for 1.0, u32 for 2.0 and 3.0), then
 *   HEADER_LEN bytes of a Python dict literal {'descr': ..., 'fortran_order': ..., 'shape': ...}
 *   padded with spaces and ended by '\n' (NumPy pads so the data start on a multiple of 64), then
 *   the data. dtype strings: byte order '<' '>' '|', kind i u f c, item size in bytes.
 * Header faults are written with a '@' where the reader must point; the '@' is removed and its
 * position becomes the expected byte offset.
 */
#include <collshift/io.h>

#include <check.h>
#include <math.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/resource.h>

#include "testutil.h"

/* ---------------------------------------------------------------- a test-side encoder */

static void put_bits(unsigned char *p, size_t size, uint64_t bits, int big)
{
    for (size_t i = 0; i < size; i++)
        p[big ? size - 1 - i : i] = (unsigned char)(bits >> (8 * i));
}

/* One real number as kind 'i', 'u' or 'f' of `size` bytes. */
static void put_value(unsigned char *p, char kind, size_t size, double v, int big)
{
    uint64_t bits;
    if (kind == 'f' && size == 4) {
        float f = (float)v;
        uint32_t u;
        memcpy(&u, &f, 4);
        bits = u;
    } else if (kind == 'f') {
        memcpy(&bits, &v, 8);
    } else if (kind == 'u') {
        bits = (uint64_t)v;
    } else {
        int64_t i = (int64_t)v;
        memcpy(&bits, &i, 8);
    }
    put_bits(p, size, bits, big);
}

typedef struct npy_built {
    unsigned char *bytes;
    size_t len;
    size_t header_start, data_start;
} npy_built;

enum { PAD64, PAD16, PAD_NONE, PAD_NOTHING_AT_ALL };

/* Assemble a .npy image: version major.minor, the dict text, padding, then `dlen` data bytes. */
static npy_built build(int major, int minor, const char *dict, int pad, const void *data,
                       size_t dlen) {
    npy_built b;
    size_t lenbytes = major == 1 ? 2 : 4;
    size_t hs = 8 + lenbytes, dl = strlen(dict);
    size_t hlen = dl;
    if (pad != PAD_NOTHING_AT_ALL) {
        size_t align = pad == PAD64 ? 64 : pad == PAD16 ? 16 : 1;
        size_t used = hs + dl + 1;
        hlen = dl + 1 + (align - used % align) % align;
    }
    b.header_start = hs;
    b.data_start = hs + hlen;
    b.len = hs + hlen + dlen;
    b.bytes = malloc(b.len + 1);
    ck_assert_ptr_nonnull(b.bytes);
    memcpy(b.bytes, "\x93NUMPY", 6);
    b.bytes[6] = (unsigned char)major;
    b.bytes[7] = (unsigned char)minor;
    put_bits(b.bytes + 8, lenbytes, hlen, 0);
    memcpy(b.bytes + hs, dict, dl);
    if (pad != PAD_NOTHING_AT_ALL) {
        memset(b.bytes + hs + dl, ' ', hlen - dl - 1);
        b.bytes[hs + hlen - 1] = '\n';
    }
    if (dlen)
        memcpy(b.bytes + b.data_start, data, dlen);
    return b;
}

static const char *save(const char *name, npy_built *b)
{
    const char *p = tu_write_file(name, b->bytes, b->len);
    free(b->bytes);
    b->bytes = NULL;
    return p;
}

static cs_load_options rec_opts(void)
{
    cs_load_options o;
    cs_load_options_init(&o);
    o.sample_rate_hz = 1e6;
    return o;
}

static int load(const char *p, const cs_load_options *o, cs_loaded *l, cs_error *e)
{
    cs_loaded_init(l);
    cs_error_clear(e);
    return cs_io_npy_load(p, o, l, e);
}

/* Load expecting failure; checks that nothing was handed out and the file is named. */
static int load_fail(const char *p, const cs_load_options *o, cs_error *e)
{
    cs_loaded l;
    int rc = load(p, o, &l, e);
    ck_assert_int_ne(rc, CS_OK);
    ck_assert_uint_eq(l.nrecords, 0);
    ck_assert_ptr_null(l.records);
    ck_assert_ptr_null(l.spectrum);
    ck_assert_str_eq(e->file, p);
    cs_loaded_release(&l);
    return rc;
}

/* ---------------------------------------------------------------- versions */

/* The same '<f8' array in format versions 1.0, 2.0 and 3.0. */
START_TEST(versions)
{
    static const int major[] = {1, 2, 3};
    double v[5] = {1.5, -2.25, 0.0, 1e300, -1e-300};
    unsigned char d[40];
    for (int i = 0; i < 5; i++)
        put_value(d + 8 * i, 'f', 8, v[i], 0);
    npy_built b = build(major[_i], 0, "{'descr': '<f8', 'fortran_order': False, 'shape': (5,), }",
                        PAD64, d, sizeof d);
    ck_assert_uint_eq(b.data_start % 64, 0);
    const char *p = save("ver.npy", &b);
    cs_load_options o = rec_opts();
    cs_loaded l;
    cs_error e;
    ck_assert_int_eq(load(p, &o, &l, &e), CS_OK);
    ck_assert_int_eq(l.kind, CS_KIND_RECORD);
    ck_assert_uint_eq(l.nrecords, 1);
    ck_assert_uint_eq(l.records[0]->n, 5);
    ck_assert_int_eq(l.records[0]->is_complex, 0);
    for (int i = 0; i < 5; i++)
        ck_assert(l.records[0]->data[i] == v[i]);
    ck_assert(l.records[0]->dt_s == 1e-6);
    ck_assert_str_eq(l.records[0]->source, p);
    ck_assert_str_eq(l.records[0]->t_unit, "s");
    char want[16];
    snprintf(want, sizeof want, "npy v%d.0", major[_i]);
    ck_assert_ptr_nonnull(strstr(l.notes, want));
    cs_loaded_release(&l);
}
END_TEST

/* ---------------------------------------------------------------- dtypes */

typedef struct dt_case {
    const char *name; /* without byte order */
    char kind;
    size_t scalar;
    int cx;
} dt_case;

static const dt_case dts[] = {
    {"i1", 'i', 1, 0}, {"u1", 'u', 1, 0}, {"i2", 'i', 2, 0}, {"u2", 'u', 2, 0},
    {"i4", 'i', 4, 0}, {"u4", 'u', 4, 0}, {"i8", 'i', 8, 0}, {"u8", 'u', 8, 0},
    {"f4", 'f', 4, 0}, {"f8", 'f', 8, 0}, {"c8", 'f', 4, 1}, {"c16", 'f', 8, 1},
};
#define NDTS (sizeof dts / sizeof dts[0])
static const char orders[] = {'<', '>', '|'};

/* Test values: integer extremes (exact in a double up to 2^53; the 64-bit ones stay within it),
 * floats that survive float32 when the type is f4/c8. */
static double dt_value(const dt_case *c, size_t k)
{
    if (c->kind == 'u') {
        double hi = c->scalar == 8 ? 9007199254740992.0 : ldexp(1.0, (int)(8 * c->scalar)) - 1.0;
        const double v[] = {0.0, 1.0, hi, 200.0 < hi ? 200.0 : 100.0, 7.0, 128.0};
        return v[k % 6];
    }
    if (c->kind == 'i') {
        double lo = c->scalar == 8 ? -9007199254740992.0 : -ldexp(1.0, (int)(8 * c->scalar) - 1);
        double hi = c->scalar == 8 ? 9007199254740991.0 : -lo - 1.0;
        const double v[] = {lo, -1.0, 0.0, hi, 100.0, -77.0};
        return v[k % 6];
    }
    const double v[] = {-1.5, 3.0e38, 1e-3, -0.1, 65504.0, 1.0 / 3.0};
    return c->scalar == 4 ? (double)(float)v[k % 6] : v[k % 6];
}

/* loop index = dtype * 3 + order; '|' only for one-byte types */
START_TEST(every_dtype_both_orders)
{
    const dt_case *c = &dts[_i / 3];
    char order = orders[_i % 3];
    if (order == '|' && c->scalar != 1)
        return;
    const size_t n = 6, comps = c->cx ? 2 : 1;
    unsigned char d[6 * 16];
    for (size_t i = 0; i < n * comps; i++)
        put_value(d + i * c->scalar, c->kind, c->scalar, dt_value(c, i), order == '>');
    char dict[128];
    snprintf(dict, sizeof dict, "{'descr': '%c%s', 'fortran_order': False, 'shape': (6,), }", order,
             c->name);
    npy_built b = build(1, 0, dict, PAD64, d, n * comps * c->scalar);
    const char *p = save("dt.npy", &b);
    cs_load_options o = rec_opts();
    cs_loaded l;
    cs_error e;
    ck_assert_msg(load(p, &o, &l, &e) == CS_OK, "%s: %s", dict, e.msg);
    const cs_record *r = l.records[0];
    ck_assert_uint_eq(r->n, n);
    ck_assert_int_eq(r->is_complex, c->cx);
    for (size_t i = 0; i < n * comps; i++)
        ck_assert_msg(r->data[i] == dt_value(c, i), "%c%s value %zu: got %.17g want %.17g", order,
                      c->name, i, r->data[i], dt_value(c, i));
    cs_loaded_release(&l);
}
END_TEST

/* 0x0102 as '<i2' is 513 and as '>i2' 258: byte order decoded from the bytes, not the host. */
START_TEST(byte_order_literal)
{
    const unsigned char d[6] = {0x02, 0x01, 0x00, 0x80, 0xFF, 0xFF};
    cs_load_options o = rec_opts();
    cs_loaded l;
    cs_error e;
    npy_built b =
        build(1, 0, "{'descr': '<i2', 'fortran_order': False, 'shape': (3,), }", PAD64, d, 6);
    const char *p = save("bo_le.npy", &b);
    ck_assert_int_eq(load(p, &o, &l, &e), CS_OK);
    ck_assert(l.records[0]->data[0] == 258.0 && l.records[0]->data[1] == -32768.0 &&
              l.records[0]->data[2] == -1.0);
    cs_loaded_release(&l);
    b = build(1, 0, "{'descr': '>u2', 'fortran_order': False, 'shape': (3,), }", PAD64, d, 6);
    p = save("bo_be.npy", &b);
    ck_assert_int_eq(load(p, &o, &l, &e), CS_OK);
    ck_assert(l.records[0]->data[0] == 513.0 && l.records[0]->data[1] == 128.0 &&
              l.records[0]->data[2] == 65535.0);
    cs_loaded_release(&l);
}
END_TEST

/* ---------------------------------------------------------------- shapes */

START_TEST(two_d_complex_shots)
{
    const size_t shots = 3, n = 5;
    unsigned char d[3 * 5 * 8];
    for (size_t i = 0; i < shots * n * 2; i++)
        put_value(d + 4 * i, 'f', 4, (double)i - 7.5, 1);
    npy_built b = build(2, 0, "{'descr': '>c8', 'fortran_order': False, 'shape': (3, 5), }", PAD64,
                        d, sizeof d);
    const char *p = save("shots.npy", &b);
    cs_load_options o = rec_opts();
    o.t0_s = 1e-6;
    cs_loaded l;
    cs_error e;
    ck_assert_int_eq(load(p, &o, &l, &e), CS_OK);
    ck_assert_uint_eq(l.nrecords, shots);
    for (size_t s = 0; s < shots; s++) {
        const cs_record *r = l.records[s];
        ck_assert_uint_eq(r->n, n);
        ck_assert_int_eq(r->is_complex, 1);
        ck_assert_uint_eq(r->shot, s);
        ck_assert(r->t0_s == 1e-6);
        for (size_t i = 0; i < 2 * n; i++)
            ck_assert(r->data[i] == (double)(s * 2 * n + i) - 7.5);
    }
    ck_assert_ptr_nonnull(strstr(l.notes, "3 shots of 5 complex samples"));
    cs_loaded_release(&l);
}
END_TEST

/* A real (N, 2) array is N shots of 2 samples, never I/Q. */
START_TEST(real_n_by_2_is_not_iq)
{
    double v[10];
    unsigned char d[80];
    for (int i = 0; i < 10; i++) {
        v[i] = i * 0.5;
        put_value(d + 8 * i, 'f', 8, v[i], 0);
    }
    npy_built b = build(1, 0, "{'descr': '<f8', 'fortran_order': False, 'shape': (5, 2), }", PAD64,
                        d, sizeof d);
    const char *p = save("n2.npy", &b);
    cs_load_options o = rec_opts();
    cs_error e;
    ck_assert_int_eq(load_fail(p, &o, &e), CS_EDATA); /* 2 samples per shot < min_points 3 */
    ck_assert_ptr_nonnull(strstr(e.msg, "not read as I/Q"));
    o.min_points = 2;
    cs_loaded l;
    ck_assert_int_eq(load(p, &o, &l, &e), CS_OK);
    ck_assert_uint_eq(l.nrecords, 5);
    ck_assert_int_eq(l.records[0]->is_complex, 0);
    ck_assert_uint_eq(l.records[0]->n, 2);
    ck_assert(l.records[4]->data[1] == v[9]);
    cs_loaded_release(&l);
}
END_TEST

/* Fortran order: element (shot s, sample k) of a (2, 4) array is stored at k * 2 + s. */
START_TEST(fortran_order_records)
{
    unsigned char d[8 * 16];
    for (size_t k = 0; k < 4; k++)
        for (size_t s = 0; s < 2; s++)
            for (size_t c = 0; c < 2; c++)
                put_value(d + 16 * (k * 2 + s) + 8 * c, 'f', 8,
                          100.0 * (double)s + 10.0 * (double)k + (double)c, 0);
    npy_built b = build(1, 0, "{'descr': '<c16', 'fortran_order': True, 'shape': (2, 4), }", PAD64,
                        d, sizeof d);
    const char *p = save("fort.npy", &b);
    cs_load_options o = rec_opts();
    cs_loaded l;
    cs_error e;
    ck_assert_int_eq(load(p, &o, &l, &e), CS_OK);
    ck_assert_uint_eq(l.nrecords, 2);
    for (size_t s = 0; s < 2; s++)
        for (size_t k = 0; k < 4; k++)
            for (size_t c = 0; c < 2; c++)
                ck_assert(l.records[s]->data[2 * k + c] ==
                          100.0 * (double)s + 10.0 * (double)k + (double)c);
    ck_assert_ptr_nonnull(strstr(l.notes, "Fortran"));
    cs_loaded_release(&l);
    /* 1-D with fortran_order True: the same bytes as C order */
    b = build(1, 0, "{'descr': '<c16', 'fortran_order': True, 'shape': (8,), }", PAD64, d,
              sizeof d);
    p = save("fort1d.npy", &b);
    ck_assert_int_eq(load(p, &o, &l, &e), CS_OK);
    ck_assert_uint_eq(l.nrecords, 1);
    ck_assert(l.records[0]->data[2] == 100.0); /* element 1 = (s=1, k=0) */
    cs_loaded_release(&l);
}
END_TEST

/* Large 2-D arrays crossing the 64 Ki-element chunks, in both orders and the decoding path. */
START_TEST(chunked_large)
{
    const size_t rows = 3, cols = 50001;
    const size_t n = rows * cols;
    unsigned char *d = malloc(n * 4);
    ck_assert_ptr_nonnull(d);
    for (int fortran = 0; fortran < 2; fortran++) {
        for (size_t e = 0; e < n; e++) {
            size_t r = fortran ? e % rows : e / cols, c = fortran ? e / rows : e % cols;
            put_value(d + 4 * e, 'i', 4, (double)(r * 1000000 + c), 1);
        }
        npy_built b =
            build(1, 0,
                  fortran ? "{'descr': '>i4', 'fortran_order': True, 'shape': (3, 50001), }"
                          : "{'descr': '>i4', 'fortran_order': False, 'shape': (3, 50001), }",
                  PAD64, d, n * 4);
        const char *p = save("big.npy", &b);
        cs_load_options o = rec_opts();
        cs_loaded l;
        cs_error e;
        ck_assert_int_eq(load(p, &o, &l, &e), CS_OK);
        for (size_t r = 0; r < rows; r++)
            for (size_t c = 0; c < cols; c++)
                if (l.records[r]->data[c] != (double)(r * 1000000 + c))
                    ck_abort_msg("fortran=%d shot %zu sample %zu wrong", fortran, r, c);
        cs_loaded_release(&l);
    }
    free(d);
}
END_TEST

START_TEST(trailing_bytes_ignored)
{
    unsigned char d[3 * 8 + 5] = {0};
    npy_built b = build(1, 0, "{'descr': '<f8', 'fortran_order': False, 'shape': (3,), }", PAD64, d,
                        sizeof d);
    const char *p = save("trail.npy", &b);
    cs_load_options o = rec_opts();
    cs_loaded l;
    cs_error e;
    ck_assert_int_eq(load(p, &o, &l, &e), CS_OK);
    ck_assert_ptr_nonnull(strstr(l.notes, "5 bytes after the array ignored"));
    cs_loaded_release(&l);
}
END_TEST

START_TEST(via_dispatcher)
{
    unsigned char d[24] = {0};
    npy_built b = build(1, 0, "{'descr': '<f8', 'fortran_order': False, 'shape': (3,), }", PAD64, d,
                        sizeof d);
    const char *p = save("npy_without_extension.dat", &b); /* detected by its magic */
    cs_load_options o = rec_opts();
    cs_loaded l;
    cs_error e;
    ck_assert_int_eq(cs_io_load(p, &o, &l, &e), CS_OK);
    ck_assert_int_eq(l.format, CS_FORMAT_NPY);
    ck_assert_uint_eq(l.records[0]->n, 3);
    cs_loaded_release(&l);
}
END_TEST

/* ---------------------------------------------------------------- header syntax */

typedef struct hdr_ok {
    const char *dict;
    int pad;
} hdr_ok;

/* All of these describe '<i2', shape (4,), C order. */
static const hdr_ok good_headers[] = {
    {"{'descr': '<i2', 'fortran_order': False, 'shape': (4,), }", PAD64},
    {"{'shape': (4,), 'fortran_order': False, 'descr': '<i2'}", PAD64},
    {"{\"descr\":\"<i2\",'fortran_order':False,'shape':( 4 , ) }", PAD64},
    {"{'fortran_order': False, 'shape': (4L,), 'descr': '<i2', }", PAD16},
    {"{\n\t'descr' : '<i2' ,\n 'fortran_order' : False ,\r\n 'shape' : (4,)\n}", PAD_NONE},
    {"{'descr': '<i2', 'fortran_order': False, 'shape': (4,)}", PAD_NOTHING_AT_ALL},
    {"   {'descr': '<i2', 'fortran_order': False, 'shape': (4,), }", PAD64},
};

START_TEST(header_variants)
{
    const hdr_ok *h = &good_headers[_i];
    unsigned char d[8];
    for (int i = 0; i < 4; i++)
        put_value(d + 2 * i, 'i', 2, -3.0 * i, 0);
    npy_built b = build(_i % 2 ? 2 : 1, 0, h->dict, h->pad, d, sizeof d);
    const char *p = save("var.npy", &b);
    cs_load_options o = rec_opts();
    cs_loaded l;
    cs_error e;
    ck_assert_msg(load(p, &o, &l, &e) == CS_OK, "header %d: %s", _i, e.msg);
    ck_assert_uint_eq(l.records[0]->n, 4);
    ck_assert(l.records[0]->data[3] == -9.0);
    cs_loaded_release(&l);
}
END_TEST

typedef struct hdr_bad {
    const char *dict; /* '@' marks the byte the reader must name; "@" at the end = end of header */
    int code;
    const char *says; /* a piece of the expected message */
} hdr_bad;

static const hdr_bad bad_headers[] = {
    {"{'descr': '<i2', 'fortran_order': False, 'shape': (4,), @", CS_EFORMAT, "quoted key"},
    {"{'descr': '<i2', 'shape': (4,)@}", CS_EFORMAT, "no 'fortran_order'"},
    {"{'descr': '<i2', @'descr': '<i2', 'fortran_order': False, 'shape': (4,)}", CS_EFORMAT,
     "twice"},
    {"{'descr': '<i2', 'fortran_order': False, 'shape': (4,), @'extra': 1}", CS_EFORMAT, "'extra'"},
    {"{'descr': '<i2', 'fortran_order': @Tru, 'shape': (4,)}", CS_EFORMAT, "True or False"},
    {"{'descr': '<i2', 'fortran_order': @false, 'shape': (4,)}", CS_EFORMAT, "True or False"},
    {"{'descr': '<i2', 'fortran_order': False, 'shape': (@-4,)}", CS_EFORMAT, "negative"},
    {"{'descr': '<i2', 'fortran_order': False, 'shape': (4@.0,)}", CS_EFORMAT, "whole numbers"},
    {"{'descr': '<i2', 'fortran_order': False, 'shape': @(4)}", CS_EFORMAT, "not a tuple"},
    {"{'descr': '<i2', 'fortran_order': False, 'shape': @[4]}", CS_EFORMAT, "tuple"},
    {"{'descr': '<i2', 'fortran_order': False, 'shape': (4,)} @x", CS_EFORMAT,
     "after the dictionary"},
    {"{'descr': @5, 'fortran_order': False, 'shape': (4,)}", CS_EFORMAT, "quoted dtype"},
    {"{'descr' @'<i2', 'fortran_order': False, 'shape': (4,)}", CS_EFORMAT, "expected ':'"},
    {"{'descr': '<i2' @'fortran_order': False, 'shape': (4,)}", CS_EFORMAT, "expected ',' or '}'"},
    {"{'descr': @'<i2\n', 'fortran_order': False, 'shape': (4,)}", CS_EFORMAT, "unterminated"},
    {"@('descr': '<i2', 'fortran_order': False, 'shape': (4,))", CS_EFORMAT, "'{'"},
    {"{'descr': '<i2', 'fortran_order': False, 'shape': (@99999999999999999999999,)}", CS_ERANGE,
     "too large"},
    {"{'descr': '<i2',@, 'fortran_order': False, 'shape': (4,)}", CS_EFORMAT, "quoted key"},
    {"{'descr': '<i2', 'fortran_order': False, 'shape': (4,@,)}", CS_EFORMAT, "integer"},
    {"{'descr': '<i2', 'fortran_order': False, 'shape': (4 @5,)}", CS_EFORMAT,
     "expected ',' or ')'"},
    {"{@}", CS_EFORMAT, "no 'descr'"},
    {"@", CS_EFORMAT, "'{'"},
};

START_TEST(header_faults)
{
    const hdr_bad *h = &bad_headers[_i];
    char dict[256];
    const char *at = strchr(h->dict, '@');
    ck_assert_ptr_nonnull(at);
    size_t mark = (size_t)(at - h->dict);
    snprintf(dict, sizeof dict, "%.*s%s", (int)mark, h->dict, at + 1);
    unsigned char d[8] = {0};
    /* no padding, so a mark at the very end means "the end of the header" */
    npy_built b = build(1, 0, dict, PAD_NOTHING_AT_ALL, d, sizeof d);
    long long want = (long long)(b.header_start + mark);
    const char *p = save("bad.npy", &b);
    cs_load_options o = rec_opts();
    cs_error e;
    ck_assert_int_eq(load_fail(p, &o, &e), h->code);
    ck_assert_msg(e.offset == want, "header %d (%s): offset %lld, want %lld; %s", _i, h->dict,
                  e.offset, want, e.msg);
    ck_assert_msg(strstr(e.msg, h->says) != NULL, "header %d: message '%s' lacks '%s'", _i, e.msg,
                  h->says);
}
END_TEST

/* A NUL byte inside the header is malformed. */
START_TEST(header_nul_byte)
{
    char dict[] = "{'descr': '<i2', 'fortran_order': False,X'shape': (4,)}";
    char *x = strchr(dict, 'X');
    size_t mark = (size_t)(x - dict);
    unsigned char d[8] = {0};
    npy_built b = build(1, 0, dict, PAD64, d, sizeof d);
    b.bytes[b.header_start + mark] = 0;
    const char *p = save("nul.npy", &b);
    cs_load_options o = rec_opts();
    cs_error e;
    ck_assert_int_eq(load_fail(p, &o, &e), CS_EFORMAT);
    ck_assert_int_eq(e.offset, (long long)(b.header_start + mark));
}
END_TEST

/* Version 3.0 headers are UTF-8: a malformed sequence is refused at its first byte; a well-formed
 * one inside a string is kept and quoted back. Version 1.0 headers are latin-1. */
START_TEST(header_utf8)
{
    char dict[] = "{'descr': '<i2', 'fortran_order': False, 'shape': (4,), }  ";
    size_t dl = strlen(dict);
    unsigned char d[8] = {0};
    npy_built b = build(3, 0, dict, PAD64, d, sizeof d);
    b.bytes[b.header_start + dl - 1] = 0xC3; /* a lead byte followed by a space: invalid */
    const char *p = save("v3bad.npy", &b);
    cs_load_options o = rec_opts();
    cs_error e;
    ck_assert_int_eq(load_fail(p, &o, &e), CS_EFORMAT);
    ck_assert_int_eq(e.offset, (long long)(b.header_start + dl - 1));
    ck_assert_ptr_nonnull(strstr(e.msg, "UTF-8"));

    b = build(3, 0, "{'descr': '<\xC3\xA9', 'fortran_order': False, 'shape': (4,), }", PAD64, d,
              sizeof d);
    p = save("v3u.npy", &b);
    ck_assert_int_eq(load_fail(p, &o, &e), CS_EFORMAT);
    ck_assert_ptr_nonnull(strstr(e.msg, "'<\xC3\xA9'"));

    /* the same invalid byte is acceptable latin-1 in version 1.0 (padding region is whitespace
     * only, so put it inside a string where it ends up an unknown dtype, not a UTF-8 error) */
    b = build(1, 0, "{'descr': '<\xC3', 'fortran_order': False, 'shape': (4,), }", PAD64, d,
              sizeof d);
    p = save("v1latin.npy", &b);
    ck_assert_int_eq(load_fail(p, &o, &e), CS_EFORMAT);
    ck_assert_ptr_null(strstr(e.msg, "UTF-8"));
    ck_assert_ptr_nonnull(strstr(e.msg, "unsupported dtype"));
}
END_TEST

/* ---------------------------------------------------------------- preamble faults */

START_TEST(bad_magic_version_length)
{
    unsigned char d[8] = {0};
    cs_load_options o = rec_opts();
    cs_error e;
    npy_built b =
        build(1, 0, "{'descr': '<i2', 'fortran_order': False, 'shape': (4,), }", PAD64, d, 8);
    b.bytes[5] = 'X'; /* \x93NUMPX */
    const char *p = save("magic.npy", &b);
    ck_assert_int_eq(load_fail(p, &o, &e), CS_EFORMAT);
    ck_assert_int_eq(e.offset, 5);
    ck_assert_ptr_nonnull(strstr(e.msg, "not a .npy file"));

    p = tu_write_file("tiny.npy", "\x93NUM", 4);
    ck_assert_int_eq(load_fail(p, &o, &e), CS_EFORMAT);
    ck_assert_int_eq(e.offset, 4);

    b = build(4, 0, "{'descr': '<i2', 'fortran_order': False, 'shape': (4,), }", PAD64, d, 8);
    p = save("v4.npy", &b);
    ck_assert_int_eq(load_fail(p, &o, &e), CS_EUNSUP);
    ck_assert_int_eq(e.offset, 6);
    ck_assert_ptr_nonnull(strstr(e.msg, "4.0"));

    b = build(1, 1, "{'descr': '<i2', 'fortran_order': False, 'shape': (4,), }", PAD64, d, 8);
    p = save("v11.npy", &b);
    ck_assert_int_eq(load_fail(p, &o, &e), CS_EUNSUP);

    /* header length claims more than the file holds */
    b = build(2, 0, "{'descr': '<i2', 'fortran_order': False, 'shape': (4,), }", PAD64, d, 0);
    put_bits(b.bytes + 8, 4, 5000, 0);
    size_t flen = b.len;
    p = save("hlen.npy", &b);
    ck_assert_int_eq(load_fail(p, &o, &e), CS_EFORMAT);
    ck_assert_int_eq(e.offset, (long long)flen);
    ck_assert_ptr_nonnull(strstr(e.msg, "runs past the end"));

    ck_assert_int_eq(load_fail(tu_tmp_path("absent.npy"), &o, &e), CS_EIO);
}
END_TEST

/* ---------------------------------------------------------------- dtype, shape and data faults */

static const char *const unknown_dtypes[] = {
    "'<U8'", "'|O'", "'<m8'", "'<f2'", "'|f8'", "'<b1'", "'<i3'", "'=f8'", "'f8'", "'<c32'",
    "[('r', '<f8'), ('i', '<f8')]",
};

START_TEST(unknown_dtype)
{
    char dict[160];
    snprintf(dict, sizeof dict, "{'descr': %s, 'fortran_order': False, 'shape': (4,), }",
             unknown_dtypes[_i]);
    unsigned char d[64] = {0};
    npy_built b = build(1, 0, dict, PAD64, d, sizeof d);
    long long want = (long long)(b.header_start + strlen("{'descr': "));
    const char *p = save("unk.npy", &b);
    cs_load_options o = rec_opts();
    cs_error e;
    ck_assert_int_eq(load_fail(p, &o, &e), CS_EFORMAT);
    ck_assert_int_eq(e.offset, want);
    /* the message quotes the dtype as written */
    ck_assert_msg(strstr(e.msg, unknown_dtypes[_i]) != NULL, "%s not in '%s'", unknown_dtypes[_i],
                  e.msg);
}
END_TEST

/* shape (10,) '<f8' needs 80 bytes; give 79. */
START_TEST(truncated_data)
{
    unsigned char d[79] = {0};
    npy_built b = build(1, 0, "{'descr': '<f8', 'fortran_order': False, 'shape': (10,), }", PAD64,
                        d, sizeof d);
    long long end = (long long)b.len;
    const char *p = save("trunc.npy", &b);
    cs_load_options o = rec_opts();
    cs_error e;
    ck_assert_int_eq(load_fail(p, &o, &e), CS_EFORMAT);
    ck_assert_ptr_nonnull(strstr(e.msg, "truncated: expected 80 bytes of data, found 79"));
    ck_assert_int_eq(e.offset, end);
}
END_TEST

static const char *const huge_shapes[] = {
    "(1152921504606846976,)",          /* 2^60 */
    "(1099511627776, 1099511627776)",  /* 2^40 x 2^40 overflows 64 bits */
    "(4294967296, 4294967296)",        /* 2^32 x 2^32 = 2^64: overflows by one */
    "(18446744073709551615, 2)",       /* UINT64_MAX rows */
    "(18446744073709551616,)",         /* 2^64: not even an integer of 64 bits */
    "(2147483649,)",                   /* 2^31 + 1: just above the default limit */
};

START_TEST(huge_shape)
{
    char dict[160];
    snprintf(dict, sizeof dict, "{'descr': '<c16', 'fortran_order': False, 'shape': %s, }",
             huge_shapes[_i]);
    unsigned char d[16] = {0};
    npy_built b = build(1, 0, dict, PAD64, d, sizeof d);
    const char *p = save("huge.npy", &b);
    cs_load_options o = rec_opts();
    cs_error e;
    ck_assert_int_eq(load_fail(p, &o, &e), CS_ERANGE);
}
END_TEST

START_TEST(max_samples_option)
{
    unsigned char d[101 * 2] = {0};
    npy_built b = build(1, 0, "{'descr': '<i2', 'fortran_order': False, 'shape': (101,), }", PAD64,
                        d, sizeof d);
    const char *p = save("max.npy", &b);
    cs_load_options o = rec_opts();
    o.max_samples = 100;
    cs_error e;
    ck_assert_int_eq(load_fail(p, &o, &e), CS_ERANGE);
    o.max_samples = 101;
    cs_loaded l;
    ck_assert_int_eq(load(p, &o, &l, &e), CS_OK);
    cs_loaded_release(&l);
}
END_TEST

START_TEST(unusable_shapes)
{
    unsigned char d[64] = {0};
    cs_load_options o = rec_opts();
    cs_error e;
    npy_built b =
        build(1, 0, "{'descr': '<f8', 'fortran_order': False, 'shape': (2, 2, 2), }", PAD64, d, 64);
    const char *p = save("3d.npy", &b);
    ck_assert_int_eq(load_fail(p, &o, &e), CS_EUNSUP);
    b = build(1, 0, "{'descr': '<f8', 'fortran_order': False, 'shape': (), }", PAD64, d, 8);
    p = save("0d.npy", &b);
    ck_assert_int_eq(load_fail(p, &o, &e), CS_EDATA);
    b = build(1, 0, "{'descr': '<f8', 'fortran_order': False, 'shape': (0,), }", PAD64, d, 0);
    p = save("empty.npy", &b);
    ck_assert_int_eq(load_fail(p, &o, &e), CS_EDATA);
    b = build(1, 0, "{'descr': '<f8', 'fortran_order': False, 'shape': (3, 0), }", PAD64, d, 0);
    p = save("empty2.npy", &b);
    ck_assert_int_eq(load_fail(p, &o, &e), CS_EDATA);
    b = build(1, 0, "{'descr': '<f8', 'fortran_order': False, 'shape': (2,), }", PAD64, d, 16);
    p = save("few.npy", &b);
    ck_assert_int_eq(load_fail(p, &o, &e), CS_EDATA);
}
END_TEST

START_TEST(needs_sample_rate)
{
    unsigned char d[32] = {0};
    npy_built b =
        build(1, 0, "{'descr': '<f8', 'fortran_order': False, 'shape': (4,), }", PAD64, d, 32);
    const char *p = save("nosr.npy", &b);
    cs_load_options o;
    cs_load_options_init(&o);
    cs_error e;
    ck_assert_int_eq(load_fail(p, &o, &e), CS_EINVAL);
    ck_assert_ptr_nonnull(strstr(e.msg, "--sample-rate"));
}
END_TEST

/* NaN/Inf: offsets are data start + element * itemsize (+ half an item for an imaginary part). */
START_TEST(nan_inf_offsets)
{
    cs_load_options o = rec_opts();
    cs_error e;
    unsigned char d[8 * 16];
    memset(d, 0, sizeof d);
    put_value(d + 5 * 4, 'f', 4, NAN, 0);
    npy_built b =
        build(1, 0, "{'descr': '<f4', 'fortran_order': False, 'shape': (8,), }", PAD64, d, 32);
    long long ds = (long long)b.data_start;
    const char *p = save("nan.npy", &b);
    ck_assert_int_eq(load_fail(p, &o, &e), CS_EDATA);
    ck_assert_int_eq(e.offset, ds + 20);
    ck_assert_ptr_nonnull(strstr(e.msg, "sample 5 of shot 0 is NaN"));

    memset(d, 0, sizeof d);
    put_value(d + 2 * 16 + 8, 'f', 8, -INFINITY, 0);
    b = build(2, 0, "{'descr': '<c16', 'fortran_order': False, 'shape': (2, 4), }", PAD64, d, 128);
    ds = (long long)b.data_start;
    p = save("inf.npy", &b);
    ck_assert_int_eq(load_fail(p, &o, &e), CS_EDATA);
    ck_assert_int_eq(e.offset, ds + 40);
    ck_assert_ptr_nonnull(strstr(e.msg, "sample 2 (imaginary part) of shot 0 is infinite"));

    /* Fortran order (2, 4): file element 5 is shot 1, sample 2 */
    memset(d, 0, sizeof d);
    put_value(d + 5 * 8, 'f', 8, NAN, 1);
    b = build(1, 0, "{'descr': '>f8', 'fortran_order': True, 'shape': (2, 4), }", PAD64, d, 64);
    ds = (long long)b.data_start;
    p = save("nanf.npy", &b);
    ck_assert_int_eq(load_fail(p, &o, &e), CS_EDATA);
    ck_assert_int_eq(e.offset, ds + 40);
    ck_assert_ptr_nonnull(strstr(e.msg, "sample 2 of shot 1"));
}
END_TEST

/* ---------------------------------------------------------------- spectra */

static cs_load_options spec_opts(const char *unit)
{
    cs_load_options o;
    cs_load_options_init(&o);
    o.kind = CS_KIND_SPECTRUM;
    o.x_unit = unit;
    return o;
}

/* data start of the last file spectrum_file() wrote */
static long long spectrum_data_start;

/* rows of (x, y[, sigma]) as '<f8' in C or Fortran order */
static const char *spectrum_file(const char *name, const double *x, const double *y,
                                 const double *s, size_t n, int fortran)
{
    size_t cols = s ? 3 : 2;
    unsigned char *d = malloc(n * cols * 8);
    ck_assert_ptr_nonnull(d);
    for (size_t i = 0; i < n; i++)
        for (size_t c = 0; c < cols; c++) {
            double v = c == 0 ? x[i] : c == 1 ? y[i] : s[i];
            size_t e = fortran ? c * n + i : i * cols + c;
            put_value(d + 8 * e, 'f', 8, v, 0);
        }
    char dict[128];
    snprintf(dict, sizeof dict, "{'descr': '<f8', 'fortran_order': %s, 'shape': (%zu, %zu), }",
             fortran ? "True" : "False", n, cols);
    npy_built b = build(1, 0, dict, PAD64, d, n * cols * 8);
    free(d);
    spectrum_data_start = (long long)b.data_start;
    return save(name, &b);
}

START_TEST(spectrum_hz_and_sigma)
{
    const double x[4] = {1e9, 1.5e9, 2e9, 3e9}, y[4] = {0.5, 1.0, 0.25, -0.125},
                 s[4] = {0.1, 0.2, 0.3, 0.4};
    cs_load_options o = spec_opts(NULL);
    cs_loaded l;
    cs_error e;
    const char *p = spectrum_file("sp.npy", x, y, s, 4, _i);
    ck_assert_int_eq(load(p, &o, &l, &e), CS_OK);
    ck_assert_int_eq(l.kind, CS_KIND_SPECTRUM);
    const cs_spectrum *sp = l.spectrum;
    ck_assert_uint_eq(sp->n, 4);
    ck_assert_ptr_nonnull(sp->sigma);
    for (int i = 0; i < 4; i++)
        ck_assert(sp->freq_hz[i] == x[i] && sp->y[i] == y[i] && sp->sigma[i] == s[i]);
    ck_assert_int_eq(sp->x_unit_assumed, 1);
    ck_assert_str_eq(sp->x_unit, "Hz");
    ck_assert_str_eq(sp->source, p);
    cs_loaded_release(&l);
}
END_TEST

/* A descending axis is reversed, with y kept with its x. */
START_TEST(spectrum_descending_mhz)
{
    const double x[5] = {50, 40, 30, 20, 10}, y[5] = {1, 2, 3, 4, 5};
    cs_load_options o = spec_opts("MHz");
    cs_loaded l;
    cs_error e;
    const char *p = spectrum_file("spd.npy", x, y, NULL, 5, 0);
    ck_assert_int_eq(load(p, &o, &l, &e), CS_OK);
    const cs_spectrum *sp = l.spectrum;
    ck_assert_ptr_null(sp->sigma);
    for (int i = 0; i < 5; i++) {
        ck_assert(tu_close(sp->freq_hz[i], x[4 - i] * 1e6, 1e-15));
        ck_assert(sp->y[i] == y[4 - i]);
    }
    ck_assert_int_eq(sp->conv.reversed, 1);
    ck_assert_int_eq(sp->x_unit_assumed, 0);
    ck_assert_str_eq(sp->x_unit, "MHz");
    ck_assert_ptr_nonnull(strstr(l.notes, "reversed"));
    cs_loaded_release(&l);
}
END_TEST

/* Wavelengths (vacuum): nu = c / lambda (c = 299 792 458 m/s exactly); ascending nm -> reversed. */
START_TEST(spectrum_wavelength_nm)
{
    const double x[3] = {780.0, 780.1, 780.2}, y[3] = {1, 2, 3};
    cs_load_options o = spec_opts("nm");
    cs_loaded l;
    cs_error e;
    const char *p = spectrum_file("spnm.npy", x, y, NULL, 3, 1);
    ck_assert_int_eq(load(p, &o, &l, &e), CS_OK);
    const cs_spectrum *sp = l.spectrum;
    for (int i = 0; i < 3; i++) {
        ck_assert(tu_close(sp->freq_hz[i], 299792458.0 / (x[2 - i] * 1e-9), 1e-14));
        ck_assert(sp->y[i] == y[2 - i]);
    }
    ck_assert_int_eq(sp->conv.reversed, 1);
    cs_loaded_release(&l);
}
END_TEST

START_TEST(spectrum_faults)
{
    cs_load_options o = spec_opts(NULL);
    cs_error e;
    const double x[4] = {1, 2, 1.5, 3}, y[4] = {0, 0, 0, 0}, s[4] = {1, 1, 0, 1};
    /* x goes back in row 2: element (2, 0) in C order is element 2*2, at data start + 32 */
    const char *p = spectrum_file("spnm1.npy", x, y, NULL, 4, 0);
    ck_assert_int_eq(load_fail(p, &o, &e), CS_EDATA);
    ck_assert_ptr_nonnull(strstr(e.msg, "row 2"));
    ck_assert_int_eq(e.offset, spectrum_data_start + 32);
    /* repeated x */
    const double xr[4] = {1, 2, 2, 3};
    p = spectrum_file("sprep.npy", xr, y, NULL, 4, 0);
    ck_assert_int_eq(load_fail(p, &o, &e), CS_EDATA);
    ck_assert_ptr_nonnull(strstr(e.msg, "repeats"));
    /* sigma 0 in row 2 (Fortran order: element (2, 2) at 2*4 + 2 = 10) */
    const double xo[4] = {1, 2, 3, 4};
    p = spectrum_file("spsig.npy", xo, y, s, 4, 1);
    ck_assert_int_eq(load_fail(p, &o, &e), CS_EDATA);
    ck_assert_int_eq(e.offset, spectrum_data_start + 80);
    ck_assert_ptr_nonnull(strstr(e.msg, "sigma"));
    /* unknown unit */
    p = spectrum_file("spu.npy", xo, y, NULL, 4, 0);
    o.x_unit = "furlongs";
    ck_assert_int_eq(load_fail(p, &o, &e), CS_EUNIT);
    /* a time unit is not a spectral axis */
    o.x_unit = "us";
    ck_assert_int_eq(load_fail(p, &o, &e), CS_EUNIT);
    /* wrong shapes for a spectrum */
    o.x_unit = NULL;
    unsigned char d[64] = {0};
    npy_built b =
        build(1, 0, "{'descr': '<c16', 'fortran_order': False, 'shape': (2, 2), }", PAD64, d, 64);
    p = save("spc.npy", &b);
    ck_assert_int_eq(load_fail(p, &o, &e), CS_EFORMAT);
    b = build(1, 0, "{'descr': '<f8', 'fortran_order': False, 'shape': (8,), }", PAD64, d, 64);
    p = save("sp1d.npy", &b);
    ck_assert_int_eq(load_fail(p, &o, &e), CS_EFORMAT);
    b = build(1, 0, "{'descr': '<f8', 'fortran_order': False, 'shape': (2, 4), }", PAD64, d, 64);
    p = save("sp4.npy", &b);
    ck_assert_int_eq(load_fail(p, &o, &e), CS_EFORMAT);
}
END_TEST

/* ---------------------------------------------------------------- writer */

static unsigned char *slurp(const char *p, size_t *len)
{
    FILE *f = fopen(p, "rb");
    ck_assert_ptr_nonnull(f);
    fseek(f, 0, SEEK_END);
    long n = ftell(f);
    fseek(f, 0, SEEK_SET);
    unsigned char *b = malloc((size_t)n + 1);
    ck_assert_ptr_nonnull(b);
    ck_assert_uint_eq(fread(b, 1, (size_t)n, f), (size_t)n);
    fclose(f);
    *len = (size_t)n;
    return b;
}

START_TEST(write_one_real_record)
{
    cs_record *r = cs_record_alloc(5, 0);
    for (int i = 0; i < 5; i++)
        r->data[i] = 0.1 * i - 1e-300;
    const char *p = tu_tmp_path("w1.npy");
    cs_error e;
    ck_assert_int_eq(cs_io_npy_write_records(p, &r, 1, &e), CS_OK);
    size_t len;
    unsigned char *b = slurp(p, &len);
    ck_assert(memcmp(b, "\x93NUMPY\x01\x00", 8) == 0);
    size_t hlen = b[8] | (size_t)b[9] << 8;
    ck_assert_uint_eq((10 + hlen) % 64, 0);
    ck_assert_int_eq(b[10 + hlen - 1], '\n');
    const char *want = "{'descr': '<f8', 'fortran_order': False, 'shape': (5,), }";
    ck_assert(memcmp(b + 10, want, strlen(want)) == 0);
    for (size_t i = 10 + strlen(want); i < 10 + hlen - 1; i++)
        ck_assert_int_eq(b[i], ' ');
    ck_assert_uint_eq(len, 10 + hlen + 40);
    for (int i = 0; i < 5; i++) {
        unsigned char x[8];
        put_value(x, 'f', 8, r->data[i], 0);
        ck_assert(memcmp(b + 10 + hlen + 8 * i, x, 8) == 0);
    }
    free(b);
    cs_load_options o = rec_opts();
    cs_loaded l;
    ck_assert_int_eq(load(p, &o, &l, &e), CS_OK);
    ck_assert_uint_eq(l.nrecords, 1);
    for (int i = 0; i < 5; i++)
        ck_assert(l.records[0]->data[i] == r->data[i]);
    cs_loaded_release(&l);
    cs_record_free(r);
}
END_TEST

START_TEST(write_complex_shots_roundtrip)
{
    cs_record *r[3];
    for (int s = 0; s < 3; s++) {
        r[s] = cs_record_alloc(7, 1);
        for (int i = 0; i < 14; i++)
            r[s]->data[i] = sin(s * 100.0 + i) * 1e5;
    }
    const char *p = tu_tmp_path("w3.npy");
    cs_error e;
    ck_assert_int_eq(cs_io_npy_write_records(p, r, 3, &e), CS_OK);
    size_t len;
    unsigned char *b = slurp(p, &len);
    const char *want = "{'descr': '<c16', 'fortran_order': False, 'shape': (3, 7), }";
    ck_assert(memcmp(b + 10, want, strlen(want)) == 0);
    size_t hlen = b[8] | (size_t)b[9] << 8;
    ck_assert_uint_eq((10 + hlen) % 64, 0);
    free(b);
    cs_load_options o = rec_opts();
    cs_loaded l;
    ck_assert_int_eq(load(p, &o, &l, &e), CS_OK);
    ck_assert_uint_eq(l.nrecords, 3);
    for (int s = 0; s < 3; s++) {
        ck_assert_int_eq(l.records[s]->is_complex, 1);
        for (int i = 0; i < 14; i++)
            ck_assert(l.records[s]->data[i] == r[s]->data[i]);
    }
    cs_loaded_release(&l);
    for (int s = 0; s < 3; s++)
        cs_record_free(r[s]);
}
END_TEST

START_TEST(write_refusals)
{
    cs_record *a = cs_record_alloc(4, 0), *b = cs_record_alloc(5, 0), *c = cs_record_alloc(4, 1);
    cs_record *ab[2] = {a, b}, *ac[2] = {a, c}, *an[2] = {a, NULL};
    cs_error e;
    const char *p = tu_tmp_path("wr.npy");
    ck_assert_int_eq(cs_io_npy_write_records(p, ab, 2, &e), CS_EINVAL);
    ck_assert_int_eq(cs_io_npy_write_records(p, ac, 2, &e), CS_EINVAL);
    ck_assert_int_eq(cs_io_npy_write_records(p, an, 2, &e), CS_EINVAL);
    ck_assert_int_eq(cs_io_npy_write_records(p, ab, 0, &e), CS_EINVAL);
    ck_assert_int_eq(cs_io_npy_write_records(tu_tmp_path("no/such/dir.npy"), ab, 1, &e), CS_EIO);
    FILE *f = fopen(p, "rb");
    ck_assert_ptr_null(f); /* nothing written by the refused calls */
    cs_record_free(a);
    cs_record_free(b);
    cs_record_free(c);
}
END_TEST

/* Sanity check of the streaming design, not a benchmark (see test_io_raw.c): a 2^20-sample
 * complex128 array, in the decoding ('>c16') and the direct ('<c16') paths. */
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
    int big = _i;
    const char *p = tu_tmp_path(big ? "membe.npy" : "memle.npy");
    FILE *f = fopen(p, "wb");
    ck_assert_ptr_nonnull(f);
    npy_built b = build(1, 0,
                        big ? "{'descr': '>c16', 'fortran_order': False, 'shape': (1048576,), }"
                            : "{'descr': '<c16', 'fortran_order': False, 'shape': (1048576,), }",
                        PAD64, NULL, 0);
    ck_assert_uint_eq(fwrite(b.bytes, 1, b.len, f), b.len);
    free(b.bytes);
    static unsigned char chunk[4096 * 16];
    for (size_t i = 0; i < n; i += 4096) {
        for (size_t j = 0; j < 2 * 4096; j++)
            put_value(chunk + 8 * j, 'f', 8, (double)((2 * i + j) % 977), big);
        ck_assert_uint_eq(fwrite(chunk, 1, sizeof chunk, f), sizeof chunk);
    }
    ck_assert_int_eq(fclose(f), 0);
    struct rusage before, after;
    getrusage(RUSAGE_SELF, &before);
    cs_load_options o = rec_opts();
    cs_loaded l;
    cs_error e;
    ck_assert_int_eq(load(p, &o, &l, &e), CS_OK);
    getrusage(RUSAGE_SELF, &after);
    double grown = (double)(after.ru_maxrss - before.ru_maxrss) * 1024.0;
    double data = (double)n * 16.0;
    ck_assert_msg(grown < 1.5 * data, "peak grew by %.1f MiB for %.1f MiB of data",
                  grown / 1048576.0, data / 1048576.0);
    ck_assert(l.records[0]->data[2 * n - 1] == (double)((2 * n - 1) % 977));
    cs_loaded_release(&l);
}
END_TEST

static Suite *npy_suite(void)
{
    Suite *s = suite_create("io_npy");
    TCase *tc = tcase_create("read");
    tcase_add_loop_test(tc, versions, 0, 3);
    tcase_add_loop_test(tc, every_dtype_both_orders, 0, (int)(3 * NDTS));
    tcase_add_test(tc, byte_order_literal);
    tcase_add_test(tc, two_d_complex_shots);
    tcase_add_test(tc, real_n_by_2_is_not_iq);
    tcase_add_test(tc, fortran_order_records);
    tcase_add_test(tc, chunked_large);
    tcase_add_test(tc, trailing_bytes_ignored);
    tcase_add_test(tc, via_dispatcher);
    suite_add_tcase(s, tc);

    tc = tcase_create("header");
    tcase_add_loop_test(tc, header_variants, 0,
                        (int)(sizeof good_headers / sizeof good_headers[0]));
    tcase_add_loop_test(tc, header_faults, 0, (int)(sizeof bad_headers / sizeof bad_headers[0]));
    tcase_add_test(tc, header_nul_byte);
    tcase_add_test(tc, header_utf8);
    tcase_add_test(tc, bad_magic_version_length);
    suite_add_tcase(s, tc);

    tc = tcase_create("refusals");
    tcase_add_loop_test(tc, unknown_dtype, 0,
                        (int)(sizeof unknown_dtypes / sizeof unknown_dtypes[0]));
    tcase_add_test(tc, truncated_data);
    tcase_add_loop_test(tc, huge_shape, 0, (int)(sizeof huge_shapes / sizeof huge_shapes[0]));
    tcase_add_test(tc, max_samples_option);
    tcase_add_test(tc, unusable_shapes);
    tcase_add_test(tc, needs_sample_rate);
    tcase_add_test(tc, nan_inf_offsets);
    suite_add_tcase(s, tc);

    tc = tcase_create("spectrum");
    tcase_add_loop_test(tc, spectrum_hz_and_sigma, 0, 2);
    tcase_add_test(tc, spectrum_descending_mhz);
    tcase_add_test(tc, spectrum_wavelength_nm);
    tcase_add_test(tc, spectrum_faults);
    suite_add_tcase(s, tc);

    tc = tcase_create("write");
    tcase_add_test(tc, write_one_real_record);
    tcase_add_test(tc, write_complex_shots_roundtrip);
    tcase_add_test(tc, write_refusals);
    suite_add_tcase(s, tc);

    tc = tcase_create("memory");
    tcase_add_loop_test(tc, peak_memory_one_pass, 0, 2);
    suite_add_tcase(s, tc);
    return s;
}

int main(void)
{
    SRunner *sr = srunner_create(npy_suite());
    srunner_run_all(sr, CK_NORMAL);
    int failed = srunner_ntests_failed(sr);
    srunner_free(sr);
    return failed ? EXIT_FAILURE : EXIT_SUCCESS;
}
