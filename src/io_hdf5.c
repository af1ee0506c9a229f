/* HDF5 files: a dataset read into records or a spectrum (io_hdf5_tree.c: choice, attributes). */
/*
 * How lab HDF5 files are read
 * ---------------------------
 * An HDF5 file is a tree of groups holding datasets (typed n-dimensional arrays); any object can
 * carry attributes (small named values). Nothing in HDF5 says which dataset is "the record" or
 * what its sample rate is, so collshift follows the conventions digitizer scripts (h5py and the
 * C API alike) actually use:
 *   - The dataset is named by o->dataset ("/shot0/ch1"). Without one, a file whose top level holds
 *     exactly one dataset uses it; otherwise the error lists the datasets found.
 *   - A 1-D integer or float dataset is one real record; a 2-D one (shots x samples) is one record
 *     per row. A compound of two numeric members named r/i, re/im or real/imag (h5py's layout of
 *     numpy complex numbers, case-insensitive) is complex. A real dataset whose last dimension is 2
 *     and that carries the attribute iq = 1 (or true) holds interleaved I/Q: (N, 2) is one complex
 *     record, (shots, N, 2) several. Without that attribute the last dimension is never taken as
 *     I/Q: only the file can say that two columns are I and Q.
 *   - Attributes are looked up from the dataset outwards through its parent groups to the root:
 *     the sample rate from `sample_rate` (a number in Hz, or a string with a unit, "50 MHz") or
 *     from `sample_interval` / `dt` (seconds, or a string with a unit); the start time from `t0`.
 *     An explicit o->sample_rate_hz wins over the file (with a note when they differ), so a wrong
 *     attribute can be overridden; with neither, loading fails with CS_EINVAL. Every other scalar
 *     numeric, string or boolean (enum) attribute goes into the record's metadata, the root's
 *     first so that a group's or the dataset's value of the same name wins; strings such as
 *     "3.2e13 cm^-3" are parsed as quantities.
 *   - A spectrum: o->x_dataset names the frequency axis and o->dataset the values (both 1-D, same
 *     length), the axis unit being o->x_unit, else the x dataset's `unit`/`units` attribute, else
 *     Hz; or, with kind = spectrum, a real 2-D dataset (N, 2) or (N, 3) of rows x, y[, sigma].
 *
 * HDF5 converts every numeric type (any size, byte order, integer or float) to native doubles in
 * H5Dread, through its own bounded conversion buffer, so data go straight into the destination.
 * Library code never prints: HDF5's automatic error-stack printing is switched off for the duration
 * of a load and restored afterwards. Debian's serial HDF5 is not thread-safe, so loads are
 * serialised with a mutex (collshift may load files from several threads).
 */
#include <collshift/io.h>

#include "io_hdf5_impl.h"

#include <hdf5.h>

#include <ctype.h>
#include <errno.h>
#include <math.h>
#include <pthread.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <strings.h>

static pthread_mutex_t h5_lock = PTHREAD_MUTEX_INITIALIZER;

/* ---------------------------------------------------------------- dataset types */

typedef struct h5shape {
    int ndims;
    hsize_t dims[H5S_MAX_RANK];
    int cplx;        /* compound complex */
    hid_t memtype;   /* what H5Dread converts to: native double or a {double, double} compound */
} h5shape;

/* re, im are the names of a complex pair: r/i, re/im or real/imag, in any case */
static int is_complex_pair(const char *re, const char *im)
{
    static const char *const pairs[3][2] = {{"r", "i"}, {"re", "im"}, {"real", "imag"}};
    for (int k = 0; k < 3; k++)
        if (strcasecmp(re, pairs[k][0]) == 0 && strcasecmp(im, pairs[k][1]) == 0)
            return 1;
    return 0;
}

