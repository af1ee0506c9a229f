/* NumPy .npy files: dtypes, streaming into records or a spectrum (see also io_npy_header.c). */
/*
 * The format (NumPy format specification, numpy.lib.format, NEP 1)
 * -----------------------------------------------------------------
 *   bytes 0-5   magic "\x93NUMPY"
 *   byte  6, 7  format version major, minor: 1.0, 2.0 or 3.0
 *   then        HEADER_LEN: unsigned little-endian, 2 bytes in version 1.0, 4 bytes in 2.0 and 3.0
 *   then        HEADER_LEN bytes of header: a Python literal dictionary with exactly the keys
 *               'descr' (the dtype string, e.g. '<f8'), 'fortran_order' (True/False) and 'shape'
 *               (a tuple of ints: (1024,) or (3, 1024); () for a scalar), padded with spaces and
 *               ended by '\n'. Versions 1.0 and 2.0 encode the header as latin-1, 3.0 as UTF-8.
 *   then        the array data, prod(shape) items of the dtype's size, in C (row-major) order, or
 *               column-major when fortran_order is True.
 * NumPy pads the header so that the data start on a multiple of 64 bytes (ARRAY_ALIGN = 64; before
 * NumPy 1.14 it was 16). Readers must not depend on the padding; our writer follows it.
 *
 * The dtype string is a byte-order character ('<' little, '>' big, '|' not applicable, only for
 * one-byte types), a kind ('i' signed, 'u' unsigned integer, 'f' IEEE float, 'c' complex made of
 * two floats, real part first) and the item size in bytes: '<c16' is two little-endian doubles.
 *
 * What collshift reads: numeric dtypes i1 i2 i4 i8 u1 u2 u4 u8 f4 f8 c8 c16 in either byte order.
 * A 1-D array is one record; a 2-D array (shots, samples) is one record per row. Only complex
 * dtypes give complex records: a real array of shape (N, 2) is N shots of 2 samples, NOT N I/Q
 * pairs, because nothing in the file says that the two columns are I and Q (save a complex array
 * instead: x[:, 0] + 1j * x[:, 1]). With kind = spectrum, a real array (N, 2) or (N, 3) holds
 * rows (x, y[, sigma]). Fortran-ordered 2-D arrays (what np.save writes for np.array([x, y]).T)
 * are read by placing each value where it belongs, without a transposed copy.
 *
 * The header is parsed, not evaluated (io_npy_header.c): a small recursive-descent reader of the
 * Python literal syntax that allows any key order, any whitespace, a trailing comma, single or
 * double quotes and Python 2's "L" suffix on integers, and rejects anything else with the byte
 * offset of the fault.
 * Sizes are checked before anything is allocated: the element count against o->max_samples, with
 * every multiplication guarded against overflow, then the data length against the file size.
 * The data are streamed in chunks of 64 Ki elements (at most 1 MiB) and decoded straight into the
 * destination (io_decode.c, shared with the raw loader), so a file is never held in memory twice.
 */
#include <collshift/io.h>

#include "io_npy_impl.h"

#include <errno.h>
#include <math.h>
#include <stdarg.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <sys/types.h>

_Static_assert(sizeof(float) == 4 && sizeof(double) == 8, "IEEE 754 binary32/binary64 expected");

/* ---------------------------------------------------------------- dtype */

typedef struct npy_dtype {
    char kind;       /* 'i', 'u', 'f', 'c' */
    size_t size;     /* bytes per item (complex: both parts) */
    size_t scalar;   /* bytes per real number */
    int big;         /* big-endian */
    int is_complex;
    io_numtype num;  /* how each real number is decoded (io_decode) */
} npy_dtype;

