/* HDF5 files: the tree of groups and datasets, choosing the dataset, attributes as metadata. */
/*
 * Nothing in HDF5 says which dataset is the record, so a file whose top level holds exactly one
 * dataset uses it, and otherwise the error lists the datasets found (recursively, at most
 * H5_MAX_LISTED names). Attributes are gathered from the root down through every parent group to
 * the dataset itself, so that the most specific one of a name wins (see io_hdf5.c for the
 * conventions they carry). Callers hold the HDF5 lock (io_hdf5.c).
 */
#include <collshift/io.h>

#include "io_hdf5_impl.h"

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <strings.h>

#define H5_MAX_DEPTH 16      /* group nesting followed when listing datasets */
#define H5_MAX_LISTED 24     /* dataset names shown in a message */

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
int io_hdf5_choose_dataset(hid_t file, const char *path, const char *want, const char *exclude,
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

void io_hdf5_attrs_release(h5attrs *s)
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
            out = io_strdup(s);
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

/* Most attributes gathered for one dataset (its own and its groups'): as many as the metadata of
 * a spectrum or record may hold (CS_META_MAX_KEYS), so a file with a flood of attributes is
 * refused with a message instead of filling memory. */
#define IO_HDF5_MAX_ATTRS ((size_t)CS_META_MAX_KEYS)

static herr_t attr_visit(hid_t loc, const char *name, const H5A_info_t *info, void *data)
{
    (void)info;
    h5attrs *s = data;
    if (s->n >= IO_HDF5_MAX_ATTRS)
        return -1; /* stops the iteration; io_hdf5_gather_attrs reports it */
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
                a.text = io_strdup(num);
        } else if (cls == H5T_FLOAT) {
            double d;
            if (H5Aread(attr, H5T_NATIVE_DOUBLE, &d) >= 0) {
                a.kind = AT_FLOAT;
                a.num = d;
                snprintf(num, sizeof num, "%.17g", d);
                a.text = io_strdup(num);
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
                a.text = io_strdup(ename);
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
    a.name = io_strdup(name);
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
int io_hdf5_gather_attrs(hid_t file, const char *objpath, h5attrs *s)
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
        if (s->n >= IO_HDF5_MAX_ATTRS)
            return CS_ERANGE;
    }
    return CS_OK;
}

/* The most specific attribute with this name (case-insensitive), or NULL. */
const h5attr *io_hdf5_attr_find(const h5attrs *s, const char *name)
{
    for (size_t i = s->n; i-- > 0;)
        if (strcasecmp(s->a[i].name, name) == 0)
            return &s->a[i];
    return NULL;
}

/* The most specific of several names: the deepest level wins, then the order of names. */
const h5attr *io_hdf5_attr_find_any(const h5attrs *s, const char *const *names, size_t k)
{
    const h5attr *best = NULL;
    for (size_t j = 0; j < k; j++) {
        const h5attr *a = io_hdf5_attr_find(s, names[j]);
        if (a && (!best || a->level > best->level))
            best = a;
    }
    return best;
}

int io_hdf5_attr_truthy(const h5attr *a)
{
    if (!a)
        return 0;
    if (a->kind != AT_TEXT)
        return a->num != 0.0;
    return strcasecmp(a->text, "true") == 0 || strcasecmp(a->text, "yes") == 0 ||
           strcmp(a->text, "1") == 0;
}

/* A positive quantity from an attribute: numbers are in `unit`, strings may carry their own. */
int io_hdf5_attr_quantity(const h5attr *a, cs_dim dim, const char *unit, const char *path,
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

int io_hdf5_attrs_to_meta(const h5attrs *s, cs_meta *m)
{
    for (size_t i = 0; i < s->n; i++) {
        if (is_reserved(s->a[i].name))
            continue;
        if (cs_meta_set_text(m, s->a[i].name, s->a[i].text) != CS_OK)
            return CS_ENOMEM;
    }
    return CS_OK;
}
