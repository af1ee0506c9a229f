/* Shared between the two files of `collshift series`: its options and its output writer. */
#ifndef CS_CLI_SERIES_OUT_H
#define CS_CLI_SERIES_OUT_H

#include <collshift/series.h>
#include <collshift/theory.h>

typedef struct series_opts {
    cs_series_params p;
    const cs_line *line;      /* --line, or NULL */
    double thickness_m;       /* --thickness, or NaN */
    unsigned flags;           /* CS_SERIES_FIT_* */
    const char *manifest, *json, *table;
    int quiet;
} series_opts;

/* Regressions, theory comparison, the summary on stdout, --json and --table. Returns 0 or an exit
 * code (a file that could not be written). */
int series_output(const cs_series *s, const series_opts *so);

#endif
