/* Private interface of the HDF5 loader: choosing the dataset, attributes up to the root. */
#ifndef CS_IO_HDF5_IMPL_H
#define CS_IO_HDF5_IMPL_H

#include <collshift/io.h>

#include "io_internal.h"

#include <hdf5.h>

#include <stddef.h>

/* ---------------------------------------------------------------- attributes (io_hdf5_tree.c) */

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

/* Pick the dataset into chosen (n bytes): `want` when given (must exist and be a dataset), else
 * the only top-level one other than `exclude`. CS_EINVAL with the datasets found listed. */
CS_IO_INTERNAL int io_hdf5_choose_dataset(hid_t file, const char *path, const char *want,
                                          const char *exclude, char *chosen, size_t n,
                                          cs_error *err);

/* Gather the scalar attributes of the root, each parent group and the object at `objpath`, in
 * that order, into s (zeroed by the caller). CS_OK or CS_ENOMEM. */
CS_IO_INTERNAL int io_hdf5_gather_attrs(hid_t file, const char *objpath, h5attrs *s);
CS_IO_INTERNAL void io_hdf5_attrs_release(h5attrs *s);

/* The most specific attribute with this name (case-insensitive), or NULL. */
CS_IO_INTERNAL const h5attr *io_hdf5_attr_find(const h5attrs *s, const char *name);
/* The most specific of several names: the deepest level wins, then the order of names. */
CS_IO_INTERNAL const h5attr *io_hdf5_attr_find_any(const h5attrs *s, const char *const *names,
                                                   size_t k);
/* A non-zero number, or the text true, yes or 1; 0 for NULL. */
CS_IO_INTERNAL int io_hdf5_attr_truthy(const h5attr *a);
/* A positive quantity of dimension dim into *si: numbers are in `unit`, strings may carry their
 * own. CS_EDATA or CS_EUNIT with a message naming the attribute and its owner. */
CS_IO_INTERNAL int io_hdf5_attr_quantity(const h5attr *a, cs_dim dim, const char *unit,
                                         const char *path, double *si, cs_error *err);
/* Every attribute but the reserved ones (sample_rate, dt, t0, iq, unit, ...) as metadata text,
 * root first so that deeper values win. CS_OK or CS_ENOMEM. */
CS_IO_INTERNAL int io_hdf5_attrs_to_meta(const h5attrs *s, cs_meta *m);

#endif /* CS_IO_HDF5_IMPL_H */
