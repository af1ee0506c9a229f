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
    const char *theory_table; /* --theory-table: the theory comparison as CSV */
    const char *plot_shift;   /* --plot-shift FILE, or NULL */
    const char *plot_fwhm;    /* --plot-fwhm FILE, or NULL */
    int quiet;
    /* the run, written to the JSON's "run" object so that `collshift merge` can combine shards */
    const char *command;      /* "series" or "merge" */
    size_t shard_k, shard_n;  /* --shard K/N; 0 and 0 when not sharded */
    size_t merged;            /* merge: number of shards combined (0 for series) */
    const char *options;      /* the options that change results, as text (fingerprint input) */
    char fingerprint[40];     /* hash of the manifest's bytes and options */
} series_opts;

/* 64-bit FNV-1a hash of n bytes, continuing from h (start with SERIES_FNV_SEED). */
#define SERIES_FNV_SEED 0xcbf29ce484222325ull
unsigned long long series_fnv1a(unsigned long long h, const void *data, size_t n);

/* Regressions, theory comparison, the summary on stdout, --json and --table. Returns 0 or an exit
 * code (a file that could not be written). */
int series_output(const cs_series *s, const series_opts *so);

#endif
