/* Output names and error messages of the command-line figures. */
#include "cli.h"
#include "plotcli.h"

#include <stdio.h>
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
