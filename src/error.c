/* Status codes, their descriptions, and filling and formatting of cs_error reports. */
#include <collshift/error.h>

#include <stdarg.h>
#include <stdio.h>
#include <string.h>

const char *cs_strerror(int code)
{
    switch (code) {
    case CS_OK: return "success";
    case CS_EINVAL: return "invalid argument";
    case CS_ENOMEM: return "out of memory";
    case CS_EIO: return "input/output error";
    case CS_EFORMAT: return "malformed file";
    case CS_EDATA: return "unusable data";
    case CS_EUNIT: return "unknown or wrong unit";
    case CS_ENOCONV: return "did not converge";
    case CS_ERANGE: return "value out of range";
    case CS_EUNSUP: return "not supported";
    default: return "unknown error";
    }
}

void cs_error_clear(cs_error *err)
{
    if (!err)
        return;
    err->code = CS_OK;
    err->file[0] = '\0';
    err->line = -1;
    err->offset = -1;
    err->msg[0] = '\0';
}

int cs_error_set(cs_error *err, int code, const char *file, long line, long long offset,
                 const char *fmt, ...)
{
    if (!err)
        return code;
    err->code = code;
    snprintf(err->file, sizeof err->file, "%s", file ? file : "");
    err->line = line;
    err->offset = offset;
    va_list ap;
    va_start(ap, fmt);
    vsnprintf(err->msg, sizeof err->msg, fmt, ap);
    va_end(ap);
    return code;
}

char *cs_error_format(const cs_error *err, char *buf, size_t n)
{
    if (!buf || n == 0)
        return buf;
    if (!err) {
        snprintf(buf, n, "unknown error");
        return buf;
    }
    const char *msg = err->msg[0] ? err->msg : cs_strerror(err->code);
    if (err->file[0] && err->line > 0)
        snprintf(buf, n, "'%s': line %ld: %s", err->file, err->line, msg);
    else if (err->file[0] && err->offset >= 0)
        snprintf(buf, n, "'%s': byte %lld: %s", err->file, err->offset, msg);
    else if (err->file[0])
        snprintf(buf, n, "'%s': %s", err->file, msg);
    else
        snprintf(buf, n, "%s", msg);
    return buf;
}
