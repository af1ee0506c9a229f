/* Value(error) notation with SI prefixes, and atomic writes of output files. */
#include <collshift/report.h>

#include <errno.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>

/* SI prefixes from 1e-15 to 1e15 in steps of 1e3. */
static const char *const prefixes[] = {"f", "p", "n", "u", "m", "", "k", "M", "G", "T", "P"};

/* Exponent (multiple of 3, within the prefix table) that puts x in [1, 1000). */
static int eng_exponent(double x)
{
    if (!(x > 0) || !isfinite(x))
        return 0;
    int e = (int)floor(log10(x) / 3.0) * 3;
    if (e < -15)
        e = -15;
    if (e > 15)
        e = 15;
    return e;
}

/* The base symbol for a dimension when printed with a prefix, and whether prefixes apply. */
static const char *base_symbol(cs_dim dim, int *prefixable, double *to_display)
{
    *prefixable = 1;
    *to_display = 1.0;
    switch (dim) {
    case CS_DIM_FREQUENCY: return "Hz";
    case CS_DIM_TIME: return "s";
    case CS_DIM_LENGTH: return "m";
    case CS_DIM_RATE: *prefixable = 0; return "s^-1";   /* "Gs^-1" would read as (Gs)^-1 */
    case CS_DIM_PRESSURE: return "Pa";
    case CS_DIM_TEMPERATURE: *prefixable = 0; return "K";
    case CS_DIM_WAVENUMBER: *prefixable = 0; *to_display = 0.01; return "cm^-1";
    case CS_DIM_DENSITY: *prefixable = 0; *to_display = 1e-6; return "cm^-3";
    default: *prefixable = 0; return "";
    }
}

char *cs_format_value_err(double value, double err, cs_dim dim, char *buf, size_t n)
{
    if (!buf || n == 0)
        return buf;
    int prefixable;
    double k;
    const char *sym = base_symbol(dim, &prefixable, &k);
    const char *sep = *sym ? " " : "";
    if (!isfinite(value)) { /* never "nan" or "inf" in an output: say what it is */
        snprintf(buf, n, "undefined");
        return buf;
    }
    value *= k;
    double e = err * k;
    double big = fmax(fabs(value), isfinite(e) && e > 0 ? e : 0.0);
    int p10 = eng_exponent(big);
    const char *prefix = "";
    int sci = 0;
    if (prefixable) {
        prefix = prefixes[p10 / 3 + 5];
    } else if (big != 0 && (big >= 1e5 || big < 1e-3)) {
        sci = 1;  /* show a power of ten instead of a prefix */
        p10 = (int)floor(log10(big));
    } else {
        p10 = 0;
    }
    double scale = pow(10.0, -p10);
    double v = value * scale;
    char tail[40];
    if (sci)
        snprintf(tail, sizeof tail, "e%+03d%s%s%s", p10, sep, prefix, sym);
    else
        snprintf(tail, sizeof tail, "%s%s%s", sep, prefix, sym);
    if (!(isfinite(e) && e > 0)) {
        snprintf(buf, n, "%.6g%s (%s)", v, tail, isnan(err) || isinf(err) ? "error undefined" : "no error");
        return buf;
    }
    double es = e * scale;
    /* decimal place of the second significant digit of the error */
    int lead = (int)floor(log10(es));
    int decimals = 1 - lead;
    double unit = pow(10.0, -decimals);
    double digits = round(es / unit);
    if (digits >= 100) { /* rounding carried into a third digit, e.g. 9.96 -> 10.0 */
        decimals -= 1;
        unit *= 10;
        digits = round(es / unit);
    }
    double vr = round(v / unit) * unit;
    if (decimals < 0) {  /* error of 100 or more display units: both as integers, same units */
        digits *= unit;
        decimals = 0;
    }
    if (vr == 0.0)
        vr = 0.0;  /* no negative zero */
    snprintf(buf, n, "%.*f(%.0f)%s", decimals, vr, digits, tail);
    return buf;
}

int cs_write_atomic(const char *path, const void *data, size_t len, cs_error *err)
{
    size_t plen = strlen(path);
    char *tmp = malloc(plen + 12);
    if (!tmp)
        return cs_error_set(err, CS_ENOMEM, path, -1, -1, "out of memory");
    memcpy(tmp, path, plen);
    memcpy(tmp + plen, ".tmp.XXXXXX", 12);
    int fd = mkstemp(tmp);
    if (fd < 0) {
        int e = errno;
        free(tmp);
        return cs_error_set(err, CS_EIO, path, -1, -1, "cannot create a temporary file beside it: %s",
                            strerror(e));
    }
    mode_t um = umask(0);  /* mkstemp creates 0600; give the usual permissions */
    umask(um);
    (void)fchmod(fd, 0666 & ~um);
    const char *p = data;
    size_t left = len;
    int e = 0;
    while (left > 0) {
        ssize_t w = write(fd, p, left);
        if (w < 0) {
            if (errno == EINTR)
                continue;
            e = errno;
            break;
        }
        p += w;
        left -= (size_t)w;
    }
    if (!e && fsync(fd) != 0 && errno != EINVAL)
        e = errno;
    if (close(fd) != 0 && !e)
        e = errno;
    if (!e && rename(tmp, path) != 0)
        e = errno;
    if (e) {
        unlink(tmp);
        free(tmp);
        return cs_error_set(err, CS_EIO, path, -1, -1, "cannot write: %s", strerror(e));
    }
    free(tmp);
    return CS_OK;
}
