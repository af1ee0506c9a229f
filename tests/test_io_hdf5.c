/* Check suite for the HDF5 loader (src/io_hdf5.c, src/io_hdf5_tree.c). */
/*
 * Every input file is written here with the HDF5 C API, the way lab scripts write them (h5py
 * conventions included: complex numbers as a compound {r, i}, strings as variable-length UTF-8,
 * Python booleans as an enum FALSE/TRUE). Expected numbers are the values written; integer and
 * binary64 values must come back exactly, binary32 values exactly as their float32 rounding.
 */
#include <collshift/io.h>

#include <hdf5.h>

#include <check.h>
#include <fcntl.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/resource.h>
#include <sys/stat.h>
#include <unistd.h>

#include "testutil.h"

/* ---------------------------------------------------------------- writing helpers */

static hid_t h5_new(const char *name, const char **path)
{
    *path = tu_tmp_path(name);
    hid_t f = H5Fcreate(*path, H5F_ACC_TRUNC, H5P_DEFAULT, H5P_DEFAULT);
    ck_assert_int_ge(f, 0);
    return f;
}

/* Create dataset `name` of file type ftype and write `data` given in memory type mtype. */
static hid_t h5_put(hid_t loc, const char *name, hid_t ftype, hid_t mtype, int rank,
                    const hsize_t *dims, const void *data)
{
    hid_t sp = rank ? H5Screate_simple(rank, dims, NULL) : H5Screate(H5S_SCALAR);
    hid_t d = H5Dcreate2(loc, name, ftype, sp, H5P_DEFAULT, H5P_DEFAULT, H5P_DEFAULT);
    ck_assert_int_ge(d, 0);
    if (data)
        ck_assert_int_ge(H5Dwrite(d, mtype, H5S_ALL, H5S_ALL, H5P_DEFAULT, data), 0);
    H5Sclose(sp);
    return d;
}

static void h5_put1(hid_t loc, const char *name, const double *v, hsize_t n)
{
    H5Dclose(h5_put(loc, name, H5T_IEEE_F64LE, H5T_NATIVE_DOUBLE, 1, &n, v));
}

static void attr_num(hid_t obj, const char *name, hid_t ftype, hid_t mtype, const void *v)
{
    hid_t sp = H5Screate(H5S_SCALAR);
    hid_t a = H5Acreate2(obj, name, ftype, sp, H5P_DEFAULT, H5P_DEFAULT);
    ck_assert_int_ge(a, 0);
    ck_assert_int_ge(H5Awrite(a, mtype, v), 0);
    H5Aclose(a);
    H5Sclose(sp);
}

static void attr_double(hid_t obj, const char *name, double v)
{
    attr_num(obj, name, H5T_IEEE_F64LE, H5T_NATIVE_DOUBLE, &v);
}

static void attr_int(hid_t obj, const char *name, long long v)
{
    attr_num(obj, name, H5T_STD_I64LE, H5T_NATIVE_LLONG, &v);
}

/* A variable-length UTF-8 string, as h5py writes Python str attributes. */
static void attr_str(hid_t obj, const char *name, const char *text)
{
    hid_t t = H5Tcopy(H5T_C_S1);
    H5Tset_size(t, H5T_VARIABLE);
    H5Tset_cset(t, H5T_CSET_UTF8);
    hid_t sp = H5Screate(H5S_SCALAR);
    hid_t a = H5Acreate2(obj, name, t, sp, H5P_DEFAULT, H5P_DEFAULT);
    ck_assert_int_ge(a, 0);
    ck_assert_int_ge(H5Awrite(a, t, &text), 0);
    H5Aclose(a);
    H5Sclose(sp);
    H5Tclose(t);
}

/* A fixed-length, space-padded string (as some C and MATLAB writers do). */
static void attr_fstr(hid_t obj, const char *name, const char *text)
{
    size_t n = strlen(text) + 3;
    char *buf = malloc(n);
    memset(buf, ' ', n);
    memcpy(buf, text, strlen(text));
    hid_t t = H5Tcopy(H5T_C_S1);
    H5Tset_size(t, n);
    H5Tset_strpad(t, H5T_STR_SPACEPAD);
    hid_t sp = H5Screate(H5S_SCALAR);
    hid_t a = H5Acreate2(obj, name, t, sp, H5P_DEFAULT, H5P_DEFAULT);
    ck_assert_int_ge(H5Awrite(a, t, buf), 0);
    H5Aclose(a);
    H5Sclose(sp);
    H5Tclose(t);
    free(buf);
}

/* h5py's bool: an enum over int8 with FALSE = 0, TRUE = 1. */
static void attr_bool(hid_t obj, const char *name, int v)
{
    hid_t t = H5Tenum_create(H5T_NATIVE_SCHAR);
    signed char f = 0, tr = 1, val = (signed char)(v != 0);
    H5Tenum_insert(t, "FALSE", &f);
    H5Tenum_insert(t, "TRUE", &tr);
    attr_num(obj, name, t, t, &val);
    H5Tclose(t);
}

static cs_load_options h5_opts(const char *dataset)
{
    cs_load_options o;
    cs_load_options_init(&o);
    o.format = CS_FORMAT_HDF5;
    o.dataset = dataset;
    return o;
}

static int load(const char *p, const cs_load_options *o, cs_loaded *l, cs_error *e)
{
    cs_loaded_init(l);
    cs_error_clear(e);
    return cs_io_hdf5_load(p, o, l, e);
}

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

/* ---------------------------------------------------------------- records */

START_TEST(one_d_double)
{
    const char *p;
    hid_t f = h5_new("one.h5", &p);
    double v[100];
    for (int i = 0; i < 100; i++)
        v[i] = sin(0.1 * i) * 1e-3 + i;
    hsize_t n = 100;
    hid_t d = h5_put(f, "trace", H5T_IEEE_F64LE, H5T_NATIVE_DOUBLE, 1, &n, v);
    attr_double(d, "sample_rate", 50e6);
    H5Dclose(d);
    H5Fclose(f);
    cs_load_options o = h5_opts(NULL);
    cs_loaded l;
    cs_error e;
    ck_assert_int_eq(load(p, &o, &l, &e), CS_OK);
    ck_assert_int_eq(l.kind, CS_KIND_RECORD);
    ck_assert_uint_eq(l.nrecords, 1);
    const cs_record *r = l.records[0];
    ck_assert_uint_eq(r->n, 100);
    ck_assert_int_eq(r->is_complex, 0);
    for (int i = 0; i < 100; i++)
        ck_assert(r->data[i] == v[i]);
    ck_assert(r->dt_s == 1.0 / 50e6);
    ck_assert(r->t0_s == 0.0);
    ck_assert_str_eq(r->source, p);
    ck_assert_str_eq(r->t_unit, "s");
    ck_assert_uint_eq(r->shot, 0);
    ck_assert_ptr_null(cs_meta_find(&r->meta, "sample_rate")); /* used, not metadata */
    ck_assert_ptr_nonnull(strstr(l.notes, "'/trace'"));
    ck_assert_ptr_nonnull(strstr(l.notes, "sample_rate"));
    cs_loaded_release(&l);
}
END_TEST

