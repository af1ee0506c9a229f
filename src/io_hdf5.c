/* HDF5 files: picking a dataset, reading it into records or a spectrum, attributes as metadata. */
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

#define H5_MAX_DEPTH 16      /* group nesting followed when listing datasets */
#define H5_MAX_LISTED 24     /* dataset names shown in a message */

static char *dup_s(const char *s)
{
    size_t n = strlen(s) + 1;
    char *d = malloc(n);
    if (d)
        memcpy(d, s, n);
    return d;
}

/* ---------------------------------------------------------------- listing datasets */

typedef struct name_list {
    char text[360];   /* "/a, /b/c, ..." */
    size_t count;     /* datasets seen */
    size_t shown;
    char first[512];  /* path of the first dataset seen */
    const char *exclude;
} name_list;

static void list_add(name_list *l, const char *path)
{
    if (l->exclude && strcmp(path, l->exclude) == 0)
        return;
    if (l->count == 0)
        snprintf(l->first, sizeof l->first, "%s", path);
    l->count++;
    size_t used = strlen(l->text);
    if (l->shown < H5_MAX_LISTED && used + strlen(path) + 8 < sizeof l->text) {
        snprintf(l->text + used, sizeof l->text - used, "%s%s", used ? ", " : "", path);
        l->shown++;
    }
}

typedef struct visit {
    name_list *list;
    char prefix[256];
    int depth;
    int recurse;
} visit;

static herr_t visit_link(hid_t group, const char *name, const H5L_info_t *info, void *data)
{
    (void)info;
    visit *v = data;
    char path[sizeof v->prefix + 64];
    const char *parent = strcmp(v->prefix, "/") == 0 ? "" : v->prefix;
    int len = snprintf(path, sizeof path, "%s/%s", parent, name);
    if (len < 0 || (size_t)len >= sizeof v->prefix)
        return 0; /* a path this long is not listed */
    hid_t obj = H5Oopen(group, name, H5P_DEFAULT);
    if (obj < 0)
        return 0; /* dangling or external link: not listed */
    H5I_type_t t = H5Iget_type(obj);
    if (t == H5I_DATASET) {
        list_add(v->list, path);
    } else if (t == H5I_GROUP && v->recurse && v->depth < H5_MAX_DEPTH) {
        visit sub = *v;
        memcpy(sub.prefix, path, (size_t)len + 1);
        sub.depth++;
        H5Literate(obj, H5_INDEX_NAME, H5_ITER_INC, NULL, visit_link, &sub);
    }
    H5Oclose(obj);
    return 0;
}

static void list_datasets(hid_t file, int recurse, name_list *l)
{
    visit v;
    memset(&v, 0, sizeof v);
    v.list = l;
    snprintf(v.prefix, sizeof v.prefix, "/");
    v.recurse = recurse;
    H5Literate(file, H5_INDEX_NAME, H5_ITER_INC, NULL, visit_link, &v);
}

/* 1 when every component of path exists as a link (H5Lexists needs the parents to exist). */
static int path_exists(hid_t file, const char *path)
{
    char buf[512];
    snprintf(buf, sizeof buf, "%s", path);
    size_t n = strlen(buf);
    if (n == 0 || n >= sizeof buf - 1)
        return 0;
    for (size_t i = 1; i <= n; i++) {
        if (buf[i] == '/' || buf[i] == '\0') {
            char c = buf[i];
            buf[i] = '\0';
            htri_t e = H5Lexists(file, buf, H5P_DEFAULT);
            buf[i] = c;
            if (e <= 0)
                return 0;
        }
    }
    return 1;
}

/* Normalise a user path to start with '/' and have no trailing '/'. */
static void norm_path(const char *in, char *out, size_t n)
{
    snprintf(out, n, "%s%s", in[0] == '/' ? "" : "/", in);
    size_t len = strlen(out);
    while (len > 1 && out[len - 1] == '/')
        out[--len] = '\0';
}

/* Pick the dataset: `want` when given (must exist and be a dataset), else the only top-level one
 * other than `exclude`. */
