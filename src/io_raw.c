/* Raw digitizer binary: headerless fixed-size samples, streamed in one pass into records. */
/*
 * The format
 * ----------
 * A raw digitizer file has no header that describes it: the user says what it holds.
 *   - An optional preamble of o->offset_bytes bytes (a vendor header we do not parse) is skipped.
 *   - Then come samples back to back, all of one type: i8, i16, i32 (two's complement integers),
 *     f32, f64 (IEEE 754 binary32 / binary64), or the complex forms ci8 ... cf64, where each
 *     sample is an in-phase value immediately followed by its quadrature value (interleaved I/Q,
 *     the layout of C99 `float complex` / `double complex` arrays and of most SDR and digitizer
 *     streams).
 *   - Every multi-byte value is little-endian unless o->big_endian is set. Byte order is decoded
 *     explicitly from the bytes (io_decode.c, shared with the .npy loader), so the result does not
 *     depend on the host's byte order.
 *   - With o->records = N > 1 the data are N shots of equal length, one after the other.
 *   - The file carries no time axis: the user gives the sample rate (required) and t0.
 *
 * Since nothing in the file can be cross-checked, the size is: the data after the offset must be
 * a whole number of samples (a trailing partial sample means the type or the offset is wrong, and
 * the error names the byte where the partial sample starts), and must split evenly into N shots.
 *
 * Memory: records of 2^24 complex samples (256 MiB as doubles) are common, so the destination is
 * allocated once and the file is read in chunks of about 1 MiB that are decoded straight into it;
 * the file is never held in memory twice. For f64/cf64 little-endian files on a little-endian host
 * the bytes already are doubles and are read directly into the destination. Every value is checked
 * for NaN/Inf as it is decoded, and a bad one is reported with its byte offset in the file.
 */
#include <collshift/io.h>

#include "io_internal.h"

#include <errno.h>
#include <math.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <sys/types.h>

_Static_assert(sizeof(float) == 4 && sizeof(double) == 8, "IEEE 754 binary32/binary64 expected");

/* Bytes read per chunk (rounded down to whole samples). */
#define RAW_CHUNK_BYTES ((size_t)1 << 20)

typedef struct raw_layout {
    size_t scalar;   /* bytes of one I or Q value (or of one real value) */
    int is_float;    /* IEEE float rather than two's complement integer */
    int is_complex;  /* interleaved I/Q */
} raw_layout;

static int raw_layout_of(cs_raw_type t, raw_layout *L)
{
    switch (t) {
    case CS_RAW_I8: *L = (raw_layout){1, 0, 0}; return 1;
    case CS_RAW_I16: *L = (raw_layout){2, 0, 0}; return 1;
    case CS_RAW_I32: *L = (raw_layout){4, 0, 0}; return 1;
    case CS_RAW_F32: *L = (raw_layout){4, 1, 0}; return 1;
    case CS_RAW_F64: *L = (raw_layout){8, 1, 0}; return 1;
    case CS_RAW_CI8: *L = (raw_layout){1, 0, 1}; return 1;
    case CS_RAW_CI16: *L = (raw_layout){2, 0, 1}; return 1;
    case CS_RAW_CI32: *L = (raw_layout){4, 0, 1}; return 1;
    case CS_RAW_CF32: *L = (raw_layout){4, 1, 1}; return 1;
    case CS_RAW_CF64: *L = (raw_layout){8, 1, 1}; return 1;
    default: return 0;
    }
}

/* In place: dst already holds doubles read straight from the file; scale and check them. */
static size_t raw_scale_inplace(double *dst, size_t n, double scale)
{
    for (size_t i = 0; i < n; i++) {
        double v = dst[i] * scale;
        dst[i] = v;
        if (!isfinite(v))
            return i;
    }
    return n;
}

/* ---------------------------------------------------------------- the loader */