/* Inspect a dataset's type and shape; builds the memory type. */
static int inspect(hid_t dset, const char *path, const char *dname, h5shape *sh, cs_error *err)
{
    memset(sh, 0, sizeof *sh);
    sh->memtype = -1;
    hid_t space = H5Dget_space(dset), ftype = H5Dget_type(dset);
    int rc = CS_OK;
    if (space < 0 || ftype < 0) {
        rc = cs_error_set(err, CS_EFORMAT, path, -1, -1, "cannot read the type of dataset '%s'",
                          dname);
        goto done;
    }
    sh->ndims = H5Sget_simple_extent_ndims(space);
    if (sh->ndims < 0 || H5Sget_simple_extent_dims(space, sh->dims, NULL) < 0) {
        rc = cs_error_set(err, CS_EFORMAT, path, -1, -1, "cannot read the shape of dataset '%s'",
                          dname);
        goto done;
    }
    H5T_class_t cls = H5Tget_class(ftype);
    if (cls == H5T_INTEGER || cls == H5T_FLOAT) {
        sh->memtype = H5Tcopy(H5T_NATIVE_DOUBLE);
    } else if (cls == H5T_COMPOUND && H5Tget_nmembers(ftype) == 2) {
        char *m0 = H5Tget_member_name(ftype, 0), *m1 = H5Tget_member_name(ftype, 1);
        H5T_class_t c0 = H5Tget_member_class(ftype, 0), c1 = H5Tget_member_class(ftype, 1);
        int numeric = (c0 == H5T_FLOAT || c0 == H5T_INTEGER) &&
                      (c1 == H5T_FLOAT || c1 == H5T_INTEGER);
        int fwd = m0 && m1 && is_complex_pair(m0, m1), rev = m0 && m1 && is_complex_pair(m1, m0);
        if (numeric && (fwd || rev)) {
            /* HDF5 converts compound members by name, so this gives {double re; double im} in
             * memory whichever order the file stores them in */
            const char *re = fwd ? m0 : m1, *im = fwd ? m1 : m0;
            hid_t mt = H5Tcreate(H5T_COMPOUND, 2 * sizeof(double));
            if (mt >= 0 && H5Tinsert(mt, re, 0, H5T_NATIVE_DOUBLE) >= 0 &&
                H5Tinsert(mt, im, sizeof(double), H5T_NATIVE_DOUBLE) >= 0) {
                sh->memtype = mt;
                sh->cplx = 1;
            } else if (mt >= 0) {
                H5Tclose(mt);
            }
        }
        if (m0)
            H5free_memory(m0);
        if (m1)
            H5free_memory(m1);
    }
    if (sh->memtype < 0)
        rc = cs_error_set(err, CS_EFORMAT, path, -1, -1,
                          "dataset '%s' is neither numeric nor complex (a compound of two numbers "
                          "named r/i, re/im or real/imag)", dname);
done:
    if (space >= 0)
        H5Sclose(space);
    if (ftype >= 0)
        H5Tclose(ftype);
    return rc;
}

/* Read `count` elements starting at `start` (a hyperslab; NULL = everything) into dst. */
static int read_slab(hid_t dset, hid_t memtype, const hsize_t *start, const hsize_t *count,
                     size_t nmem, double *dst)
{
    hid_t fspace = H5S_ALL, mspace = H5S_ALL;
    int ok = 1;
    if (start) {
        hsize_t m = nmem;
        fspace = H5Dget_space(dset);
        mspace = H5Screate_simple(1, &m, NULL);
        ok = fspace >= 0 && mspace >= 0 &&
             H5Sselect_hyperslab(fspace, H5S_SELECT_SET, start, NULL, count, NULL) >= 0;
    }
    if (ok)
        ok = H5Dread(dset, memtype, mspace, fspace, H5P_DEFAULT, dst) >= 0;
    if (start) {
        if (fspace >= 0)
            H5Sclose(fspace);
        if (mspace >= 0)
            H5Sclose(mspace);
    }
    return ok;
}

/* ---------------------------------------------------------------- records */

typedef struct h5ctx {
    const char *path;
    const cs_load_options *o;
    cs_error *err;
    hid_t file;
    cs_loaded *out;
} h5ctx;