static int choose_dataset(hid_t file, const char *path, const char *want, const char *exclude,
                          char *chosen, size_t n, cs_error *err)
{
    if (want && *want) {
        norm_path(want, chosen, n);
        int is_dataset = 0;
        if (path_exists(file, chosen)) {
            hid_t obj = H5Oopen(file, chosen, H5P_DEFAULT);
            if (obj >= 0) {
                is_dataset = H5Iget_type(obj) == H5I_DATASET;
                H5Oclose(obj);
            }
            if (!is_dataset) {
                name_list l;
                memset(&l, 0, sizeof l);
                list_datasets(file, 1, &l);
                return cs_error_set(err, CS_EINVAL, path, -1, -1,
                                    "'%s' is not a dataset (a group?); datasets in the file: %s",
                                    chosen, l.count ? l.text : "none");
            }
            return CS_OK;
        }
        name_list l;
        memset(&l, 0, sizeof l);
        list_datasets(file, 1, &l);
        return cs_error_set(err, CS_EINVAL, path, -1, -1,
                            "no dataset '%s' in the file; datasets found: %s%s", chosen,
                            l.count ? l.text : "none", l.count > l.shown ? ", ..." : "");
    }
    name_list top;
    memset(&top, 0, sizeof top);
    top.exclude = exclude;
    list_datasets(file, 0, &top);
    if (top.count == 1) {
        snprintf(chosen, n, "%s", top.first);
        return CS_OK;
    }
    name_list all;
    memset(&all, 0, sizeof all);
    all.exclude = exclude;
    list_datasets(file, 1, &all);
    if (top.count == 0)
        return cs_error_set(err, CS_EINVAL, path, -1, -1,
                            "no dataset at the top level of the file; choose one with --dataset "
                            "from: %s%s",
                            all.count ? all.text : "none (the file holds no datasets)",
                            all.count > all.shown ? ", ..." : "");
    return cs_error_set(err, CS_EINVAL, path, -1, -1,
                        "the file holds %zu datasets; choose one with --dataset: %s%s", all.count,
                        all.text, all.count > all.shown ? ", ..." : "");
}

/* ---------------------------------------------------------------- attributes */

enum { AT_INT = 1, AT_FLOAT, AT_TEXT };

typedef struct h5attr {
    char *name;
    char *text;        /* AT_TEXT: the string; otherwise the number as text */
    double num;        /* AT_INT / AT_FLOAT */
    int kind;
    int level;         /* 0 = root ... deepest = the dataset */
    char owner[256];   /* object path, for messages */
} h5attr;

typedef struct h5attrs {
    h5attr *a;
    size_t n, cap;
    int level;
    const char *owner;
    int oom;
} h5attrs;

static void attrs_release(h5attrs *s)
{
    for (size_t i = 0; i < s->n; i++) {
        free(s->a[i].name);
        free(s->a[i].text);
    }
    free(s->a);
    memset(s, 0, sizeof *s);
}

/* Read a string attribute (fixed or variable length) of one element. */
static char *attr_string(hid_t attr, hid_t ftype)
{
    char *out = NULL;
    if (H5Tis_variable_str(ftype) > 0) {
        hid_t mt = H5Tcopy(H5T_C_S1);
        char *s = NULL;
        if (mt >= 0 && H5Tset_size(mt, H5T_VARIABLE) >= 0 &&
            H5Tset_cset(mt, H5Tget_cset(ftype)) >= 0 && H5Aread(attr, mt, &s) >= 0 && s) {
            out = dup_s(s);
            H5free_memory(s);
        }
        if (mt >= 0)
            H5Tclose(mt);
        return out;
    }
    size_t sz = H5Tget_size(ftype);
    if (sz == 0 || sz > 65536)
        return NULL;
    char *buf = calloc(sz + 1, 1);
    hid_t mt = H5Tcopy(ftype);
    if (buf && mt >= 0 && H5Aread(attr, mt, buf) >= 0) {
        size_t len = strlen(buf);
        while (len && (buf[len - 1] == ' '))
            buf[--len] = '\0';
        out = buf;
        buf = NULL;
    }
    if (mt >= 0)
        H5Tclose(mt);
    free(buf);
    return out;
}