static int options_check(const char *path, const cs_load_options *o, cs_error *err)
{
    raw_layout L;
    if (!raw_layout_of(o->raw_type, &L))
        return cs_error_set(err, CS_EINVAL, path, -1, -1,
                            "raw binary needs a sample type (--raw i8, i16, i32, f32, f64, ci8, "
                            "ci16, ci32, cf32 or cf64)");
    if (!(o->sample_rate_hz > 0.0) || !isfinite(o->sample_rate_hz))
        return cs_error_set(err, CS_EINVAL, path, -1, -1,
                            "raw binary needs --sample-rate (a positive frequency such as 50MHz)");
    if (!isfinite(o->scale) || o->scale == 0.0)
        return cs_error_set(err, CS_EINVAL, path, -1, -1,
                            "--scale must be a finite non-zero number, got %g", o->scale);
    if (o->offset_bytes < 0)
        return cs_error_set(err, CS_EINVAL, path, -1, -1,
                            "--offset-bytes must not be negative, got %lld", o->offset_bytes);
    if (!isfinite(o->t0_s))
        return cs_error_set(err, CS_EINVAL, path, -1, -1, "start time t0 must be finite");
    if (o->kind == CS_KIND_SPECTRUM)
        return cs_error_set(err, CS_EINVAL, path, -1, -1,
                            "a raw binary file holds time records, not a spectrum");
    return CS_OK;
}

/* Report a non-finite decoded value. */
static int bad_value(const char *path, long long off, double v, size_t shot, size_t sample,
                     int comp, int is_complex, double scale, cs_error *err)
{
    const char *what = isnan(v) ? "NaN" : "infinite";
    const char *part = !is_complex ? "" : comp ? " (Q)" : " (I)";
    if (scale != 1.0)
        return cs_error_set(err, CS_EDATA, path, -1, off,
                            "sample %zu%s of shot %zu is %s after scaling by %g", sample, part,
                            shot, what, scale);
    return cs_error_set(err, CS_EDATA, path, -1, off, "sample %zu%s of shot %zu is %s", sample,
                        part, shot, what);
}