/* Parse a dtype string; 1 when supported. */
static int dtype_parse(const char *d, npy_dtype *t)
{
    char order = d[0];
    if (order != '<' && order != '>' && order != '|')
        return 0;
    char kind = d[1];
    if (kind != 'i' && kind != 'u' && kind != 'f' && kind != 'c')
        return 0;
    const char *p = d + 2;
    if (*p < '1' || *p > '9')
        return 0;
    size_t size = 0;
    for (; *p >= '0' && *p <= '9'; p++) {
        size = size * 10 + (size_t)(*p - '0');
        if (size > 64)
            return 0;
    }
    if (*p)
        return 0;
    int ok = 0;
    switch (kind) {
    case 'i':
    case 'u': ok = size == 1 || size == 2 || size == 4 || size == 8; break;
    case 'f': ok = size == 4 || size == 8; break;
    case 'c': ok = size == 8 || size == 16; break;
    }
    if (!ok || (order == '|' && size != 1))
        return 0;
    t->kind = kind;
    t->size = size;
    t->is_complex = kind == 'c';
    t->scalar = t->is_complex ? size / 2 : size;
    t->big = order == '>';
    t->num.scalar = t->scalar;
    t->num.kind = kind == 'i' ? IO_NUM_SIGNED : kind == 'u' ? IO_NUM_UNSIGNED : IO_NUM_FLOAT;
    t->num.big = t->big;
    return 1;
}

/* ---------------------------------------------------------------- streaming the data */

/* Where flat element e of the file lands: row and column of the 2-D array (rows x cols). */
static void place(size_t e, size_t rows, size_t cols, int fortran, size_t *row, size_t *col)
{
    if (fortran) {
        *col = e / rows;
        *row = e % rows;
    } else {
        *row = e / cols;
        *col = e % cols;
    }
}

typedef struct npy_stream {
    FILE *f;
    const char *path;
    cs_error *err;
    const npy_dtype *t;
    long long data_off;
    size_t comps;
    int direct;              /* f8/c16 little-endian on a little-endian host: no decoding */
    unsigned char *buf;      /* NPY_CHUNK_ELEMS items */
} npy_stream;

/* Read m elements (starting at flat element e0) and decode into dst (m * comps doubles).
 * On a non-finite value returns CS_EDATA with *bad = the scalar index within this chunk,
 * leaving the message to the caller. */
static int stream_read(npy_stream *s, size_t e0, size_t m, double *dst, size_t *bad)
{
    unsigned char *into = s->direct ? (unsigned char *)dst : s->buf;
    size_t got = fread(into, s->t->size, m, s->f);
    if (got != m)
        return cs_error_set(s->err, CS_EIO, s->path, -1,
                            s->data_off + (long long)((e0 + got) * s->t->size), "read failed: %s",
                            ferror(s->f) ? strerror(errno) : "file shrank while reading");
    size_t nsc = m * s->comps;
    size_t k = s->direct ? io_first_nonfinite(dst, nsc)
                         : io_decode(s->buf, nsc, &s->t->num, 1.0, dst);
    if (k < nsc) {
        *bad = k;
        return CS_EDATA;
    }
    return CS_OK;
}

static long long scalar_offset(const npy_stream *s, size_t e0, size_t bad)
{
    return s->data_off + (long long)(e0 * s->t->size + bad * s->t->scalar);
}

static int bad_value(const npy_stream *s, long long off, double v, const char *where)
{
    return cs_error_set(s->err, CS_EDATA, s->path, -1, off, "%s is %s", where,
                        isnan(v) ? "NaN" : "infinite");
}