typedef struct type_case {
    const char *name;
    hid_t *ftype; /* pointers: the H5T_ globals are run-time values */
    double values[5];
} type_case;

static hid_t t_i8, t_u16be, t_i32be, t_i64, t_f32be, t_f64be;

static void init_types(void)
{
    t_i8 = H5T_STD_I8LE;
    t_u16be = H5T_STD_U16BE;
    t_i32be = H5T_STD_I32BE;
    t_i64 = H5T_STD_I64LE;
    t_f32be = H5T_IEEE_F32BE;
    t_f64be = H5T_IEEE_F64BE;
}

static const type_case type_cases[] = {
    {"i8", &t_i8, {-128, -1, 0, 1, 127}},
    {"u16be", &t_u16be, {0, 1, 255, 256, 65535}},
    {"i32be", &t_i32be, {-2147483648.0, -1, 0, 65536, 2147483647.0}},
    {"i64", &t_i64, {-9007199254740992.0, -1, 0, 1, 9007199254740991.0}},
    {"f32be", &t_f32be, {-1.5, 0.1, 3.0e38, 1e-3, 65504}},
    {"f64be", &t_f64be, {-1.5, 0.1, 1e300, 1e-300, 1.0 / 3.0}},
};

START_TEST(every_numeric_type)
{
    init_types();
    const type_case *c = &type_cases[_i];
    const char *p;
    hid_t f = h5_new("types.h5", &p);
    hsize_t n = 5;
    hid_t d = h5_put(f, "x", *c->ftype, H5T_NATIVE_DOUBLE, 1, &n, c->values);
    H5Dclose(d);
    attr_double(f, "sample_rate", 1e3); /* on the root */
    H5Fclose(f);
    cs_load_options o = h5_opts("/x");
    cs_loaded l;
    cs_error e;
    ck_assert_msg(load(p, &o, &l, &e) == CS_OK, "%s: %s", c->name, e.msg);
    for (int i = 0; i < 5; i++) {
        double want = strncmp(c->name, "f32", 3) == 0 ? (double)(float)c->values[i] : c->values[i];
        ck_assert_msg(l.records[0]->data[i] == want, "%s value %d: %.17g vs %.17g", c->name, i,
                      l.records[0]->data[i], want);
    }
    ck_assert(l.records[0]->dt_s == 1e-3);
    cs_loaded_release(&l);
}
END_TEST

START_TEST(two_d_shots)
{
    const char *p;
    hid_t f = h5_new("shots.h5", &p);
    short v[3][50];
    for (int s = 0; s < 3; s++)
        for (int i = 0; i < 50; i++)
            v[s][i] = (short)(s * 1000 - i);
    hsize_t dims[2] = {3, 50};
    hid_t g = H5Gcreate2(f, "run", H5P_DEFAULT, H5P_DEFAULT, H5P_DEFAULT);
    hid_t d = h5_put(g, "ch1", H5T_STD_I16LE, H5T_NATIVE_SHORT, 2, dims, v);
    attr_str(g, "sample_rate", "250 MHz"); /* on the parent group, with a unit */
    H5Dclose(d);
    H5Gclose(g);
    H5Fclose(f);
    cs_load_options o = h5_opts("/run/ch1");
    cs_loaded l;
    cs_error e;
    ck_assert_int_eq(load(p, &o, &l, &e), CS_OK);
    ck_assert_uint_eq(l.nrecords, 3);
    for (size_t s = 0; s < 3; s++) {
        ck_assert_uint_eq(l.records[s]->shot, s);
        ck_assert_uint_eq(l.records[s]->n, 50);
        ck_assert(tu_close(l.records[s]->dt_s, 4e-9, 1e-15));
        for (int i = 0; i < 50; i++)
            ck_assert(l.records[s]->data[i] == (double)((int)s * 1000 - i));
    }
    ck_assert_ptr_nonnull(strstr(l.notes, "3 shots of 50 real samples"));
    cs_loaded_release(&l);
}
END_TEST

/* Compound complex: member names r/i, re/im, real/imag (any case), float32 or float64 members,
 * and members stored in the other order (matched by name, not position). */
typedef struct cx_case {
    const char *re, *im;
    int f32, swapped;
} cx_case;

static const cx_case cx_cases[] = {
    {"r", "i", 0, 0},      {"re", "im", 1, 0},  {"real", "imag", 0, 0},
    {"R", "I", 1, 0},      {"r", "i", 0, 1},    {"Real", "Imag", 1, 1},
};

START_TEST(compound_complex)
{
    const cx_case *c = &cx_cases[_i];
    size_t sz = c->f32 ? 4 : 8;
    hid_t ft = H5Tcreate(H5T_COMPOUND, 2 * sz);
    hid_t mem = c->f32 ? H5T_IEEE_F32LE : H5T_IEEE_F64LE;
    /* file layout: swapped puts the imaginary member first */
    H5Tinsert(ft, c->swapped ? c->im : c->re, 0, mem);
    H5Tinsert(ft, c->swapped ? c->re : c->im, sz, mem);
    hid_t mt = H5Tcreate(H5T_COMPOUND, 2 * sizeof(double));
    H5Tinsert(mt, c->re, 0, H5T_NATIVE_DOUBLE);
    H5Tinsert(mt, c->im, sizeof(double), H5T_NATIVE_DOUBLE);
    double v[2 * 20];
    for (int i = 0; i < 20; i++) {
        v[2 * i] = 0.5 * i - 3;
        v[2 * i + 1] = -0.25 * i + 1;
    }
    const char *p;
    hid_t f = h5_new("cx.h5", &p);
    hsize_t n = 20;
    hid_t d = h5_put(f, "iq", ft, mt, 1, &n, v);
    attr_double(d, "dt", 2e-8);
    H5Dclose(d);
    H5Tclose(ft);
    H5Tclose(mt);
    H5Fclose(f);
    cs_load_options o = h5_opts(NULL);
    cs_loaded l;
    cs_error e;
    ck_assert_msg(load(p, &o, &l, &e) == CS_OK, "%s/%s: %s", c->re, c->im, e.msg);
    const cs_record *r = l.records[0];
    ck_assert_int_eq(r->is_complex, 1);
    ck_assert_uint_eq(r->n, 20);
    for (int i = 0; i < 40; i++)
        ck_assert(r->data[i] == v[i]); /* multiples of 1/4: exact in float32 too */
    ck_assert(tu_close(r->dt_s, 2e-8, 1e-15));
    cs_loaded_release(&l);
}
END_TEST