static herr_t attr_visit(hid_t loc, const char *name, const H5A_info_t *info, void *data)
{
    (void)info;
    h5attrs *s = data;
    hid_t attr = H5Aopen(loc, name, H5P_DEFAULT);
    if (attr < 0)
        return 0;
    hid_t space = H5Aget_space(attr), ftype = H5Aget_type(attr);
    h5attr a;
    memset(&a, 0, sizeof a);
    char num[64];
    if (space >= 0 && ftype >= 0 && H5Sget_simple_extent_npoints(space) == 1) {
        H5T_class_t cls = H5Tget_class(ftype);
        if (cls == H5T_INTEGER) {
            if (H5Tget_sign(ftype) == H5T_SGN_NONE) {
                unsigned long long u;
                if (H5Aread(attr, H5T_NATIVE_ULLONG, &u) >= 0) {
                    a.kind = AT_INT;
                    a.num = (double)u;
                    snprintf(num, sizeof num, "%llu", u);
                }
            } else {
                long long i;
                if (H5Aread(attr, H5T_NATIVE_LLONG, &i) >= 0) {
                    a.kind = AT_INT;
                    a.num = (double)i;
                    snprintf(num, sizeof num, "%lld", i);
                }
            }
            if (a.kind)
                a.text = dup_s(num);
        } else if (cls == H5T_FLOAT) {
            double d;
            if (H5Aread(attr, H5T_NATIVE_DOUBLE, &d) >= 0) {
                a.kind = AT_FLOAT;
                a.num = d;
                snprintf(num, sizeof num, "%.17g", d);
                a.text = dup_s(num);
            }
        } else if (cls == H5T_STRING) {
            a.text = attr_string(attr, ftype);
            a.kind = a.text ? AT_TEXT : 0;
        } else if (cls == H5T_ENUM) { /* h5py stores Python bools as an enum FALSE/TRUE */
            hid_t nt = H5Tget_native_type(ftype, H5T_DIR_ASCEND);
            unsigned char val[16];
            char ename[64];
            if (nt >= 0 && H5Tget_size(nt) <= sizeof val && H5Aread(attr, nt, val) >= 0 &&
                H5Tenum_nameof(nt, val, ename, sizeof ename) >= 0) {
                a.text = dup_s(ename);
                a.kind = a.text ? AT_TEXT : 0;
            }
            if (nt >= 0)
                H5Tclose(nt);
        }
    }
    if (ftype >= 0)
        H5Tclose(ftype);
    if (space >= 0)
        H5Sclose(space);
    H5Aclose(attr);
    if (!a.kind) {
        free(a.text);
        return 0; /* arrays, compounds, references: not metadata */
    }
    a.name = dup_s(name);
    a.level = s->level;
    snprintf(a.owner, sizeof a.owner, "%s", s->owner);
    if (a.name && s->n == s->cap) {
        size_t cap = s->cap ? 2 * s->cap : 16;
        h5attr *na = realloc(s->a, cap * sizeof *na);
        if (na) {
            s->a = na;
            s->cap = cap;
        }
    }
    if (!a.name || !a.text || s->n == s->cap) {
        free(a.name);
        free(a.text);
        s->oom = 1;
        return -1; /* stops the iteration */
    }
    s->a[s->n++] = a;
    return 0;
}

/* Gather the attributes of the root, each parent group and the object at `objpath`, in order. */
static int gather_attrs(hid_t file, const char *objpath, h5attrs *s)
{
    char prefix[512];
    size_t n = strlen(objpath);
    int level = 0;
    for (size_t i = 0; i <= n; i++) {
        if (i != 0 && objpath[i] != '/' && objpath[i] != '\0')
            continue;
        if (i == 0)
            snprintf(prefix, sizeof prefix, "/");
        else
            snprintf(prefix, sizeof prefix, "%.*s", (int)i, objpath);
        if (i == n && n == 1)
            break; /* objpath is "/" itself, already done */
        hid_t obj = H5Oopen(file, prefix, H5P_DEFAULT);
        if (obj < 0)
            continue;
        s->level = level++;
        s->owner = prefix;
        H5Aiterate2(obj, H5_INDEX_NAME, H5_ITER_INC, NULL, attr_visit, s);
        H5Oclose(obj);
        if (s->oom)
            return CS_ENOMEM;
    }
    return CS_OK;
}

/* The most specific attribute with this name (case-insensitive), or NULL. */
static const h5attr *attr_find(const h5attrs *s, const char *name)
{
    for (size_t i = s->n; i-- > 0;)
        if (strcasecmp(s->a[i].name, name) == 0)
            return &s->a[i];
    return NULL;
}

