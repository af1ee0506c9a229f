/* Status codes and error reports shared by every collshift module. */
#ifndef CS_ERROR_H
#define CS_ERROR_H

#include <stddef.h>

#ifdef __cplusplus
extern "C" {
#endif

/* Every library function that can fail returns one of these (CS_OK = 0, failures < 0). */
enum cs_status {
    CS_OK = 0,          /* success */
    CS_EINVAL = -1,     /* invalid argument or option value (a usage error) */
    CS_ENOMEM = -2,     /* allocation failed */
    CS_EIO = -3,        /* the operating system refused a read or write */
    CS_EFORMAT = -4,    /* the file's content is malformed */
    CS_EDATA = -5,      /* well-formed file, but the numbers cannot be used (NaN, non-monotonic axis, too few points) */
    CS_EUNIT = -6,      /* unknown unit or a unit of the wrong dimension */
    CS_ENOCONV = -7,    /* an iterative computation did not converge */
    CS_ERANGE = -8,     /* a value is outside the representable or allowed range */
    CS_EUNSUP = -9      /* valid request that this build or format version does not support */
};

/* Size of the message buffer inside cs_error. */
#define CS_ERROR_MSG_MAX 512
#define CS_ERROR_FILE_MAX 256

/* A full error report: filled by library calls that take a `cs_error *`.
 * `line` (1-based) and `offset` (bytes from the start of the file) are -1 when not applicable. */
typedef struct cs_error {
    int code;                          /* one of enum cs_status */
    char file[CS_ERROR_FILE_MAX];      /* file the problem is in, "" if none */
    long line;                         /* 1-based line number, or -1 */
    long long offset;                  /* byte offset, or -1 */
    char msg[CS_ERROR_MSG_MAX];        /* lowercase, no trailing full stop, e.g. "expected 2 columns, found 3" */
} cs_error;

/* Short, static description of a status code; never NULL. */
const char *cs_strerror(int code);

/* Reset *err to "no error". NULL-safe. */
void cs_error_clear(cs_error *err);

/* Fill *err (NULL-safe) and return `code`, so a caller can write `return cs_error_set(...)`.
 * `file` may be NULL; `line` and `offset` are -1 when unknown. The message is printf-formatted. */
int cs_error_set(cs_error *err, int code, const char *file, long line, long long offset,
                 const char *fmt, ...)
#if defined(__GNUC__)
    __attribute__((format(printf, 6, 7)))
#endif
    ;

/* Format the report as "FILE: line N: message" (or "FILE: byte N: message", or "message")
 * into buf of size n. Returns buf. */
char *cs_error_format(const cs_error *err, char *buf, size_t n);

#ifdef __cplusplus
}
#endif
#endif /* CS_ERROR_H */
