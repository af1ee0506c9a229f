/* Shared helpers for the libFuzzer harnesses (tests/fuzz/fuzz_*.c). Not part of the library. */
#ifndef CS_FUZZ_COMMON_H
#define CS_FUZZ_COMMON_H

#include <stddef.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

/* A NUL-terminated copy of the input (caller frees). */
static inline char *fuzz_cstr(const uint8_t *data, size_t size)
{
    char *s = malloc(size + 1);
    if (!s)
        abort();
    if (size)
        memcpy(s, data, size);
    s[size] = '\0';
    return s;
}

/* One temporary file per process, rewritten for every input; its path is returned. The file is
 * created under $TMPDIR (default /dev/shm when it exists, else /tmp) with the given suffix and
 * removed at exit. */
static char fuzz_path_buf[256];
static void fuzz_unlink_tmp(void) { if (fuzz_path_buf[0]) unlink(fuzz_path_buf); }

static inline const char *fuzz_write_tmp(const uint8_t *data, size_t size, const char *suffix)
{
    if (!fuzz_path_buf[0]) {
        const char *dir = getenv("TMPDIR");
        if (!dir || !*dir)
            dir = access("/dev/shm", W_OK) == 0 ? "/dev/shm" : "/tmp";
        snprintf(fuzz_path_buf, sizeof fuzz_path_buf, "%s/csfuzz-%ld%s", dir, (long)getpid(), suffix);
        atexit(fuzz_unlink_tmp);
    }
    FILE *f = fopen(fuzz_path_buf, "wb");
    if (!f)
        abort();
    if (size && fwrite(data, 1, size, f) != size)
        abort();
    if (fclose(f) != 0)
        abort();
    return fuzz_path_buf;
}

/* A contract of the library that an input broke: report and crash, so libFuzzer keeps the input. */
#define fuzz_assert(cond)                                                                         \
    do {                                                                                          \
        if (!(cond)) {                                                                            \
            fprintf(stderr, "fuzz_assert failed: %s (%s:%d)\n", #cond, __FILE__, __LINE__);        \
            abort();                                                                              \
        }                                                                                         \
    } while (0)

#ifdef CS_IO_H
#include <math.h>
/* What every loader promises (include/collshift/io.h): a failure has a negative code and a
 * message; a success has a spectrum with a strictly ascending, finite axis and finite values
 * (sigma > 0), or records with dt > 0 and finite samples, each with at least min_points points. */
static inline void fuzz_assert_load(int rc, const cs_loaded *l, const cs_error *err, size_t min_points)
{
    if (rc != CS_OK) {
        fuzz_assert(rc < 0 && err->code == rc && err->msg[0] != '\0');
        return;
    }
    if (l->kind == CS_KIND_SPECTRUM) {
        const cs_spectrum *s = l->spectrum;
        fuzz_assert(s && s->n >= min_points);
        for (size_t i = 0; i < s->n; i++) {
            fuzz_assert(isfinite(s->freq_hz[i]) && isfinite(s->y[i]));
            fuzz_assert(i == 0 || s->freq_hz[i] > s->freq_hz[i - 1]);
            fuzz_assert(!s->sigma || (s->sigma[i] > 0 && isfinite(s->sigma[i])));
        }
    } else {
        fuzz_assert(l->kind == CS_KIND_RECORD && l->nrecords >= 1 && l->records);
        for (size_t r = 0; r < l->nrecords; r++) {
            const cs_record *rec = l->records[r];
            fuzz_assert(rec && rec->n >= min_points && rec->dt_s > 0 && isfinite(rec->dt_s));
            size_t m = rec->n * (rec->is_complex ? 2u : 1u);
            for (size_t i = 0; i < m; i++)
                fuzz_assert(isfinite(rec->data[i]));
        }
    }
}

/* Load `path` with options `o` and check the result's contract (fuzz_assert_load); returns the
 * loader's code (CS_OK or a negative code), for the harness's own assertion. */
static inline int fuzz_load_and_check(const char *path, const cs_load_options *o)
{
    cs_loaded l;
    cs_loaded_init(&l);
    cs_error err;
    cs_error_clear(&err);
    int rc = cs_io_load(path, o, &l, &err);
    fuzz_assert_load(rc, &l, &err, o->min_points);
    cs_loaded_release(&l);
    return rc;
}
#endif

/* A failed parse says why. */
#define fuzz_assert_error(rc, err) fuzz_assert((rc) == 0 || ((rc) < 0 && (err).msg[0] != '\0'))

#endif
