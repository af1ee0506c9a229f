/* Private interface of the io loaders: binary decoding, record lists, finishing a spectrum. */
#ifndef CS_IO_INTERNAL_H
#define CS_IO_INTERNAL_H

#include <collshift/io.h>

#include <stddef.h>

/* Functions shared between the io sources but not part of the library's interface. */
#if defined(__GNUC__)
#define CS_IO_INTERNAL __attribute__((visibility("hidden")))
#else
#define CS_IO_INTERNAL
#endif

/* ---------------------------------------------------------------- binary numbers (io_decode.c) */

/* What one stored real number is. */
typedef enum io_num_kind {
    IO_NUM_SIGNED = 0,  /* two's complement integer */
    IO_NUM_UNSIGNED,    /* unsigned integer */
    IO_NUM_FLOAT        /* IEEE 754 binary32 or binary64 */
} io_num_kind;

/* How one real number is stored: a complex value is two of them, real (I) part first. */
typedef struct io_numtype {
    size_t scalar;      /* bytes: 1, 2, 4 or 8 (IO_NUM_FLOAT: 4 or 8) */
    io_num_kind kind;
    int big;            /* big-endian (ignored for one-byte numbers) */
} io_numtype;

/* Decode n numbers of type t from src (n * t->scalar bytes) into dst (n doubles), each multiplied
 * by scale. The byte order is decoded from the bytes, so the result does not depend on the host's.
 * Integers beyond 2^53 round to the nearest double. Returns the index of the first non-finite
 * result (which is stored; decoding stops there), or n when all are finite. */
CS_IO_INTERNAL size_t io_decode(const unsigned char *src, size_t n, const io_numtype *t,
                                double scale, double *dst);

/* Index of the first non-finite value of v[0..n), or n. */
CS_IO_INTERNAL size_t io_first_nonfinite(const double *v, size_t n);

/* 1 on a little-endian host (where little-endian binary64 data already are doubles). */
CS_IO_INTERNAL int io_host_is_little_endian(void);

/* ---------------------------------------------------------------- loaded objects (io_finish.c) */

/* A malloc'ed copy of s, or NULL when out of memory. */
CS_IO_INTERNAL char *io_strdup(const char *s);

/* Free recs[0..n) (NULL entries allowed) and the array; NULL-safe. */
CS_IO_INTERNAL void io_records_free(cs_record **recs, size_t n);

/* Reverse v[0..n) in place; nothing for NULL or n < 2. */
CS_IO_INTERNAL void io_reverse(double *v, size_t n);

/* Which check io_spectrum_finish found failing, and where (the point's index in file order). */
typedef enum io_spectrum_fault {
    IO_SPECTRUM_SIGMA = 1,  /* sigma of the point is not positive (checked before conversion) */
    IO_SPECTRUM_REPEAT,     /* x of the point equals the previous point's, after conversion */
    IO_SPECTRUM_BACK        /* x of the point goes back against the direction of points 0, 1 */
} io_spectrum_fault;

/* Finish a spectrum read column by column (.npy and HDF5): sp->freq_hz holds the axis in unit u,
 * sp->y and sp->sigma (or NULL) the values, all finite, in file order, sp->n >= 2. Checks that
 * every sigma is positive, converts the axis to Hz (cs_axis_to_hz with o->air and o->y_is_density,
 * recorded in sp->conv), checks that the axis is strictly monotonic in either direction, reverses
 * every column when it decreases (then sp->conv.reversed = 1), and records the unit in sp->x_unit
 * and sp->x_unit_assumed (= assumed). Returns CS_OK; CS_EDATA with *fault and *at set and err left
 * alone, when the caller words the message (it names points its own way); or the code of
 * cs_axis_to_hz, with err filled by it and its file set to path. */
CS_IO_INTERNAL int io_spectrum_finish(cs_spectrum *sp, const cs_unit *u, int assumed,
                                      const cs_load_options *o, const char *path,
                                      io_spectrum_fault *fault, size_t *at, cs_error *err);

/* The notes of a finished spectrum, in this order: the axis unit (assumed, or converted to Hz, with
 * the wavelength kind when air is set), the Jacobian ("Jacobian applied to y", followed by
 * " and sigma" when name_sigma is set and sp has sigma), the reversal. */
CS_IO_INTERNAL void io_spectrum_notes(cs_loaded *out, const cs_spectrum *sp, const cs_unit *u,
                                      int assumed, int air, int name_sigma);

#endif /* CS_IO_INTERNAL_H */
