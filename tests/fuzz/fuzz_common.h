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

#endif
