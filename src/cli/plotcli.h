/* Figures from the command line: output names and error reporting shared by the commands that
 * take --plot options (fit, gate, split, series). The drawing itself is in <collshift/plot.h>. */
#ifndef CS_CLI_PLOTCLI_H
#define CS_CLI_PLOTCLI_H

#include <stddef.h>

#include <collshift/error.h>
#include <collshift/gate.h>
#include <collshift/plot.h>
#include <jansson.h>

/* FILE with "_TAG" inserted before its extension: ("fit.png", "a") -> "fit_a.png"; a name
 * without an extension gets "_TAG" appended. */
void cli_plot_name(char *buf, size_t n, const char *file, const char *tag);
/* The stem of a data file's path: "dir/run_1.csv" -> "run_1". */
void cli_path_stem(char *buf, size_t n, const char *path);
/* FILE, or FILE with the stem of `source` inserted when `several` is set. */
void cli_plot_name_for(char *buf, size_t n, const char *file, const char *source, int several);
/* Report a figure that could not be drawn as "collshift: 'FILE': message"; returns
 * CLI_EXIT_DATA (3), also for an unknown extension. */
int cli_plot_failed(const char *file, const cs_error *err);

/* Draw the smoothed (else raw) intensity envelope on a logarithmic axis with the gates to FILE
 * and append FILE to `figures`; returns 0 or an exit code (message shown). */
int cli_plot_envelope(const char *file, const cs_envelope *env, const cs_plot_gate *pg, size_t ng,
                      json_t *figures);

#endif