START_TEST(compound_other_names_refused)
{
    hid_t ft = H5Tcreate(H5T_COMPOUND, 16);
    H5Tinsert(ft, "x", 0, H5T_NATIVE_DOUBLE);
    H5Tinsert(ft, "y", 8, H5T_NATIVE_DOUBLE);
    const char *p;
    hid_t f = h5_new("cxbad.h5", &p);
    hsize_t n = 4;
    double v[8] = {0};
    H5Dclose(h5_put(f, "xy", ft, ft, 1, &n, v));
    H5Tclose(ft);
    H5Fclose(f);
    cs_load_options o = h5_opts(NULL);
    o.sample_rate_hz = 1;
    cs_error e;
    ck_assert_int_eq(load_fail(p, &o, &e), CS_EFORMAT);
    ck_assert_ptr_nonnull(strstr(e.msg, "r/i"));
}
END_TEST

/* iq = 1 on a real dataset with last dimension 2: (N, 2) -> one complex record; (S, N, 2) -> S. */
START_TEST(iq_attribute)
{
    double v[2 * 3 * 4];
    for (int i = 0; i < 24; i++)
        v[i] = i;
    const char *p;
    hid_t f = h5_new("iqattr.h5", &p);
    hsize_t d2[2] = {12, 2}, d3[3] = {2, 6, 2}, d2b[2] = {12, 2};
    hid_t a = h5_put(f, "a", H5T_IEEE_F64LE, H5T_NATIVE_DOUBLE, 2, d2, v);
    attr_int(a, "iq", 1);
    hid_t b = h5_put(f, "b", H5T_IEEE_F64LE, H5T_NATIVE_DOUBLE, 3, d3, v);
    attr_bool(b, "iq", 1);
    hid_t c = h5_put(f, "c", H5T_IEEE_F64LE, H5T_NATIVE_DOUBLE, 2, d2b, v); /* no iq */
    attr_double(f, "sample_rate", 10.0);
    H5Dclose(a);
    H5Dclose(b);
    H5Dclose(c);
    H5Fclose(f);
    cs_loaded l;
    cs_error e;
    cs_load_options o = h5_opts("/a");
    ck_assert_int_eq(load(p, &o, &l, &e), CS_OK);
    ck_assert_uint_eq(l.nrecords, 1);
    ck_assert_int_eq(l.records[0]->is_complex, 1);
    ck_assert_uint_eq(l.records[0]->n, 12);
    for (int i = 0; i < 24; i++)
        ck_assert(l.records[0]->data[i] == v[i]);
    ck_assert_ptr_null(cs_meta_find(&l.records[0]->meta, "iq"));
    cs_loaded_release(&l);
    o = h5_opts("/b");
    ck_assert_int_eq(load(p, &o, &l, &e), CS_OK);
    ck_assert_uint_eq(l.nrecords, 2);
    for (int s = 0; s < 2; s++) {
        ck_assert_int_eq(l.records[s]->is_complex, 1);
        ck_assert_uint_eq(l.records[s]->n, 6);
        for (int i = 0; i < 12; i++)
            ck_assert(l.records[s]->data[i] == v[12 * s + i]);
    }
    cs_loaded_release(&l);
    /* without iq, (12, 2) is 12 shots of 2 real samples: too short */
    o = h5_opts("/c");
    ck_assert_int_eq(load_fail(p, &o, &e), CS_EDATA);
    o.min_points = 2;
    ck_assert_int_eq(load(p, &o, &l, &e), CS_OK);
    ck_assert_uint_eq(l.nrecords, 12);
    ck_assert_int_eq(l.records[0]->is_complex, 0);
    cs_loaded_release(&l);
}
END_TEST

START_TEST(iq_attribute_wrong_shape)
{
    double v[9] = {0};
    const char *p;
    hid_t f = h5_new("iqbad.h5", &p);
    hsize_t d2[2] = {3, 3};
    hid_t a = h5_put(f, "a", H5T_IEEE_F64LE, H5T_NATIVE_DOUBLE, 2, d2, v);
    attr_int(a, "iq", 1);
    H5Dclose(a);
    H5Fclose(f);
    cs_load_options o = h5_opts(NULL);
    o.sample_rate_hz = 1;
    cs_error e;
    ck_assert_int_eq(load_fail(p, &o, &e), CS_EFORMAT);
    ck_assert_ptr_nonnull(strstr(e.msg, "iq"));
}
END_TEST

START_TEST(chunked_gzip)
{
    const hsize_t n = 100000;
    float *v = malloc(n * sizeof *v);
    for (hsize_t i = 0; i < n; i++)
        v[i] = (float)((int)(i % 2000) - 1000) * 0.5f;
    const char *p;
    hid_t f = h5_new("gz.h5", &p);
    hid_t sp = H5Screate_simple(1, &n, NULL);
    hid_t dcpl = H5Pcreate(H5P_DATASET_CREATE);
    hsize_t chunk = 4096;
    H5Pset_chunk(dcpl, 1, &chunk);
    H5Pset_deflate(dcpl, 6);
    hid_t d = H5Dcreate2(f, "z", H5T_IEEE_F32LE, sp, H5P_DEFAULT, dcpl, H5P_DEFAULT);
    ck_assert_int_ge(H5Dwrite(d, H5T_NATIVE_FLOAT, H5S_ALL, H5S_ALL, H5P_DEFAULT, v), 0);
    attr_fstr(d, "sample_interval", "1 us");
    H5Dclose(d);
    H5Pclose(dcpl);
    H5Sclose(sp);
    H5Fclose(f);
    cs_load_options o = h5_opts(NULL);
    cs_loaded l;
    cs_error e;
    ck_assert_int_eq(load(p, &o, &l, &e), CS_OK);
    for (hsize_t i = 0; i < n; i++)
        if (l.records[0]->data[i] != (double)v[i])
            ck_abort_msg("value %llu", (unsigned long long)i);
    ck_assert(tu_close(l.records[0]->dt_s, 1e-6, 1e-15));
    cs_loaded_release(&l);
    free(v);
}
END_TEST

