/* NumPy .npy files: writing records as one array ('<f8' or '<c16', C order, format version 1.0). */
/*
 * The layout written (see io_npy.c for the format): magic, version 1.0, a two-byte header length,
 * the header dictionary padded with spaces and ended by '\n' so that the data start on a multiple
 * of 64 bytes (NumPy's ARRAY_ALIGN), then the samples as little-endian doubles, record after
 * record: shape (n,) for one record, (records, n) for several.
 */
#include <collshift/io.h>

#include "io_npy_impl.h"

#include <errno.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#define NPY_ALIGN 64                       /* data start alignment written (ARRAY_ALIGN) */

static void put_le64(unsigned char *p, uint64_t u)
{
    for (int i = 0; i < 8; i++)
        p[i] = (unsigned char)(u >> (8 * i));
}

int cs_io_npy_write_records(const char *path, cs_record *const *recs, size_t nrec, cs_error *err)
{
    if (!path)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "no file given");
    if (!recs || nrec == 0)
        return cs_error_set(err, CS_EINVAL, path, -1, -1, "no records to write");
    for (size_t i = 0; i < nrec; i++) {
        if (!recs[i] || (recs[i]->n && !recs[i]->data))
            return cs_error_set(err, CS_EINVAL, path, -1, -1, "record %zu is missing", i);
        if (recs[i]->n != recs[0]->n || recs[i]->is_complex != recs[0]->is_complex)
            return cs_error_set(err, CS_EINVAL, path, -1, -1,
                                "record %zu (%zu %s samples) differs from record 0 (%zu %s): a "
                                ".npy array needs records of one length and kind", i, recs[i]->n,
                                recs[i]->is_complex ? "complex" : "real", recs[0]->n,
                                recs[0]->is_complex ? "complex" : "real");
    }
    const size_t n = recs[0]->n;
    const int cx = recs[0]->is_complex != 0;
    const size_t comps = cx ? 2 : 1;
    if (n > SIZE_MAX / (comps * 8) / nrec)
        return cs_error_set(err, CS_ERANGE, path, -1, -1, "too many samples to write");

    /* header: magic, version 1.0, u16 length, dictionary, spaces, '\n'; data start % 64 == 0 */
    char dict[160];
    int dl = nrec == 1 ? snprintf(dict, sizeof dict,
                                  "{'descr': '%s', 'fortran_order': False, 'shape': (%zu,), }",
                                  cx ? "<c16" : "<f8", n)
                       : snprintf(dict, sizeof dict,
                                  "{'descr': '%s', 'fortran_order': False, 'shape': (%zu, %zu), }",
                                  cx ? "<c16" : "<f8", nrec, n);
    size_t used = 10 + (size_t)dl + 1;
    size_t hlen = (size_t)dl + 1 + (NPY_ALIGN - used % NPY_ALIGN) % NPY_ALIGN;
    unsigned char head[10 + 256];
    memcpy(head, io_npy_magic, 6);
    head[6] = 1;
    head[7] = 0;
    head[8] = (unsigned char)(hlen & 0xFF);
    head[9] = (unsigned char)(hlen >> 8);
    memcpy(head + 10, dict, (size_t)dl);
    memset(head + 10 + dl, ' ', hlen - (size_t)dl - 1);
    head[10 + hlen - 1] = '\n';

    FILE *f = fopen(path, "wb");
    if (!f)
        return cs_error_set(err, CS_EIO, path, -1, -1, "cannot create: %s", strerror(errno));
    int ok = fwrite(head, 1, 10 + hlen, f) == 10 + hlen;
    const int little = io_host_is_little_endian();
    unsigned char *buf = NULL;
    if (ok && !little)
        ok = (buf = malloc(NPY_CHUNK_ELEMS * 8)) != NULL;
    for (size_t r = 0; ok && r < nrec; r++) {
        const double *d = recs[r]->data;
        size_t m = n * comps;
        if (little) {
            ok = fwrite(d, sizeof *d, m, f) == m;
            continue;
        }
        for (size_t k = 0; ok && k < m; k += NPY_CHUNK_ELEMS) {
            size_t c = m - k < NPY_CHUNK_ELEMS ? m - k : NPY_CHUNK_ELEMS;
            for (size_t j = 0; j < c; j++) {
                uint64_t u;
                memcpy(&u, d + k + j, 8);
                put_le64(buf + 8 * j, u);
            }
            ok = fwrite(buf, 8, c, f) == c;
        }
    }
    free(buf);
    int saved = errno;
    if (fclose(f) != 0 && ok) {
        ok = 0;
        saved = errno;
    }
    if (!ok) {
        remove(path);
        return cs_error_set(err, CS_EIO, path, -1, -1, "write failed: %s", strerror(saved));
    }
    return CS_OK;
}
