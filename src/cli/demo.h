/* Shared state of `collshift demo` (demo.c drives the run, demo_series.c holds the campaign). */
#ifndef CS_CLI_DEMO_H
#define CS_CLI_DEMO_H

#include <stddef.h>

#include <collshift/report.h>

#define DEMO_PATH_MAX 4096

typedef struct demo_ctx {
    char data[DEMO_PATH_MAX];      /* the bundled data folder */
    char out[DEMO_PATH_MAX];       /* the output folder */
    cs_report *rep;
    size_t nfig;                   /* figures written */
    char figs[32][256];            /* their paths relative to out */
    int failures;                  /* stages that did not complete */
    double mid_density_m3;         /* middle of the campaign's densities (NaN until known) */
} demo_ctx;

/* Join folder and name into buf (n bytes); returns buf, or NULL when it does not fit. */
char *demo_join(char *buf, size_t n, const char *dir, const char *name);
/* Write text to out/REL atomically after checking it is not an input; 0 or -1 (message printed). */
int demo_write(demo_ctx *c, const char *rel, const char *text);
/* Note a figure written at out/REL (for the report's figure list and the closing summary). */
void demo_figure(demo_ctx *c, const char *rel);
/* Print a library error; counts a failed stage. */
void demo_fail(demo_ctx *c, const char *stage, const cs_error *err);
/* Format "%.6g" of x, or "-" when not finite. Returns buf. */
char *demo_num(double x, char *buf, size_t n);

/* The two density series with regressions, theory and the comparison with truth.csv. */
void demo_series(demo_ctx *c, const char *line_name);

#endif /* CS_CLI_DEMO_H */