/* ---------------------------------------------------------------- sample rate and t0 */

typedef struct rate_case {
    const char *where;  /* "dset", "group", "root" */
    const char *name;
    int is_text;
    double num;
    const char *text;
    double option;      /* o->sample_rate_hz */
    int code;
    double want_dt;
} rate_case;

static const rate_case rate_cases[] = {
    {"dset", "sample_rate", 0, 2e6, NULL, 0, CS_OK, 5e-7},
    {"dset", "sample_rate", 1, 0, "50 MHz", 0, CS_OK, 2e-8},
    {"dset", "sample_rate", 1, 0, "2.5e6", 0, CS_OK, 4e-7},
    {"dset", "sample_interval", 0, 2e-9, NULL, 0, CS_OK, 2e-9},
    {"dset", "dt", 1, 0, "20 ns", 0, CS_OK, 2e-8},
    {"dset", "DT", 0, 1e-3, NULL, 0, CS_OK, 1e-3},
    {"group", "sample_rate", 0, 1e9, NULL, 0, CS_OK, 1e-9},
    {"root", "sample_rate", 1, 0, "1 kHz", 0, CS_OK, 1e-3},
    {NULL, NULL, 0, 0, NULL, 4e6, CS_OK, 2.5e-7},          /* only the option */
    {"dset", "sample_rate", 0, 2e6, NULL, 4e6, CS_OK, 2.5e-7}, /* the option overrides */
    {NULL, NULL, 0, 0, NULL, 0, CS_EINVAL, 0},               /* neither */
    {"dset", "sample_rate", 1, 0, "fast", 0, CS_EDATA, 0},
    {"dset", "sample_rate", 1, 0, "50 us", 0, CS_EUNIT, 0},
    {"dset", "sample_rate", 0, -5, NULL, 0, CS_EDATA, 0},
    {"dset", "dt", 0, 0, NULL, 0, CS_EDATA, 0},
};

START_TEST(sample_rate_sources)
{
    const rate_case *c = &rate_cases[_i];
    const char *p;
    hid_t f = h5_new("rate.h5", &p);
    hid_t g = H5Gcreate2(f, "g", H5P_DEFAULT, H5P_DEFAULT, H5P_DEFAULT);
    double v[4] = {1, 2, 3, 4};
    hsize_t n = 4;
    hid_t d = h5_put(g, "d", H5T_IEEE_F64LE, H5T_NATIVE_DOUBLE, 1, &n, v);
    if (c->where) {
        hid_t obj = strcmp(c->where, "dset") == 0 ? d : strcmp(c->where, "group") == 0 ? g : f;
        if (c->is_text)
            attr_str(obj, c->name, c->text);
        else
            attr_double(obj, c->name, c->num);
    }
    H5Dclose(d);
    H5Gclose(g);
    H5Fclose(f);
    cs_load_options o = h5_opts("/g/d");
    o.sample_rate_hz = c->option;
    cs_loaded l;
    cs_error e;
    int rc = load(p, &o, &l, &e);
    ck_assert_msg(rc == c->code, "case %d: rc %d (%s), want %d", _i, rc, e.msg, c->code);
    if (rc == CS_OK) {
        ck_assert_msg(tu_close(l.records[0]->dt_s, c->want_dt, 1e-14), "case %d: dt %g", _i,
                      l.records[0]->dt_s);
        if (c->where && c->option > 0)
            ck_assert_ptr_nonnull(strstr(l.notes, "overrides"));
    } else {
        ck_assert_str_eq(e.file, p);
        if (c->code == CS_EINVAL)
            ck_assert_ptr_nonnull(strstr(e.msg, "--sample-rate"));
    }
    cs_loaded_release(&l);
}
END_TEST

/* The dataset's attribute wins over the root's. */
START_TEST(sample_rate_most_specific_wins)
{
    const char *p;
    hid_t f = h5_new("spec.h5", &p);
    double v[4] = {1, 2, 3, 4};
    hsize_t n = 4;
    hid_t d = h5_put(f, "d", H5T_IEEE_F64LE, H5T_NATIVE_DOUBLE, 1, &n, v);
    attr_double(f, "sample_rate", 1e3);
    attr_double(d, "dt", 1e-6); /* another name, but nearer: wins */
    H5Dclose(d);
    H5Fclose(f);
    cs_load_options o = h5_opts(NULL);
    cs_loaded l;
    cs_error e;
    ck_assert_int_eq(load(p, &o, &l, &e), CS_OK);
    ck_assert(tu_close(l.records[0]->dt_s, 1e-6, 1e-15));
    cs_loaded_release(&l);
    /* the same name on the root, a group and the dataset: the dataset's wins, then the group's */
    f = h5_new("spec2.h5", &p);
    hid_t g = H5Gcreate2(f, "g", H5P_DEFAULT, H5P_DEFAULT, H5P_DEFAULT);
    hid_t a = h5_put(g, "a", H5T_IEEE_F64LE, H5T_NATIVE_DOUBLE, 1, &n, v);
    hid_t b = h5_put(g, "b", H5T_IEEE_F64LE, H5T_NATIVE_DOUBLE, 1, &n, v);
    attr_double(f, "sample_rate", 1e3);
    attr_double(f, "t0", 1.0);
    attr_double(g, "sample_rate", 1e4);
    attr_double(g, "t0", 2.0);
    attr_double(a, "sample_rate", 1e5);
    attr_double(a, "t0", 3.0);
    H5Dclose(a);
    H5Dclose(b);
    H5Gclose(g);
    H5Fclose(f);
    o = h5_opts("/g/a");
    ck_assert_int_eq(load(p, &o, &l, &e), CS_OK);
    ck_assert(tu_close(l.records[0]->dt_s, 1e-5, 1e-15));
    ck_assert(l.records[0]->t0_s == 3.0);
    cs_loaded_release(&l);
    o = h5_opts("/g/b");
    ck_assert_int_eq(load(p, &o, &l, &e), CS_OK);
    ck_assert(tu_close(l.records[0]->dt_s, 1e-4, 1e-15));
    ck_assert(l.records[0]->t0_s == 2.0);
    cs_loaded_release(&l);
}
END_TEST

