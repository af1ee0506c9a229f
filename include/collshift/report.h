/* Writing results: value(error) notation with SI prefixes, and atomic output files. */
#ifndef CS_REPORT_H
#define CS_REPORT_H

#include <stddef.h>
#include <collshift/error.h>
#include <collshift/units.h>

#ifdef __cplusplus
extern "C" {
#endif

/* Format a value with its standard uncertainty in the concise notation of the GUM (JCGM 100:2008,
 * 7.2.2): the uncertainty is rounded to two significant digits, the value to the same decimal place,
 * and the uncertainty is written in parentheses in units of the last digit, e.g.
 * -1234567 Hz +- 15000 Hz -> "-1.235(15) MHz". The SI prefix is chosen from the larger of |value|
 * and err (densities are shown in cm^-3 with a power of ten: "3.20(15)e+13 cm^-3").
 * dim == CS_DIM_DIMENSIONLESS or CS_DIM_UNKNOWN prints no unit (and a power of ten when needed).
 * A non-finite or non-positive err prints the value with 6 significant digits followed by
 * " (no error)"; a non-finite value prints "nan" or "inf". Returns buf. */
char *cs_format_value_err(double value, double err, cs_dim dim, char *buf, size_t n);

/* Write len bytes to path atomically: a temporary file in the same folder (same name plus
 * ".tmp.XXXXXX"), flushed, then renamed over path, so an interrupted run never leaves a
 * half-written file. The new file gets the usual permissions (0666 less the umask).
 * Returns CS_OK or CS_EIO (message names the path and the system's reason). */
int cs_write_atomic(const char *path, const void *data, size_t len, cs_error *err);

#ifdef __cplusplus
}
#endif
#endif /* CS_REPORT_H */