/* Records: rows shots of cols samples. */
static int load_records(npy_stream *s, const npy_header *h, size_t rows, size_t cols,
                        const cs_load_options *o, cs_loaded *out)
{
    const size_t comps = s->comps;
    const int scatter = h->fortran && rows > 1 && cols > 1;
    double *scratch = NULL;
    int rc = CS_OK;
    cs_record **recs = calloc(rows, sizeof *recs);
    if (!recs)
        goto nomem;
    if (scatter && !(scratch = malloc(NPY_CHUNK_ELEMS * comps * sizeof *scratch)))
        goto nomem;
    for (size_t r = 0; r < rows; r++) {
        cs_record *rec = cs_record_alloc(cols, s->t->is_complex);
        if (!rec)
            goto nomem;
        recs[r] = rec;
        rec->shot = r;
        rec->t0_s = o->t0_s;
        rec->dt_s = 1.0 / o->sample_rate_hz;
        rec->source = malloc(strlen(s->path) + 1);
        if (!rec->source)
            goto nomem;
        strcpy(rec->source, s->path);
    }
    const size_t total = rows * cols;
    for (size_t e = 0; e < total;) {
        size_t m = total - e < NPY_CHUNK_ELEMS ? total - e : NPY_CHUNK_ELEMS;
        double *dst;
        if (scatter) {
            dst = scratch;
        } else {
            size_t row = e / cols, col = e % cols;
            if (m > cols - col)
                m = cols - col; /* stay within one shot */
            dst = recs[row]->data + col * comps;
        }
        size_t bad = 0;
        rc = stream_read(s, e, m, dst, &bad);
        if (rc == CS_EDATA) {
            size_t row, col;
            place(e + bad / comps, rows, cols, h->fortran, &row, &col);
            char where[96];
            snprintf(where, sizeof where, "sample %zu%s of shot %zu", col,
                     comps == 1 ? "" : bad % 2 ? " (imaginary part)" : " (real part)", row);
            rc = bad_value(s, scalar_offset(s, e, bad), dst[bad], where);
        }
        if (rc != CS_OK)
            goto fail;
        if (scatter)
            for (size_t j = 0; j < m; j++) {
                size_t row, col;
                place(e + j, rows, cols, 1, &row, &col);
                for (size_t c = 0; c < comps; c++)
                    recs[row]->data[col * comps + c] = scratch[j * comps + c];
            }
        e += m;
    }
    free(scratch);
    out->kind = CS_KIND_RECORD;
    out->records = recs;
    out->nrecords = rows;
    return CS_OK;
nomem:
    rc = cs_error_set(s->err, CS_ENOMEM, s->path, -1, -1, "out of memory for %zu x %zu samples",
                      rows, cols);
fail:
    free(scratch);
    io_records_free(recs, rows);
    return rc;
}

/* Spectrum: rows of (x, y[, sigma]). */
static int load_spectrum(npy_stream *s, const npy_header *h, size_t rows, size_t cols,
                         const cs_load_options *o, cs_loaded *out)
{
    const cs_unit *u = NULL;
    int assumed = o->x_unit == NULL || !*o->x_unit;
    u = cs_unit_find(assumed ? "Hz" : o->x_unit);
    if (!u)
        return cs_error_set(s->err, CS_EUNIT, s->path, -1, -1, "unknown axis unit '%s'", o->x_unit);
    cs_spectrum *sp = cs_spectrum_alloc(rows, cols == 3);
    double *scratch = malloc(NPY_CHUNK_ELEMS * sizeof *scratch);
    int rc = CS_OK;
    if (!sp || !scratch) {
        rc = cs_error_set(s->err, CS_ENOMEM, s->path, -1, -1, "out of memory for %zu points", rows);
        goto fail;
    }
    double *colv[3] = {sp->freq_hz, sp->y, sp->sigma};
    static const char *const names[3] = {"x", "y", "sigma"};
    const size_t total = rows * cols;
    for (size_t e = 0; e < total;) {
        size_t m = total - e < NPY_CHUNK_ELEMS ? total - e : NPY_CHUNK_ELEMS;
        size_t bad = 0;
        rc = stream_read(s, e, m, scratch, &bad);
        if (rc == CS_EDATA) {
            size_t row, col;
            place(e + bad, rows, cols, h->fortran, &row, &col);
            char where[64];
            snprintf(where, sizeof where, "%s in row %zu", names[col], row);
            rc = bad_value(s, scalar_offset(s, e, bad), scratch[bad], where);
        }
        if (rc != CS_OK)
            goto fail;
        for (size_t j = 0; j < m; j++) {
            size_t row, col;
            place(e + j, rows, cols, h->fortran, &row, &col);
            colv[col][row] = scratch[j];
        }
        e += m;
    }
    free(scratch);
    scratch = NULL;
    io_spectrum_fault fault = 0;
    size_t i = 0;
    rc = io_spectrum_finish(sp, u, assumed, o, s->path, &fault, &i, s->err);
    if (rc == CS_EDATA && fault) {
        /* byte offset of element (row, col) */
#define ELEM_OFF(row, col)                                                                  \
    (s->data_off + (long long)((h->fortran ? (col) * rows + (row) : (row) * cols + (col)) * \
                               s->t->size))
        if (fault == IO_SPECTRUM_SIGMA)
            rc = cs_error_set(s->err, CS_EDATA, s->path, -1, ELEM_OFF(i, 2),
                              "sigma in row %zu is %g: it must be positive", i, sp->sigma[i]);
        else
            rc = cs_error_set(s->err, CS_EDATA, s->path, -1, ELEM_OFF(i, 0),
                              fault == IO_SPECTRUM_REPEAT
                                  ? "x in row %zu repeats the previous row's value"
                                  : "x is not monotonic: row %zu goes back",
                              i);
#undef ELEM_OFF
    }
    if (rc != CS_OK)
        goto fail;
    sp->source = malloc(strlen(s->path) + 1);
    if (!sp->source) {
        rc = cs_error_set(s->err, CS_ENOMEM, s->path, -1, -1, "out of memory");
        goto fail;
    }
    strcpy(sp->source, s->path);
    out->kind = CS_KIND_SPECTRUM;
    out->spectrum = sp;
    io_spectrum_notes(out, sp, u, assumed, o->air, 1);
    return CS_OK;
fail:
    free(scratch);
    cs_spectrum_free(sp);
    return rc;
}