START_TEST(t0_attribute)
{
    const char *p;
    hid_t f = h5_new("t0.h5", &p);
    double v[4] = {1, 2, 3, 4};
    hsize_t n = 4;
    hid_t a = h5_put(f, "a", H5T_IEEE_F64LE, H5T_NATIVE_DOUBLE, 1, &n, v);
    hid_t b = h5_put(f, "b", H5T_IEEE_F64LE, H5T_NATIVE_DOUBLE, 1, &n, v);
    attr_double(a, "t0", -1.5e-6);
    attr_str(b, "t0", "-5 us");
    attr_double(f, "sample_rate", 1e6);
    H5Dclose(a);
    H5Dclose(b);
    H5Fclose(f);
    cs_loaded l;
    cs_error e;
    cs_load_options o = h5_opts("a");
    o.t0_s = 7.0; /* the file's t0 wins over the default */
    ck_assert_int_eq(load(p, &o, &l, &e), CS_OK);
    ck_assert(l.records[0]->t0_s == -1.5e-6);
    cs_loaded_release(&l);
    o = h5_opts("b");
    ck_assert_int_eq(load(p, &o, &l, &e), CS_OK);
    ck_assert(tu_close(l.records[0]->t0_s, -5e-6, 1e-15));
    cs_loaded_release(&l);
}
END_TEST

/* ---------------------------------------------------------------- metadata */

START_TEST(attributes_become_metadata)
{
    const char *p;
    hid_t f = h5_new("meta.h5", &p);
    hid_t g = H5Gcreate2(f, "shot7", H5P_DEFAULT, H5P_DEFAULT, H5P_DEFAULT);
    double v[4] = {1, 2, 3, 4};
    hsize_t n = 4, three = 3;
    hid_t d = h5_put(g, "ch1", H5T_IEEE_F64LE, H5T_NATIVE_DOUBLE, 1, &n, v);
    attr_str(f, "density", "3.2e13 cm^-3");
    attr_str(f, "operator", "cell B, 2nd fill");
    attr_double(f, "temperature", 400.0);
    attr_double(g, "temperature", 450.5); /* the group's value wins over the root's */
    attr_int(d, "shot_id", 7);
    attr_fstr(d, "pressure", "2 Pa");
    attr_bool(d, "saturated", 0);
    attr_double(d, "sample_rate", 1e6);
    /* a 3-element array attribute is not metadata */
    hid_t sp = H5Screate_simple(1, &three, NULL);
    hid_t arr = H5Acreate2(d, "gains", H5T_IEEE_F64LE, sp, H5P_DEFAULT, H5P_DEFAULT);
    H5Awrite(arr, H5T_NATIVE_DOUBLE, v);
    H5Aclose(arr);
    H5Sclose(sp);
    H5Dclose(d);
    H5Gclose(g);
    H5Fclose(f);
    cs_load_options o = h5_opts("/shot7/ch1");
    cs_loaded l;
    cs_error e;
    ck_assert_int_eq(load(p, &o, &l, &e), CS_OK);
    const cs_meta *m = &l.records[0]->meta;
    double si;
    ck_assert_int_eq(cs_meta_get_si(m, "density", CS_DIM_DENSITY, &si, &e), CS_OK);
    ck_assert(tu_close(si, 3.2e19, 1e-15)); /* 1 cm^-3 = 1e6 m^-3 */
    ck_assert_int_eq(cs_meta_get_si(m, "pressure", CS_DIM_PRESSURE, &si, &e), CS_OK);
    ck_assert(si == 2.0);
    const cs_meta_entry *t = cs_meta_find(m, "temperature");
    ck_assert_ptr_nonnull(t);
    ck_assert(t->has_number && t->value == 450.5);
    const cs_meta_entry *s = cs_meta_find(m, "shot_id");
    ck_assert_ptr_nonnull(s);
    ck_assert_str_eq(s->text, "7");
    ck_assert_str_eq(cs_meta_find(m, "operator")->text, "cell B, 2nd fill");
    ck_assert_str_eq(cs_meta_find(m, "saturated")->text, "FALSE");
    ck_assert_ptr_null(cs_meta_find(m, "gains"));
    ck_assert_ptr_null(cs_meta_find(m, "sample_rate"));
    cs_loaded_release(&l);
}
END_TEST

/* ---------------------------------------------------------------- choosing the dataset */

static const char *two_datasets_file(void)
{
    const char *p;
    hid_t f = h5_new("two.h5", &p);
    double v[4] = {1, 2, 3, 4}, w[4] = {5, 6, 7, 8};
    h5_put1(f, "alpha", v, 4);
    h5_put1(f, "beta", w, 4);
    hid_t g = H5Gcreate2(f, "grp", H5P_DEFAULT, H5P_DEFAULT, H5P_DEFAULT);
    h5_put1(g, "gamma", v, 4);
    H5Gclose(g);
    attr_double(f, "sample_rate", 1.0);
    H5Fclose(f);
    return p;
}

START_TEST(dataset_choice)
{
    const char *p = two_datasets_file();
    cs_loaded l;
    cs_error e;
    cs_load_options o = h5_opts(NULL);
    ck_assert_int_eq(load_fail(p, &o, &e), CS_EINVAL);
    ck_assert_ptr_nonnull(strstr(e.msg, "/alpha"));
    ck_assert_ptr_nonnull(strstr(e.msg, "/beta"));
    ck_assert_ptr_nonnull(strstr(e.msg, "/grp/gamma"));
    o = h5_opts("beta"); /* without the leading '/' */
    ck_assert_int_eq(load(p, &o, &l, &e), CS_OK);
    ck_assert(l.records[0]->data[0] == 5.0);
    cs_loaded_release(&l);
    o = h5_opts("/grp/gamma");
    ck_assert_int_eq(load(p, &o, &l, &e), CS_OK);
    ck_assert(l.records[0]->data[3] == 4.0);
    cs_loaded_release(&l);
}
END_TEST