/* The most specific of several names: the deepest level wins, then the order of names. */
static const h5attr *attr_find_any(const h5attrs *s, const char *const *names, size_t k)
{
    const h5attr *best = NULL;
    for (size_t j = 0; j < k; j++) {
        const h5attr *a = attr_find(s, names[j]);
        if (a && (!best || a->level > best->level))
            best = a;
    }
    return best;
}

static int attr_truthy(const h5attr *a)
{
    if (!a)
        return 0;
    if (a->kind != AT_TEXT)
        return a->num != 0.0;
    return strcasecmp(a->text, "true") == 0 || strcasecmp(a->text, "yes") == 0 ||
           strcmp(a->text, "1") == 0;
}

/* A positive quantity from an attribute: numbers are in `unit`, strings may carry their own. */
static int attr_quantity(const h5attr *a, cs_dim dim, const char *unit, const char *path,
                         double *si, cs_error *err)
{
    double v = 0.0;
    if (a->kind == AT_TEXT) {
        cs_error e2;
        cs_error_clear(&e2);
        int rc = cs_quantity_parse(a->text, dim, unit, &v, NULL, NULL, &e2);
        if (rc != CS_OK)
            return cs_error_set(err, rc == CS_EUNIT ? CS_EUNIT : CS_EDATA, path, -1, -1,
                                "attribute '%s' of '%s' = '%s' is not a %s: %s", a->name, a->owner,
                                a->text, cs_dim_name(dim), e2.msg);
    } else {
        const cs_unit *u = cs_unit_find(unit);
        v = u ? cs_unit_to_si(u, a->num) : a->num;
    }
    if (!(v > 0.0) || !isfinite(v))
        return cs_error_set(err, CS_EDATA, path, -1, -1,
                            "attribute '%s' of '%s' = %s must be a positive %s", a->name, a->owner,
                            a->text, cs_dim_name(dim));
    *si = v;
    return CS_OK;
}

static int is_reserved(const char *name)
{
    static const char *const r[] = {"sample_rate", "sample_interval", "dt", "t0",
                                    "iq", "unit", "units"};
    for (size_t i = 0; i < sizeof r / sizeof r[0]; i++)
        if (strcasecmp(name, r[i]) == 0)
            return 1;
    return 0;
}

static int attrs_to_meta(const h5attrs *s, cs_meta *m)
{
    for (size_t i = 0; i < s->n; i++) {
        if (is_reserved(s->a[i].name))
            continue;
        if (cs_meta_set_text(m, s->a[i].name, s->a[i].text) != CS_OK)
            return CS_ENOMEM;
    }
    return CS_OK;
}

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

/* Index of the first non-finite value, or n. */
static size_t first_bad(const double *v, size_t n)
{
    for (size_t i = 0; i < n; i++)
        if (!isfinite(v[i]))
            return i;
    return n;
}

/* ---------------------------------------------------------------- records */