/* The error of io_hdf5_gather_attrs for dataset dname: too many attributes, or memory. */
static int attrs_failed(int rc, const char *path, const char *dname, cs_error *err)
{
    if (rc == CS_ERANGE)
        return cs_error_set(err, CS_ERANGE, path, -1, -1,
                            "dataset '%s': more than %d attributes on it and its groups", dname,
                            CS_META_MAX_KEYS);
    return cs_error_set(err, CS_ENOMEM, path, -1, -1, "out of memory");
}

static int load_records(h5ctx *c, const char *dname)
{
    const cs_load_options *o = c->o;
    const char *path = c->path;
    cs_error *err = c->err;
    h5attrs at;
    memset(&at, 0, sizeof at);
    h5shape sh;
    sh.memtype = -1;
    cs_record **recs = NULL;
    size_t nshots = 0;
    int rc;
    hid_t dset = H5Dopen2(c->file, dname, H5P_DEFAULT);
    if (dset < 0)
        return cs_error_set(err, CS_EFORMAT, path, -1, -1, "cannot open dataset '%s'", dname);
    rc = inspect(dset, path, dname, &sh, err);
    if (rc != CS_OK)
        goto done;
    if ((rc = io_hdf5_gather_attrs(c->file, dname, &at)) != CS_OK) {
        rc = attrs_failed(rc, path, dname, err);
        goto done;
    }
    /* layout: shots x samples, complex or not */
    int iq = !sh.cplx && io_hdf5_attr_truthy(io_hdf5_attr_find(&at, "iq"));
    int cplx = sh.cplx;
    hsize_t shots, per;
    int nd = sh.ndims - (iq ? 1 : 0); /* dimensions apart from the I/Q pair */
    if (iq && sh.dims[sh.ndims - 1] != 2) {
        rc = cs_error_set(err, CS_EFORMAT, path, -1, -1,
                          "dataset '%s' has iq = 1 but its last dimension is %llu, not 2", dname,
                          (unsigned long long)(sh.ndims ? sh.dims[sh.ndims - 1] : 0));
        goto done;
    }
    if (iq)
        cplx = 1;
    if (sh.ndims == 0 || nd < 1) {
        rc = cs_error_set(err, CS_EDATA, path, -1, -1,
                          "dataset '%s' holds a single value, not a record", dname);
        goto done;
    }
    if (nd > 2) {
        rc = cs_error_set(err, CS_EUNSUP, path, -1, -1,
                          "dataset '%s' has %d dimensions: only 1-D (one record) or 2-D (shots x "
                          "samples) are read%s", dname, sh.ndims, iq ? " (plus the I/Q pair)" : "");
        goto done;
    }
    shots = nd == 1 ? 1 : sh.dims[0];
    per = sh.dims[nd - 1];
    const size_t max_samples = o->max_samples ? o->max_samples : (size_t)1 << 31;
    if ((shots && per > (hsize_t)-1 / shots) || shots * per > (hsize_t)max_samples ||
        shots * per > SIZE_MAX / (2 * sizeof(double))) {
        rc = cs_error_set(err, CS_ERANGE, path, -1, -1,
                          "dataset '%s' holds %llu x %llu samples, more than the limit of %zu",
                          dname, (unsigned long long)shots, (unsigned long long)per, max_samples);
        goto done;
    }
    if (shots * per == 0) {
        rc = cs_error_set(err, CS_EDATA, path, -1, -1, "dataset '%s' is empty", dname);
        goto done;
    }
    size_t min_points = o->min_points ? o->min_points : 1;
    if (per < min_points) {
        rc = cs_error_set(err, CS_EDATA, path, -1, -1,
                          "dataset '%s' gives %llu samples per shot, fewer than the %zu needed",
                          dname, (unsigned long long)per, min_points);
        goto done;
    }
    /* sample rate and t0 */
    static const char *const rate_names[] = {"sample_rate"};
    static const char *const dt_names[] = {"sample_interval", "dt"};
    const h5attr *ar = io_hdf5_attr_find_any(&at, rate_names, 1);
    const h5attr *ad = io_hdf5_attr_find_any(&at, dt_names, 2);
    const h5attr *src = ar && (!ad || ar->level >= ad->level) ? ar : ad;
    double rate = 0.0;
    if (src) {
        double v = 0.0;
        rc = io_hdf5_attr_quantity(src, src == ar ? CS_DIM_FREQUENCY : CS_DIM_TIME,
                                   src == ar ? "Hz" : "s", path, &v, err);
        if (rc != CS_OK)
            goto done;
        rate = src == ar ? v : 1.0 / v;
    }
    char rate_from[320] = "";
    if (o->sample_rate_hz > 0.0 && isfinite(o->sample_rate_hz)) {
        if (src && fabs(rate - o->sample_rate_hz) > 1e-9 * o->sample_rate_hz)
            snprintf(rate_from, sizeof rate_from,
                     " (--sample-rate overrides the file's attribute '%s' of '%s' = %s)", src->name,
                     src->owner, src->text);
        rate = o->sample_rate_hz;
    } else if (src) {
        snprintf(rate_from, sizeof rate_from, " (attribute '%s' of '%s')", src->name, src->owner);
    } else {
        rc = cs_error_set(err, CS_EINVAL, path, -1, -1,
                          "dataset '%s' has no sample_rate, sample_interval or dt attribute (nor "
                          "has any parent group): give --sample-rate", dname);
        goto done;
    }
    double t0 = o->t0_s;
    const h5attr *a0 = io_hdf5_attr_find(&at, "t0");
    if (a0) {
        if (a0->kind == AT_TEXT) {
            cs_error e2;
            if (cs_quantity_parse(a0->text, CS_DIM_TIME, "s", &t0, NULL, NULL, &e2) != CS_OK) {
                rc = cs_error_set(err, CS_EDATA, path, -1, -1,
                                  "attribute 't0' of '%s' = '%s' is not a time: %s", a0->owner,
                                  a0->text, e2.msg);
                goto done;
            }
        } else {
            t0 = a0->num;
        }
        if (!isfinite(t0)) {
            rc = cs_error_set(err, CS_EDATA, path, -1, -1, "attribute 't0' of '%s' is not finite",
                              a0->owner);
            goto done;
        }
    }

    nshots = (size_t)shots;
    recs = calloc(nshots, sizeof *recs);
    if (!recs)
        goto nomem;
    const size_t comps = cplx ? 2 : 1;
    for (size_t s = 0; s < nshots; s++) {
        cs_record *r = cs_record_alloc((size_t)per, cplx);
        if (!r)
            goto nomem;
        recs[s] = r;
        r->shot = s;
        r->t0_s = t0;
        r->dt_s = 1.0 / rate;
        if (!(r->source = io_strdup(path)) || io_hdf5_attrs_to_meta(&at, &r->meta) != CS_OK)
            goto nomem;
        int ok;
        if (nd == 1) {
            ok = read_slab(dset, sh.memtype, NULL, NULL, 0, r->data);
        } else {
            hsize_t start[3] = {s, 0, 0}, count[3] = {1, per, 2};
            ok = read_slab(dset, sh.memtype, start, count, (size_t)per * (iq ? 2 : 1),
                           r->data);
        }
        if (!ok) {
            rc = cs_error_set(err, CS_EIO, path, -1, -1, "cannot read shot %zu of dataset '%s'", s,
                              dname);
            goto done;
        }
        size_t bad = io_first_nonfinite(r->data, (size_t)per * comps);
        if (bad < (size_t)per * comps) {
            rc = cs_error_set(err, CS_EDATA, path, -1, -1,
                              "dataset '%s': sample %zu%s of shot %zu is %s", dname, bad / comps,
                              comps == 1 ? "" : bad % 2 ? " (imaginary part)" : " (real part)", s,
                              isnan(r->data[bad]) ? "NaN" : "infinite");
            goto done;
        }
    }
    c->out->kind = CS_KIND_RECORD;
    c->out->records = recs;
    c->out->nrecords = nshots;
    recs = NULL;
    {
        char rs[64];
        cs_quantity_format(rate, CS_DIM_FREQUENCY, 6, rs, sizeof rs);
        cs_loaded_note(c->out, "hdf5 dataset '%s': %zu shot%s of %llu %s samples at %s%s", dname,
                       nshots, nshots == 1 ? "" : "s", (unsigned long long)per,
                       cplx ? "complex" : "real", rs, rate_from);
        if (iq)
            cs_loaded_note(c->out, "last dimension read as I/Q (attribute iq)");
    }
    rc = CS_OK;
    goto done;
nomem:
    rc = cs_error_set(err, CS_ENOMEM, path, -1, -1, "out of memory");
done:
    io_records_free(recs, nshots);
    io_hdf5_attrs_release(&at);
    if (sh.memtype >= 0)
        H5Tclose(sh.memtype);
    H5Dclose(dset);
    return rc;
}