START_TEST(dataset_missing)
{
    const char *p = two_datasets_file();
    cs_error e;
    static const char *const missing[] = {"/nope", "/grp/nope", "/nope/deeper", "/alpha/x"};
    for (size_t i = 0; i < 4; i++) {
        cs_load_options o = h5_opts(missing[i]);
        ck_assert_int_eq(load_fail(p, &o, &e), CS_EINVAL);
        ck_assert_msg(strstr(e.msg, missing[i]) != NULL, "'%s' not named in '%s'", missing[i],
                      e.msg);
        ck_assert_ptr_nonnull(strstr(e.msg, "/alpha")); /* and what is there */
    }
    cs_load_options o = h5_opts("/grp");
    ck_assert_int_eq(load_fail(p, &o, &e), CS_EINVAL);
    ck_assert_ptr_nonnull(strstr(e.msg, "not a dataset"));
}
END_TEST

START_TEST(only_nested_datasets)
{
    const char *p;
    hid_t f = h5_new("nested.h5", &p);
    hid_t g = H5Gcreate2(f, "a", H5P_DEFAULT, H5P_DEFAULT, H5P_DEFAULT);
    double v[4] = {1, 2, 3, 4};
    h5_put1(g, "b", v, 4);
    H5Gclose(g);
    H5Fclose(f);
    cs_load_options o = h5_opts(NULL);
    cs_error e;
    ck_assert_int_eq(load_fail(p, &o, &e), CS_EINVAL);
    ck_assert_ptr_nonnull(strstr(e.msg, "/a/b"));
    /* an empty file */
    f = h5_new("nothing.h5", &p);
    H5Fclose(f);
    ck_assert_int_eq(load_fail(p, &o, &e), CS_EINVAL);
    ck_assert_ptr_nonnull(strstr(e.msg, "no datasets"));
}
END_TEST

/* ---------------------------------------------------------------- refusals */

START_TEST(not_hdf5_and_missing)
{
    const char *p = tu_write_text("plain.h5", "frequency,y\n1,2\n");
    cs_load_options o = h5_opts(NULL);
    cs_error e;
    ck_assert_int_eq(load_fail(p, &o, &e), CS_EFORMAT);
    ck_assert_ptr_nonnull(strstr(e.msg, "not an HDF5 file"));
    p = tu_tmp_path("absent.h5");
    ck_assert_int_eq(load_fail(p, &o, &e), CS_EIO);
}
END_TEST

START_TEST(nan_in_data)
{
    double v[6] = {1, 2, 3, NAN, 5, 6};
    const char *p;
    hid_t f = h5_new("nan.h5", &p);
    hsize_t d2[2] = {2, 3};
    H5Dclose(h5_put(f, "x", H5T_IEEE_F64LE, H5T_NATIVE_DOUBLE, 2, d2, v));
    H5Fclose(f);
    cs_load_options o = h5_opts(NULL);
    o.sample_rate_hz = 1;
    cs_error e;
    ck_assert_int_eq(load_fail(p, &o, &e), CS_EDATA);
    ck_assert_ptr_nonnull(strstr(e.msg, "sample 0 of shot 1 is NaN"));
}
END_TEST

START_TEST(unusable_datasets)
{
    const char *p;
    hid_t f = h5_new("unusable.h5", &p);
    double v[8] = {0};
    hsize_t d3[3] = {2, 2, 2}, zero = 0, four = 4;
    H5Dclose(h5_put(f, "cube", H5T_IEEE_F64LE, H5T_NATIVE_DOUBLE, 3, d3, v));
    H5Dclose(h5_put(f, "scalar", H5T_IEEE_F64LE, H5T_NATIVE_DOUBLE, 0, NULL, v));
    H5Dclose(h5_put(f, "empty", H5T_IEEE_F64LE, H5T_NATIVE_DOUBLE, 1, &zero, NULL));
    hid_t st = H5Tcopy(H5T_C_S1);
    H5Tset_size(st, 8);
    H5Dclose(h5_put(f, "text", st, st, 1, &four, "aaaaaaaabbbbbbbbccccccccdddddddd"));
    H5Tclose(st);
    H5Dclose(h5_put(f, "big", H5T_IEEE_F64LE, H5T_NATIVE_DOUBLE, 1, &four, v));
    H5Fclose(f);
    cs_error e;
    cs_load_options o = h5_opts("/cube");
    o.sample_rate_hz = 1;
    ck_assert_int_eq(load_fail(p, &o, &e), CS_EUNSUP);
    o.dataset = "/scalar";
    ck_assert_int_eq(load_fail(p, &o, &e), CS_EDATA);
    o.dataset = "/empty";
    ck_assert_int_eq(load_fail(p, &o, &e), CS_EDATA);
    o.dataset = "/text";
    ck_assert_int_eq(load_fail(p, &o, &e), CS_EFORMAT);
    o.dataset = "/big";
    o.max_samples = 3;
    ck_assert_int_eq(load_fail(p, &o, &e), CS_ERANGE);
    o.max_samples = 4;
    cs_loaded l;
    ck_assert_int_eq(load(p, &o, &l, &e), CS_OK);
    cs_loaded_release(&l);
}
END_TEST

/* A dataset whose declared extent is huge (2^40 elements, chunked, never written: HDF5 stores
 * nothing) must be refused by its shape, before any allocation. */
START_TEST(huge_declared_extent)
{
    const char *p;
    hid_t f = h5_new("hugeext.h5", &p);
    hsize_t n = (hsize_t)1 << 40, chunk = 1024;
    hid_t sp = H5Screate_simple(1, &n, NULL);
    hid_t dcpl = H5Pcreate(H5P_DATASET_CREATE);
    H5Pset_chunk(dcpl, 1, &chunk);
    hid_t d = H5Dcreate2(f, "huge", H5T_IEEE_F64LE, sp, H5P_DEFAULT, dcpl, H5P_DEFAULT);
    ck_assert_int_ge(d, 0);
    attr_double(d, "sample_rate", 1.0);
    H5Dclose(d);
    H5Pclose(dcpl);
    H5Sclose(sp);
    H5Fclose(f);
    cs_load_options o = h5_opts(NULL);
    cs_error e;
    ck_assert_int_eq(load_fail(p, &o, &e), CS_ERANGE);
}
END_TEST