typedef struct h5ctx {
    const char *path;
    const cs_load_options *o;
    cs_error *err;
    hid_t file;
    cs_loaded *out;
} h5ctx;

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
    if ((rc = gather_attrs(c->file, dname, &at)) != CS_OK) {
        rc = cs_error_set(err, CS_ENOMEM, path, -1, -1, "out of memory");
        goto done;
    }
    /* layout: shots x samples, complex or not */
    int iq = !sh.cplx && attr_truthy(attr_find(&at, "iq"));
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
    const h5attr *ar = attr_find_any(&at, rate_names, 1), *ad = attr_find_any(&at, dt_names, 2);
    const h5attr *src = ar && (!ad || ar->level >= ad->level) ? ar : ad;
    double rate = 0.0;
    if (src) {
        double v = 0.0;
        rc = attr_quantity(src, src == ar ? CS_DIM_FREQUENCY : CS_DIM_TIME, src == ar ? "Hz" : "s",
                           path, &v, err);
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
    const h5attr *a0 = attr_find(&at, "t0");
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
        if (!(r->source = dup_s(path)) || attrs_to_meta(&at, &r->meta) != CS_OK)
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
        size_t bad = first_bad(r->data, (size_t)per * comps);
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
    if (recs) {
        for (size_t s = 0; s < nshots; s++)
            cs_record_free(recs[s]);
        free(recs);
    }
    attrs_release(&at);
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
    if (gather_attrs(c->file, yname, &at) != CS_OK ||
        (xname && gather_attrs(c->file, xname, &ax) != CS_OK))
        goto nomem;
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
        size_t bad = first_bad(colv[k], n);
        if (bad < n) {
            rc = cs_error_set(err, CS_EDATA, path, -1, -1, "%s at point %zu of '%s' is %s",
                              names[k], bad, k == 0 && xname ? xname : yname,
                              isnan(colv[k][bad]) ? "NaN" : "infinite");
            goto done;
        }
    }
    if (sp->sigma)
        for (size_t i = 0; i < n; i++)
            if (!(sp->sigma[i] > 0.0)) {
                rc = cs_error_set(err, CS_EDATA, path, -1, -1,
                                  "sigma at point %zu of '%s' is %g: it must be positive", i, yname,
                                  sp->sigma[i]);
                goto done;
            }
    sp->conv.air = o->air;
    sp->conv.y_is_density = o->y_is_density;
    rc = cs_axis_to_hz(sp->freq_hz, sp->y, sp->sigma, n, u, &sp->conv, err);
    if (rc != CS_OK) {
        if (err)
            snprintf(err->file, sizeof err->file, "%s", path);
        goto done;
    }
    double dir = sp->freq_hz[1] > sp->freq_hz[0] ? 1.0 : -1.0;
    for (size_t i = 1; i < n; i++) {
        double d = sp->freq_hz[i] - sp->freq_hz[i - 1];
        if (!(d * dir > 0.0)) {
            rc = cs_error_set(err, CS_EDATA, path, -1, -1,
                              d == 0.0 ? "x at point %zu of '%s' repeats the previous value"
                                       : "x is not monotonic: point %zu of '%s' goes back",
                              i, xname ? xname : yname);
            goto done;
        }
    }
    if (dir < 0.0) {
        for (size_t i = 0, j = n - 1; i < j; i++, j--)
            for (size_t k = 0; k < cols; k++) {
                double t = colv[k][i];
                colv[k][i] = colv[k][j];
                colv[k][j] = t;
            }
        sp->conv.reversed = 1;
    }
    snprintf(sp->x_unit, sizeof sp->x_unit, "%s", u->name);
    sp->x_unit_assumed = assumed;
    const char *base = strrchr(yname, '/');
    snprintf(sp->y_name, sizeof sp->y_name, "%s", base ? base + 1 : yname);
    if (!(sp->source = dup_s(path)) || attrs_to_meta(&at, &sp->meta) != CS_OK)
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
    if (assumed)
        cs_loaded_note(c->out, "no axis unit given: x taken as Hz");
    else if (u->dim != CS_DIM_FREQUENCY || u->scale != 1.0)
        cs_loaded_note(c->out, "axis in %s converted to Hz%s", u->name,
                       u->dim != CS_DIM_LENGTH ? ""
                       : o->air                ? " (air wavelengths)"
                                               : " (vacuum)");
    if (c->out->spectrum->conv.jacobian_applied)
        cs_loaded_note(c->out, "Jacobian applied to y");
    if (c->out->spectrum->conv.reversed)
        cs_loaded_note(c->out, "axis reversed to ascending frequency");
    rc = CS_OK;
    goto done;
nomem:
    rc = cs_error_set(err, CS_ENOMEM, path, -1, -1, "out of memory");
done:
    cs_spectrum_free(sp);
    attrs_release(&at);
    attrs_release(&ax);
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
        rc = choose_dataset(file, path, o->x_dataset, NULL, xname, sizeof xname, err);
        if (rc == CS_OK)
            rc = choose_dataset(file, path, o->dataset, xname, yname, sizeof yname, err);
        if (rc == CS_OK && strcmp(xname, yname) == 0)
            rc = cs_error_set(err, CS_EINVAL, path, -1, -1,
                              "the x dataset and the y dataset are both '%s'", xname);
        if (rc == CS_OK)
            rc = load_spectrum(&c, yname, xname);
    } else {
        rc = choose_dataset(file, path, o->dataset, NULL, yname, sizeof yname, err);
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