/* ---------------------------------------------------------------- spectra */

/* Open a real dataset, check it is 1-D (or 2-D (N, cols)), return dims. */
static hid_t open_real(h5ctx *c, const char *dname, h5shape *sh, int *rc)
{
    hid_t d = H5Dopen2(c->file, dname, H5P_DEFAULT);
    if (d < 0) {
        *rc = cs_error_set(c->err, CS_EFORMAT, c->path, -1, -1, "cannot open dataset '%s'", dname);
        return -1;
    }
    *rc = inspect(d, c->path, dname, sh, c->err);
    if (*rc == CS_OK && sh->cplx)
        *rc = cs_error_set(c->err, CS_EFORMAT, c->path, -1, -1,
                           "dataset '%s' is complex; a spectrum needs real values", dname);
    if (*rc != CS_OK) {
        if (sh->memtype >= 0)
            H5Tclose(sh->memtype);
        sh->memtype = -1;
        H5Dclose(d);
        return -1;
    }
    return d;
}

static int load_spectrum(h5ctx *c, const char *yname, const char *xname)
{
    const cs_load_options *o = c->o;
    const char *path = c->path;
    cs_error *err = c->err;
    h5shape sy, sx;
    sy.memtype = sx.memtype = -1;
    hid_t dy = -1, dx = -1;
    h5attrs at, ax;
    memset(&at, 0, sizeof at);
    memset(&ax, 0, sizeof ax);
    cs_spectrum *sp = NULL;
    int rc;
    size_t n, cols;
    if ((dy = open_real(c, yname, &sy, &rc)) < 0)
        goto done;
    if (xname) {
        if ((dx = open_real(c, xname, &sx, &rc)) < 0)
            goto done;
        if (sx.ndims != 1 || sy.ndims != 1 || sx.dims[0] != sy.dims[0]) {
            rc = cs_error_set(err, CS_EFORMAT, path, -1, -1,
                              "x dataset '%s' and y dataset '%s' must be 1-D of the same length "
                              "(found %d-D of %llu and %d-D of %llu)", xname, yname, sx.ndims,
                              (unsigned long long)(sx.ndims ? sx.dims[0] : 0), sy.ndims,
                              (unsigned long long)(sy.ndims ? sy.dims[0] : 0));
            goto done;
        }
        cols = 2;
    } else if (sy.ndims == 2 && (sy.dims[1] == 2 || sy.dims[1] == 3)) {
        cols = (size_t)sy.dims[1];
    } else {
        rc = cs_error_set(err, CS_EFORMAT, path, -1, -1,
                          "a spectrum needs --x-dataset, or a real 2-D dataset of shape (N, 2) or "
                          "(N, 3) holding x, y[, sigma]; '%s' is neither", yname);
        goto done;
    }
    const size_t max_samples = o->max_samples ? o->max_samples : (size_t)1 << 31;
    if (sy.dims[0] > (hsize_t)max_samples) {
        rc = cs_error_set(err, CS_ERANGE, path, -1, -1, "dataset '%s' holds %llu points, more than "
                          "the limit of %zu", yname, (unsigned long long)sy.dims[0], max_samples);
        goto done;
    }
    n = (size_t)sy.dims[0];
    size_t min_points = o->min_points > 2 ? o->min_points : 2;
    if (n < min_points) {
        rc = cs_error_set(err, CS_EDATA, path, -1, -1, "dataset '%s' has %zu points, fewer than "
                          "the %zu needed", yname, n, min_points);
        goto done;
    }
    const char *attrs_of = yname;
    rc = io_hdf5_gather_attrs(c->file, yname, &at);
    if (rc == CS_OK && xname) {
        attrs_of = xname;
        rc = io_hdf5_gather_attrs(c->file, xname, &ax);
    }
    if (rc != CS_OK) {
        rc = attrs_failed(rc, path, attrs_of, err);
        goto done;
    }
    /* the axis unit: option, else the x dataset's attribute, else Hz */
    const char *unit = o->x_unit && *o->x_unit ? o->x_unit : NULL;
    const char *unit_from = "";
    if (!unit && xname) {
        const h5attr *ua = NULL; /* the x dataset's own attribute, not a parent group's */
        for (size_t i = ax.n; i-- > 0;)
            if (ax.a[i].kind == AT_TEXT && strcmp(ax.a[i].owner, xname) == 0 &&
                (strcasecmp(ax.a[i].name, "unit") == 0 || strcasecmp(ax.a[i].name, "units") == 0)) {
                ua = &ax.a[i];
                break;
            }
        if (ua) {
            unit = ua->text;
            unit_from = " (from its 'unit' attribute)";
        }
    }
    int assumed = unit == NULL;
    const cs_unit *u = cs_unit_find(assumed ? "Hz" : unit);
    if (!u) {
        rc = cs_error_set(err, CS_EUNIT, path, -1, -1, "unknown axis unit '%s'%s", unit, unit_from);
        goto done;
    }
    if (!(sp = cs_spectrum_alloc(n, cols == 3)))
        goto nomem;
    double *colv[3] = {sp->freq_hz, sp->y, sp->sigma};
    static const char *const names[3] = {"x", "y", "sigma"};
    if (xname) {
        if (!read_slab(dx, sx.memtype, NULL, NULL, 0, sp->freq_hz) ||
            !read_slab(dy, sy.memtype, NULL, NULL, 0, sp->y)) {
            rc = cs_error_set(err, CS_EIO, path, -1, -1, "cannot read '%s' or '%s'", xname, yname);
            goto done;
        }
    } else {
        for (size_t k = 0; k < cols; k++) {
            hsize_t start[2] = {0, k}, count[2] = {n, 1};
            if (!read_slab(dy, sy.memtype, start, count, n, colv[k])) {
                rc = cs_error_set(err, CS_EIO, path, -1, -1, "cannot read column %zu of '%s'", k,
                                  yname);
                goto done;
            }
        }
    }
    for (size_t k = 0; k < cols; k++) {
        size_t bad = io_first_nonfinite(colv[k], n);
        if (bad < n) {
            rc = cs_error_set(err, CS_EDATA, path, -1, -1, "%s at point %zu of '%s' is %s",
                              names[k], bad, k == 0 && xname ? xname : yname,
                              isnan(colv[k][bad]) ? "NaN" : "infinite");
            goto done;
        }
    }
    io_spectrum_fault fault = 0;
    size_t i = 0;
    rc = io_spectrum_finish(sp, u, assumed, o, path, &fault, &i, err);
    if (rc == CS_EDATA && fault == IO_SPECTRUM_SIGMA)
        rc = cs_error_set(err, CS_EDATA, path, -1, -1,
                          "sigma at point %zu of '%s' is %g: it must be positive", i, yname,
                          sp->sigma[i]);
    else if (rc == CS_EDATA && fault)
        rc = cs_error_set(err, CS_EDATA, path, -1, -1,
                          fault == IO_SPECTRUM_REPEAT
                              ? "x at point %zu of '%s' repeats the previous value"
                              : "x is not monotonic: point %zu of '%s' goes back",
                          i, xname ? xname : yname);
    if (rc != CS_OK)
        goto done;
    const char *base = strrchr(yname, '/');
    snprintf(sp->y_name, sizeof sp->y_name, "%s", base ? base + 1 : yname);
    if (!(sp->source = io_strdup(path)) || io_hdf5_attrs_to_meta(&at, &sp->meta) != CS_OK)
        goto nomem;
    c->out->kind = CS_KIND_SPECTRUM;
    c->out->spectrum = sp;
    sp = NULL;
    if (xname)
        cs_loaded_note(c->out, "hdf5 spectrum: x from '%s'%s, y from '%s', %zu points", xname,
                       unit_from, yname, n);
    else
        cs_loaded_note(c->out, "hdf5 spectrum: x, y%s from the columns of '%s', %zu points",
                       cols == 3 ? ", sigma" : "", yname, n);
    io_spectrum_notes(c->out, c->out->spectrum, u, assumed, o->air, 0);
    rc = CS_OK;
    goto done;
nomem:
    rc = cs_error_set(err, CS_ENOMEM, path, -1, -1, "out of memory");
done:
    cs_spectrum_free(sp);
    io_hdf5_attrs_release(&at);
    io_hdf5_attrs_release(&ax);
    if (sy.memtype >= 0)
        H5Tclose(sy.memtype);
    if (sx.memtype >= 0)
        H5Tclose(sx.memtype);
    if (dy >= 0)
        H5Dclose(dy);
    if (dx >= 0)
        H5Dclose(dx);
    return rc;
}