/* HDF5 prints its error stack to stderr unless told not to; the loader must keep quiet. */
START_TEST(hdf5_errors_not_printed)
{
    const char *p = two_datasets_file();
    const char *junk = tu_write_text("junk.h5", "\x89HDF\r\n\x1a\nbut not really");
    const char *cap = tu_tmp_path("stderr.txt");
    fflush(stderr);
    int saved = dup(2);
    int fd = open(cap, O_WRONLY | O_CREAT | O_TRUNC, 0600);
    ck_assert_int_ge(fd, 0);
    dup2(fd, 2);
    close(fd);
    cs_error e;
    cs_load_options o = h5_opts("/nope/deeper");
    int rc1 = load_fail(p, &o, &e);
    o = h5_opts("/grp");
    int rc2 = load_fail(p, &o, &e);
    o = h5_opts(NULL);
    int rc3 = load_fail(junk, &o, &e);
    fflush(stderr);
    dup2(saved, 2);
    close(saved);
    ck_assert_int_eq(rc1, CS_EINVAL);
    ck_assert_int_eq(rc2, CS_EINVAL);
    ck_assert_int_eq(rc3, CS_EFORMAT);
    struct stat st;
    ck_assert_int_eq(stat(cap, &st), 0);
    ck_assert_msg(st.st_size == 0, "%lld bytes printed to stderr", (long long)st.st_size);
    /* and the caller's own HDF5 error reporting is left as it was */
    H5E_auto2_t func = NULL;
    void *data = NULL;
    H5Eget_auto2(H5E_DEFAULT, &func, &data);
    ck_assert_msg(func != NULL, "HDF5's automatic error printing was left switched off");
}
END_TEST

/* ---------------------------------------------------------------- spectra */

START_TEST(spectrum_x_dataset)
{
    const char *p;
    hid_t f = h5_new("spx.h5", &p);
    double x[5] = {40, 30, 20, 10, 0}, y[5] = {1, 2, 3, 4, 5};
    hsize_t n = 5;
    hid_t dx = h5_put(f, "freq", H5T_IEEE_F64LE, H5T_NATIVE_DOUBLE, 1, &n, x);
    attr_str(dx, "units", "MHz");
    hid_t dy = h5_put(f, "power", H5T_IEEE_F32LE, H5T_NATIVE_DOUBLE, 1, &n, y);
    attr_str(dy, "density", "1e13 cm^-3");
    H5Dclose(dx);
    H5Dclose(dy);
    H5Fclose(f);
    cs_load_options o = h5_opts(NULL); /* y: the only other top-level dataset */
    o.x_dataset = "/freq";
    cs_loaded l;
    cs_error e;
    ck_assert_int_eq(load(p, &o, &l, &e), CS_OK);
    ck_assert_int_eq(l.kind, CS_KIND_SPECTRUM);
    const cs_spectrum *s = l.spectrum;
    ck_assert_uint_eq(s->n, 5);
    ck_assert_ptr_null(s->sigma);
    for (int i = 0; i < 5; i++) {
        ck_assert(tu_close(s->freq_hz[i], x[4 - i] * 1e6, 1e-15));
        ck_assert(s->y[i] == y[4 - i]);
    }
    ck_assert_int_eq(s->conv.reversed, 1);
    ck_assert_str_eq(s->x_unit, "MHz");
    ck_assert_int_eq(s->x_unit_assumed, 0);
    ck_assert_str_eq(s->source, p);
    ck_assert_str_eq(s->y_name, "power");
    double si;
    ck_assert_int_eq(cs_meta_get_si(&s->meta, "density", CS_DIM_DENSITY, &si, &e), CS_OK);
    ck_assert(tu_close(si, 1e19, 1e-15));
    cs_loaded_release(&l);
    /* the option overrides the attribute */
    o.x_unit = "kHz";
    ck_assert_int_eq(load(p, &o, &l, &e), CS_OK);
    ck_assert(tu_close(l.spectrum->freq_hz[4], 40e3, 1e-15));
    cs_loaded_release(&l);
}
END_TEST

START_TEST(spectrum_columns)
{
    const char *p;
    hid_t f = h5_new("spcols.h5", &p);
    double v[4][3] = {{1e9, 1, 0.1}, {2e9, 2, 0.2}, {3e9, 4, 0.3}, {4e9, 8, 0.4}};
    hsize_t d2[2] = {4, 3};
    H5Dclose(h5_put(f, "s", H5T_IEEE_F64LE, H5T_NATIVE_DOUBLE, 2, d2, v));
    H5Fclose(f);
    cs_load_options o = h5_opts(NULL);
    o.kind = CS_KIND_SPECTRUM;
    cs_loaded l;
    cs_error e;
    ck_assert_int_eq(load(p, &o, &l, &e), CS_OK);
    const cs_spectrum *s = l.spectrum;
    ck_assert_ptr_nonnull(s->sigma);
    for (int i = 0; i < 4; i++)
        ck_assert(s->freq_hz[i] == v[i][0] && s->y[i] == v[i][1] && s->sigma[i] == v[i][2]);
    ck_assert_int_eq(s->x_unit_assumed, 1);
    cs_loaded_release(&l);
}
END_TEST

START_TEST(spectrum_faults)
{
    const char *p;
    hid_t f = h5_new("spbad.h5", &p);
    double x[4] = {1, 2, 1.5, 3}, y[4] = {1, 2, 3, 4}, x3[3] = {1, 2, 3};
    h5_put1(f, "xbad", x, 4);
    h5_put1(f, "y", y, 4);
    h5_put1(f, "x3", x3, 3);
    H5Fclose(f);
    cs_error e;
    cs_load_options o = h5_opts("/y");
    o.x_dataset = "/xbad";
    ck_assert_int_eq(load_fail(p, &o, &e), CS_EDATA);
    ck_assert_ptr_nonnull(strstr(e.msg, "point 2"));
    o.x_dataset = "/x3";
    ck_assert_int_eq(load_fail(p, &o, &e), CS_EFORMAT); /* lengths differ */
    o.x_dataset = "/nox";
    ck_assert_int_eq(load_fail(p, &o, &e), CS_EINVAL);
    ck_assert_ptr_nonnull(strstr(e.msg, "/nox"));
    o.x_dataset = "/y";
    ck_assert_int_eq(load_fail(p, &o, &e), CS_EINVAL); /* x and y the same */
    o = h5_opts("/y");
    o.kind = CS_KIND_SPECTRUM; /* 1-D without x dataset */
    ck_assert_int_eq(load_fail(p, &o, &e), CS_EFORMAT);
    o = h5_opts("/y");
    o.kind = CS_KIND_RECORD;
    o.x_dataset = "/xbad";
    ck_assert_int_eq(load_fail(p, &o, &e), CS_EINVAL);
}
END_TEST