int cs_io_raw_load(const char *path, const cs_load_options *o, cs_loaded *out, cs_error *err)
{
    cs_load_options defaults;
    if (!o) {
        cs_load_options_init(&defaults);
        o = &defaults;
    }
    if (!path || !out)
        return cs_error_set(err, CS_EINVAL, path, -1, -1, "no file given");
    int rc = options_check(path, o, err);
    if (rc != CS_OK)
        return rc;
    raw_layout L;
    raw_layout_of(o->raw_type, &L);
    const size_t comps = L.is_complex ? 2 : 1;
    const size_t ss = L.scalar * comps; /* bytes per sample */
    const int big = o->big_endian != 0;
    const io_numtype num = {L.scalar, L.is_float ? IO_NUM_FLOAT : IO_NUM_SIGNED, big};
    const size_t max_samples = o->max_samples ? o->max_samples : (size_t)1 << 31;
    const size_t nshots = o->records ? o->records : 1;

    FILE *f = fopen(path, "rb");
    if (!f)
        return cs_error_set(err, CS_EIO, path, -1, -1, "cannot open: %s", strerror(errno));
    struct stat st;
    if (fstat(fileno(f), &st) != 0) {
        rc = cs_error_set(err, CS_EIO, path, -1, -1, "cannot stat: %s", strerror(errno));
        fclose(f);
        return rc;
    }
    if (!S_ISREG(st.st_mode)) {
        fclose(f);
        return cs_error_set(err, CS_EINVAL, path, -1, -1,
                            "not a regular file: raw binary needs a file of known size");
    }
    const long long fsize = (long long)st.st_size;
    const long long off0 = o->offset_bytes;
    if (off0 > fsize) {
        fclose(f);
        return cs_error_set(err, CS_EFORMAT, path, -1, off0,
                            "offset of %lld bytes is beyond the end of the file (%lld bytes)",
                            off0, fsize);
    }
    const unsigned long long data_bytes = (unsigned long long)(fsize - off0);
    if (data_bytes == 0) {
        fclose(f);
        return cs_error_set(err, CS_EDATA, path, -1, off0, "no data after the offset of %lld bytes",
                            off0);
    }
    const unsigned long long whole = data_bytes / ss;
    if (data_bytes % ss != 0) {
        fclose(f);
        return cs_error_set(err, CS_EFORMAT, path, -1, off0 + (long long)(whole * ss),
                            "trailing partial sample: %llu bytes after %llu whole %s samples "
                            "(%zu bytes each); check --raw and --offset-bytes",
                            data_bytes % ss, whole, cs_raw_type_name(o->raw_type), ss);
    }
    /* Size limits before any allocation. */
    if (whole > (unsigned long long)max_samples || whole > SIZE_MAX / (comps * sizeof(double))) {
        fclose(f);
        return cs_error_set(err, CS_ERANGE, path, -1, off0,
                            "the file holds %llu samples, more than the limit of %zu", whole,
                            max_samples);
    }
    const size_t total = (size_t)whole;
    if (total % nshots != 0) {
        fclose(f);
        return cs_error_set(err, CS_EFORMAT, path, -1, off0,
                            "%zu samples do not split evenly into %zu shots", total, nshots);
    }
    const size_t per = total / nshots;
    const size_t min_points = o->min_points;
    if (per < min_points || per == 0) {
        fclose(f);
        return cs_error_set(err, CS_EDATA, path, -1, off0,
                            "%zu samples per shot, fewer than the %zu needed", per,
                            min_points ? min_points : 1);
    }
    if (off0 > 0 && fseeko(f, (off_t)off0, SEEK_SET) != 0) {
        rc = cs_error_set(err, CS_EIO, path, -1, off0, "cannot seek: %s", strerror(errno));
        fclose(f);
        return rc;
    }

    const int direct = L.is_float && L.scalar == 8 && !big && io_host_is_little_endian();
    unsigned char *buf = NULL;
    cs_record **recs = calloc(nshots, sizeof *recs);
    if (!recs)
        goto nomem;
    if (!direct && !(buf = malloc(RAW_CHUNK_BYTES)))
        goto nomem;
    const size_t chunk_samples = RAW_CHUNK_BYTES / ss;

    for (size_t s = 0; s < nshots; s++) {
        cs_record *r = cs_record_alloc(per, L.is_complex);
        if (!r)
            goto nomem;
        recs[s] = r;
        r->shot = s;
        r->t0_s = o->t0_s;
        r->dt_s = 1.0 / o->sample_rate_hz;
        r->source = malloc(strlen(path) + 1);
        if (!r->source)
            goto nomem;
        strcpy(r->source, path);
        for (size_t k = 0; k < per; k += chunk_samples) {
            size_t m = per - k < chunk_samples ? per - k : chunk_samples; /* samples this chunk */
            size_t nsc = m * comps;
            double *dst = r->data + k * comps;
            unsigned char *into = direct ? (unsigned char *)dst : buf;
            size_t got = fread(into, ss, m, f);
            long long at = off0 + (long long)((s * per + k) * ss);
            if (got != m) {
                rc = cs_error_set(err, CS_EIO, path, -1, at + (long long)(got * ss),
                                  "read failed: %s", ferror(f) ? strerror(errno)
                                                               : "file shrank while reading");
                goto fail;
            }
            size_t bad = direct ? raw_scale_inplace(dst, nsc, o->scale)
                                : io_decode(buf, nsc, &num, o->scale, dst);
            if (bad < nsc) {
                rc = bad_value(path, at + (long long)(bad * L.scalar), dst[bad], s,
                               k + bad / comps, (int)(bad % comps), L.is_complex, o->scale, err);
                goto fail;
            }
        }
    }
    free(buf);
    fclose(f);
    out->kind = CS_KIND_RECORD;
    out->records = recs;
    out->nrecords = nshots;
    {
        char rate[64];
        cs_quantity_format(o->sample_rate_hz, CS_DIM_FREQUENCY, 6, rate, sizeof rate);
        cs_loaded_note(out, "raw %s %s-endian: %zu shot%s of %zu %s samples at %s",
                       cs_raw_type_name(o->raw_type), big ? "big" : "little", nshots,
                       nshots == 1 ? "" : "s", per, L.is_complex ? "complex" : "real", rate);
    }
    if (off0 > 0)
        cs_loaded_note(out, "skipped %lld header bytes", off0);
    if (o->scale != 1.0)
        cs_loaded_note(out, "samples multiplied by %g", o->scale);
    return CS_OK;

nomem:
    rc = cs_error_set(err, CS_ENOMEM, path, -1, -1, "out of memory for %zu samples", total);
fail:
    free(buf);
    io_records_free(recs, nshots);
    fclose(f);
    return rc;
}
