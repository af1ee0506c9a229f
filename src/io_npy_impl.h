/* Private interface of the .npy sources: the magic, the parsed header, the read chunk. */
#ifndef CS_IO_NPY_IMPL_H
#define CS_IO_NPY_IMPL_H

#include <collshift/io.h>

#include "io_internal.h"

#include <stddef.h>
#include <stdint.h>
#include <stdio.h>

#define NPY_CHUNK_ELEMS ((size_t)1 << 16)  /* elements per read: <= 1 MiB of c16 */
#define NPY_MAX_DIMS 32                    /* NumPy's own limit (NPY_MAXDIMS) */

/* "\x93NUMPY", the first six bytes of every .npy file (io_npy_header.c). */
CS_IO_INTERNAL extern const unsigned char io_npy_magic[6];

typedef struct npy_header {
    int major, minor;
    long long data_off;           /* file offset of the data */
    char descr[96];               /* the dtype string, or the text of a non-string descr */
    int descr_is_string;
    long long descr_off;
    int fortran;
    size_t ndim;
    uint64_t shape[NPY_MAX_DIMS];
    long long shape_off;
} npy_header;

/* Read magic, version and header of the .npy file f (fsize bytes) from its start; fills h,
 * data_off included. CS_OK; CS_EFORMAT, CS_EUNSUP, CS_EIO or CS_ENOMEM with err naming the byte
 * offset of the fault. */
CS_IO_INTERNAL int io_npy_read_header(FILE *f, const char *path, long long fsize, npy_header *h,
                                      cs_error *err);

/* The shape as NumPy prints it: "(3, 1024)", "(1024,)". */
CS_IO_INTERNAL void io_npy_shape_text(const npy_header *h, char *buf, size_t n);

#endif /* CS_IO_NPY_IMPL_H */