START_TEST(spectrum_unknown_unit_attribute)
{
    const char *p;
    hid_t f = h5_new("spunit.h5", &p);
    double x[3] = {1, 2, 3}, y[3] = {1, 2, 3};
    hsize_t n = 3;
    hid_t dx = h5_put(f, "x", H5T_IEEE_F64LE, H5T_NATIVE_DOUBLE, 1, &n, x);
    attr_str(dx, "unit", "parsecs");
    H5Dclose(dx);
    h5_put1(f, "y", y, 3);
    H5Fclose(f);
    cs_load_options o = h5_opts("/y");
    o.x_dataset = "/x";
    cs_error e;
    ck_assert_int_eq(load_fail(p, &o, &e), CS_EUNIT);
    ck_assert_ptr_nonnull(strstr(e.msg, "parsecs"));
}
END_TEST

START_TEST(via_dispatcher)
{
    const char *p;
    hid_t f = h5_new("disp.hdf5", &p);
    double v[4] = {1, 2, 3, 4};
    h5_put1(f, "x", v, 4);
    attr_double(f, "sample_rate", 8.0);
    H5Fclose(f);
    cs_load_options o;
    cs_load_options_init(&o);
    cs_loaded l;
    cs_error e;
    ck_assert_int_eq(cs_io_load(p, &o, &l, &e), CS_OK);
    ck_assert_int_eq(l.format, CS_FORMAT_HDF5);
    ck_assert(l.records[0]->dt_s == 0.125);
    cs_loaded_release(&l);
}
END_TEST

/* Sanity check, not a benchmark: a 2^20-sample complex compound dataset (16 MiB as doubles) is read
 * by H5Dread into the destination through HDF5's bounded conversion buffer. */
START_TEST(peak_memory)
{
#if defined(__SANITIZE_ADDRESS__)
    return;
#elif defined(__has_feature)
#if __has_feature(address_sanitizer)
    return;
#endif
#endif
    const hsize_t n = (hsize_t)1 << 20;
    const char *p;
    hid_t f = h5_new("mem.h5", &p);
    hid_t ft = H5Tcreate(H5T_COMPOUND, 16);
    H5Tinsert(ft, "r", 0, H5T_IEEE_F64LE);
    H5Tinsert(ft, "i", 8, H5T_IEEE_F64LE);
    hid_t sp = H5Screate_simple(1, &n, NULL);
    hid_t d = H5Dcreate2(f, "iq", ft, sp, H5P_DEFAULT, H5P_DEFAULT, H5P_DEFAULT);
    double blk[2 * 4096];
    for (hsize_t s = 0; s < n; s += 4096) {
        for (int j = 0; j < 2 * 4096; j++)
            blk[j] = (double)((2 * s + (hsize_t)j) % 977);
        hsize_t cnt = 4096;
        hid_t fs = H5Dget_space(d), ms = H5Screate_simple(1, &cnt, NULL);
        H5Sselect_hyperslab(fs, H5S_SELECT_SET, &s, NULL, &cnt, NULL);
        ck_assert_int_ge(H5Dwrite(d, ft, ms, fs, H5P_DEFAULT, blk), 0);
        H5Sclose(fs);
        H5Sclose(ms);
    }
    attr_double(d, "sample_rate", 1e6);
    H5Dclose(d);
    H5Sclose(sp);
    H5Tclose(ft);
    H5Fclose(f);
    struct rusage before, after;
    getrusage(RUSAGE_SELF, &before);
    cs_load_options o = h5_opts(NULL);
    cs_loaded l;
    cs_error e;
    ck_assert_int_eq(load(p, &o, &l, &e), CS_OK);
    getrusage(RUSAGE_SELF, &after);
    double grown = (double)(after.ru_maxrss - before.ru_maxrss) * 1024.0;
    double data = (double)n * 16.0;
    ck_assert_msg(grown < 1.5 * data, "peak grew by %.1f MiB for %.1f MiB", grown / 1048576.0,
                  data / 1048576.0);
    ck_assert(l.records[0]->data[2 * n - 1] == (double)((2 * n - 1) % 977));
    cs_loaded_release(&l);
}
END_TEST

static Suite *hdf5_suite(void)
{
    Suite *s = suite_create("io_hdf5");
    TCase *tc = tcase_create("records");
    tcase_add_test(tc, one_d_double);
    tcase_add_loop_test(tc, every_numeric_type, 0, (int)(sizeof type_cases / sizeof type_cases[0]));
    tcase_add_test(tc, two_d_shots);
    tcase_add_loop_test(tc, compound_complex, 0, (int)(sizeof cx_cases / sizeof cx_cases[0]));
    tcase_add_test(tc, compound_other_names_refused);
    tcase_add_test(tc, iq_attribute);
    tcase_add_test(tc, iq_attribute_wrong_shape);
    tcase_add_test(tc, chunked_gzip);
    tcase_add_test(tc, via_dispatcher);
    suite_add_tcase(s, tc);

    tc = tcase_create("attributes");
    tcase_add_loop_test(tc, sample_rate_sources, 0,
                        (int)(sizeof rate_cases / sizeof rate_cases[0]));
    tcase_add_test(tc, sample_rate_most_specific_wins);
    tcase_add_test(tc, t0_attribute);
    tcase_add_test(tc, attributes_become_metadata);
    suite_add_tcase(s, tc);

    tc = tcase_create("datasets");
    tcase_add_test(tc, dataset_choice);
    tcase_add_test(tc, dataset_missing);
    tcase_add_test(tc, only_nested_datasets);
    suite_add_tcase(s, tc);

    tc = tcase_create("refusals");
    tcase_add_test(tc, not_hdf5_and_missing);
    tcase_add_test(tc, nan_in_data);
    tcase_add_test(tc, unusable_datasets);
    tcase_add_test(tc, huge_declared_extent);
    tcase_add_test(tc, hdf5_errors_not_printed);
    suite_add_tcase(s, tc);

    tc = tcase_create("spectrum");
    tcase_add_test(tc, spectrum_x_dataset);
    tcase_add_test(tc, spectrum_columns);
    tcase_add_test(tc, spectrum_faults);
    tcase_add_test(tc, spectrum_unknown_unit_attribute);
    suite_add_tcase(s, tc);

    tc = tcase_create("memory");
    tcase_add_test(tc, peak_memory);
    suite_add_tcase(s, tc);
    return s;
}

int main(void)
{
    SRunner *sr = srunner_create(hdf5_suite());
    srunner_run_all(sr, CK_NORMAL);
    int failed = srunner_ntests_failed(sr);
    srunner_free(sr);
    return failed ? EXIT_FAILURE : EXIT_SUCCESS;
}
