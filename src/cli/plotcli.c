/* Output names and error messages of the command-line figures. */
#include "cli.h"
#include "plotcli.h"

#include <collshift/plot.h>

#include <jansson.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

void cli_path_stem(char *buf, size_t n, const char *path)
{
    const char *base = strrchr(path, '/');
    base = base ? base + 1 : path;
    snprintf(buf, n, "%s", base);
    char *dot = strrchr(buf, '.');
    if (dot && dot != buf)
        *dot = '\0';
}

void cli_plot_name(char *buf, size_t n, const char *file, const char *tag)
{
    const char *slash = strrchr(file, '/');
    const char *dot = strrchr(file, '.');
    if (!dot || (slash && dot < slash) || dot == (slash ? slash + 1 : file)) {
        snprintf(buf, n, "%s_%s", file, tag);
        return;
    }
    snprintf(buf, n, "%.*s_%s%s", (int)(dot - file), file, tag, dot);
}

void cli_plot_name_for(char *buf, size_t n, const char *file, const char *source, int several)
{
    if (!several) {
        snprintf(buf, n, "%s", file);
        return;
    }
    char stem[256];
    cli_path_stem(stem, sizeof stem, source);
    cli_plot_name(buf, n, file, stem);
}

int cli_plot_failed(const char *file, const cs_error *err)
{
    cli_errorf("'%s': %s", file, err && err->msg[0] ? err->msg : "the figure could not be drawn");
    return CLI_EXIT_DATA;
}

/* The smoothed envelope on a logarithmic axis with the gates (gate --plot-envelope, split
 * --plot). */
int cli_plot_envelope(const char *file, const cs_envelope *env, const cs_plot_gate *pg, size_t ng,
                             json_t *figures)
{
    double *t = malloc((env->n ? env->n : 1) * sizeof *t);
    if (!t) {
        cli_errorf("'%s': out of memory", file);
        return CLI_EXIT_DATA;
    }
    for (size_t i = 0; i < env->n; i++)
        t[i] = env->t0_s + (double)i * env->dt_s;
    cs_plot_envelope_data d;
    memset(&d, 0, sizeof d);
    d.n = env->n;
    d.t_s = t;
    d.intensity = env->smooth ? env->smooth : env->intensity;
    d.log_y = 1;
    d.ngates = ng;
    d.gates = ng ? pg : NULL;
    cs_plot_options o;
    cs_plot_options_init(&o);
    cs_error err;
    cs_error_clear(&err);
    int rc = 0;
    if (cs_plot_envelope(file, &d, &o, &err) != CS_OK)
        rc = cli_plot_failed(file, &err);
    else
        json_array_append_new(figures, cli_jstring(file));
    free(t);
    return rc;
}