/* ---------------------------------------------------------------- entry point */

static int load_locked(const char *path, const cs_load_options *o, cs_loaded *out, cs_error *err)
{
    FILE *f = fopen(path, "rb");
    if (!f)
        return cs_error_set(err, CS_EIO, path, -1, -1, "cannot open: %s", strerror(errno));
    fclose(f);
    htri_t is = H5Fis_hdf5(path);
    if (is <= 0)
        return cs_error_set(err, CS_EFORMAT, path, -1, 0, "not an HDF5 file");
    hid_t file = H5Fopen(path, H5F_ACC_RDONLY, H5P_DEFAULT);
    if (file < 0)
        return cs_error_set(err, CS_EFORMAT, path, -1, -1,
                            "HDF5 cannot open the file (damaged, or locked by a program still "
                            "writing it?)");
    h5ctx c = {path, o, err, file, out};
    int rc;
    char yname[512], xname[512];
    int spectrum = (o->x_dataset && *o->x_dataset) || o->kind == CS_KIND_SPECTRUM;
    if (o->x_dataset && *o->x_dataset) {
        rc = io_hdf5_choose_dataset(file, path, o->x_dataset, NULL, xname, sizeof xname, err);
        if (rc == CS_OK)
            rc = io_hdf5_choose_dataset(file, path, o->dataset, xname, yname, sizeof yname, err);
        if (rc == CS_OK && strcmp(xname, yname) == 0)
            rc = cs_error_set(err, CS_EINVAL, path, -1, -1,
                              "the x dataset and the y dataset are both '%s'", xname);
        if (rc == CS_OK)
            rc = load_spectrum(&c, yname, xname);
    } else {
        rc = io_hdf5_choose_dataset(file, path, o->dataset, NULL, yname, sizeof yname, err);
        if (rc == CS_OK)
            rc = spectrum ? load_spectrum(&c, yname, NULL) : load_records(&c, yname);
    }
    H5Fclose(file);
    return rc;
}

int cs_io_hdf5_load(const char *path, const cs_load_options *o, cs_loaded *out, cs_error *err)
{
    cs_load_options defaults;
    if (!o) {
        cs_load_options_init(&defaults);
        o = &defaults;
    }
    if (!path || !out)
        return cs_error_set(err, CS_EINVAL, path, -1, -1, "no file given");
    if (o->kind == CS_KIND_RECORD && o->x_dataset && *o->x_dataset)
        return cs_error_set(err, CS_EINVAL, path, -1, -1,
                            "--x-dataset makes a spectrum, but a record was asked for");
    pthread_mutex_lock(&h5_lock);
    H5E_auto2_t old_func = NULL;
    void *old_data = NULL;
    H5Eget_auto2(H5E_DEFAULT, &old_func, &old_data);
    H5Eset_auto2(H5E_DEFAULT, NULL, NULL);
    int rc = load_locked(path, o, out, err);
    H5Eset_auto2(H5E_DEFAULT, old_func, old_data);
    pthread_mutex_unlock(&h5_lock);
    return rc;
}