int cs_io_npy_load(const char *path, const cs_load_options *o, cs_loaded *out, cs_error *err)
{
    cs_load_options defaults;
    if (!o) {
        cs_load_options_init(&defaults);
        o = &defaults;
    }
    if (!path || !out)
        return cs_error_set(err, CS_EINVAL, path, -1, -1, "no file given");
    FILE *f = fopen(path, "rb");
    if (!f)
        return cs_error_set(err, CS_EIO, path, -1, -1, "cannot open: %s", strerror(errno));
    int rc;
    struct stat st;
    if (fstat(fileno(f), &st) != 0 || !S_ISREG(st.st_mode)) {
        rc = cs_error_set(err, CS_EIO, path, -1, -1, "not a regular file");
        goto done;
    }
    const long long fsize = (long long)st.st_size;
    npy_header h;
    memset(&h, 0, sizeof h);
    rc = io_npy_read_header(f, path, fsize, &h, err);
    if (rc != CS_OK)
        goto done;

    npy_dtype t;
    if (!h.descr_is_string) {
        rc = cs_error_set(err, CS_EFORMAT, path, -1, h.descr_off,
                          "structured dtype %s is not supported: save a plain numeric array",
                          h.descr);
        goto done;
    }
    if (!dtype_parse(h.descr, &t)) {
        rc = cs_error_set(err, CS_EFORMAT, path, -1, h.descr_off,
                          "unsupported dtype '%s': expected i1 i2 i4 i8 u1 u2 u4 u8 f4 f8 c8 c16 "
                          "with byte order '<' or '>' ('|' for one-byte types)", h.descr);
        goto done;
    }
    char shp[96];
    io_npy_shape_text(&h, shp, sizeof shp);
    if (h.ndim == 0) {
        rc = cs_error_set(err, CS_EDATA, path, -1, h.shape_off,
                          "the array is a single value (shape ()), not a record");
        goto done;
    }
    if (h.ndim > 2) {
        rc = cs_error_set(err, CS_EUNSUP, path, -1, h.shape_off,
                          "%zu-D array %s: only 1-D (one record) or 2-D (shots x samples) arrays "
                          "are read", h.ndim, shp);
        goto done;
    }
    /* sizes, before allocating */
    const size_t max_samples = o->max_samples ? o->max_samples : (size_t)1 << 31;
    uint64_t rows = h.ndim == 1 ? 1 : h.shape[0], cols = h.shape[h.ndim - 1];
    if ((rows && cols > UINT64_MAX / rows) || rows * cols > (uint64_t)max_samples ||
        rows * cols > SIZE_MAX / (2 * sizeof(double))) {
        rc = cs_error_set(err, CS_ERANGE, path, -1, h.shape_off,
                          "shape %s declares more than the limit of %zu samples", shp, max_samples);
        goto done;
    }
    const size_t total = (size_t)(rows * cols);
    const unsigned long long need = (unsigned long long)total * t.size;
    const unsigned long long found =
        fsize > h.data_off ? (unsigned long long)(fsize - h.data_off) : 0;
    if (found < need) {
        rc = cs_error_set(err, CS_EFORMAT, path, -1, h.data_off + (long long)found,
                          "truncated: expected %llu bytes of data, found %llu (shape %s of '%s')",
                          need, found, shp, h.descr);
        goto done;
    }
    if (total == 0) {
        rc = cs_error_set(err, CS_EDATA, path, -1, h.data_off, "empty array: shape %s", shp);
        goto done;
    }
    if (fseeko(f, (off_t)h.data_off, SEEK_SET) != 0) {
        rc = cs_error_set(err, CS_EIO, path, -1, h.data_off, "cannot seek: %s", strerror(errno));
        goto done;
    }
    npy_stream s = {f, path, err, &t, h.data_off, t.is_complex ? 2 : 1,
                    t.kind != 'i' && t.kind != 'u' && t.scalar == 8 && !t.big &&
                        io_host_is_little_endian(),
                    NULL};
    if (!s.direct && !(s.buf = malloc(NPY_CHUNK_ELEMS * t.size))) {
        rc = cs_error_set(err, CS_ENOMEM, path, -1, -1, "out of memory");
        goto done;
    }
    const size_t min_points = o->min_points ? o->min_points : 1;
    if (o->kind == CS_KIND_SPECTRUM) {
        if (t.is_complex || h.ndim != 2 || (cols != 2 && cols != 3)) {
            rc = cs_error_set(err, CS_EFORMAT, path, -1, h.shape_off,
                              "a spectrum needs a real 2-D array of shape (N, 2) or (N, 3) holding "
                              "x, y[, sigma]; this one is %s of '%s'", shp, h.descr);
        } else if (rows < min_points || rows < 2) {
            rc = cs_error_set(err, CS_EDATA, path, -1, h.shape_off,
                              "%llu points, fewer than the %zu needed", (unsigned long long)rows,
                              min_points < 2 ? 2 : min_points);
        } else {
            rc = load_spectrum(&s, &h, (size_t)rows, (size_t)cols, o, out);
        }
    } else if (!(o->sample_rate_hz > 0.0) || !isfinite(o->sample_rate_hz)) {
        rc = cs_error_set(err, CS_EINVAL, path, -1, -1,
                          "a .npy file does not store the sample rate: give --sample-rate");
    } else if (cols < min_points) {
        rc = cs_error_set(err, CS_EDATA, path, -1, h.shape_off,
                          "shape %s gives %llu samples per shot, fewer than the %zu needed%s", shp,
                          (unsigned long long)cols, min_points,
                          cols == 2 && !t.is_complex
                              ? " (two real columns are not read as I/Q: save a complex array)"
                              : "");
    } else {
        rc = load_records(&s, &h, (size_t)rows, (size_t)cols, o, out);
    }
    free(s.buf);
    if (rc != CS_OK)
        goto done;

    cs_loaded_note(out, "npy v%d.%d '%s' shape %s%s", h.major, h.minor, h.descr, shp,
                   h.fortran && rows > 1 && cols > 1 ? " in Fortran order" : "");
    if (out->kind == CS_KIND_RECORD) {
        char rate[64];
        cs_quantity_format(o->sample_rate_hz, CS_DIM_FREQUENCY, 6, rate, sizeof rate);
        cs_loaded_note(out, "%zu shot%s of %zu %s samples at %s", (size_t)rows,
                       rows == 1 ? "" : "s", (size_t)cols, t.is_complex ? "complex" : "real", rate);
    }
    if (found > need)
        cs_loaded_note(out, "%llu bytes after the array ignored", found - need);
done:
    fclose(f);
    return rc;
}
