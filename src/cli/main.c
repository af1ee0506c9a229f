/* collshift command-line entry point: the static command table, help, version and dispatch. */
#include "cli.h"

#include <stdarg.h>
#include <stdio.h>
#include <string.h>

#ifndef CS_VERSION_STRING
#define CS_VERSION_STRING "unknown"
#endif

static const cli_command commands[] = {
    {"info", cmd_info, "describe files: kind, points, axis range and step, units, metadata, noise",
     cmd_info_usage},
    {"fit", cmd_fit, "fit line profiles plus a baseline to spectra, with standard errors", cmd_fit_usage},
    {"gate", cmd_gate, "find the burst in time records and compute gated spectra of its eras", cmd_gate_usage},
    {"split", cmd_split, "fit the burst-era and tail-era lines of time records and their collective shift", cmd_split_usage},
    {"predict", cmd_predict, "estimate Lorentz-Lorenz and cooperative Lamb shifts, self-broadening, superradiance, trapping", cmd_predict_usage},
    {"series", cmd_series, "analyse a campaign of files at known densities: slopes of shift and width, theory", cmd_series_usage},
    {"simulate", cmd_simulate, "write synthetic records or spectra of an invented density series, with the true values", cmd_simulate_usage},
    {"merge", cmd_merge, "combine the JSON of sharded series runs (--shard K/N) into the campaign of one run", cmd_merge_usage},
    {"demo", cmd_demo, "run the whole chain on the bundled synthetic data: report, tables and figures", cmd_demo_usage},
};
static const size_t ncommands = sizeof commands / sizeof commands[0];

static const char main_usage_head[] =
    "usage: collshift COMMAND [OPTIONS] [FILE...]\n"
    "       collshift help COMMAND | collshift COMMAND --help | collshift --version\n"
    "\n"
    "Measures collective (cooperative) line shifts and widths of dense emitters from spectra\n"
    "and time-resolved emission records.\n"
    "\n"
    "Commands:\n";

static const char main_usage_tail[] =
    "\n"
    "Conventions: frequencies in cyclic Hz; widths are FWHM in Hz; decay rates in s^-1\n"
    "(Lorentzian FWHM = rate/2pi); densities in m^-3 inside, cm^-3 accepted and shown;\n"
    "a shift is measured minus reference (negative = red).\n"
    "\n"
    "Exit codes:\n"
    "  0  success\n"
    "  1  the analysis did not succeed (e.g. a fit did not converge)\n"
    "  2  usage error (unknown command or option, bad option value)\n"
    "  3  input or data error (unreadable or malformed file, unusable data)\n";

const cli_command *cli_find_command(const char *name)
{
    for (size_t i = 0; i < ncommands; i++)
        if (strcmp(commands[i].name, name) == 0)
            return &commands[i];
    return NULL;
}

void cli_print_usage(const cli_command *c, FILE *f)
{
    for (const char *const *p = c->usage; *p; p++)
        fputs(*p, f);
}

static void print_main_usage(FILE *f)
{
    fputs(main_usage_head, f);
    for (size_t i = 0; i < ncommands; i++)
        fprintf(f, "  %-10s %s\n", commands[i].name, commands[i].summary);
    fputs(main_usage_tail, f);
}

/* Write text as roff body text: backslashes escaped, lines that start with '.' or '\'' protected. */
static void roff_text(FILE *f, const char *text)
{
    int bol = 1;
    for (const char *p = text; *p; p++) {
        if (bol && (*p == '.' || *p == '\''))
            fputs("\\&", f);
        if (*p == '\\')
            fputs("\\e", f);
        else
            fputc(*p, f);
        bol = *p == '\n';
    }
}

/* The manual page, made from the same usage texts as --help (installed as collshift.1). */
static void print_man(FILE *f)
{
    fprintf(f, ".TH COLLSHIFT 1 \"\" \"collshift %s\" \"User Commands\"\n", CS_VERSION_STRING);
    fputs(".SH NAME\ncollshift \\- collective line shifts and widths of dense emitters\n", f);
    fputs(".SH SYNOPSIS\n.nf\n", f);
    roff_text(f, main_usage_head);
    fputs(".fi\n.SH COMMANDS\n.nf\n", f);
    for (size_t i = 0; i < ncommands; i++)
        fprintf(f, "  %-10s %s\n", commands[i].name, commands[i].summary);
    fputs(".fi\n", f);
    for (size_t i = 0; i < ncommands; i++) {
        fprintf(f, ".SS %s\n.nf\n", commands[i].name);
        for (const char *const *u = commands[i].usage; *u; u++)
            roff_text(f, *u);
        fputs(".fi\n", f);
    }
    fputs(".SH CONVENTIONS AND EXIT STATUS\n.nf\n", f);
    roff_text(f, main_usage_tail);
    fputs(".fi\n.SH SEE ALSO\nREADME.md and DEVELOPERS.md in the source distribution.\n", f);
}

void cli_errorf(const char *fmt, ...)
{
    fputs("collshift: ", stderr);
    va_list ap;
    va_start(ap, fmt);
    vfprintf(stderr, fmt, ap);
    va_end(ap);
    fputc('\n', stderr);
}

int cli_exit_code(int status)
{
    switch (status) {
    case CS_OK: return CLI_EXIT_OK;
    case CS_EINVAL: return CLI_EXIT_USAGE;
    case CS_ENOCONV: return CLI_EXIT_ANALYSIS;
    default: return CLI_EXIT_DATA;
    }
}

int cli_report(const cs_error *err)
{
    char buf[CS_ERROR_MSG_MAX + CS_ERROR_FILE_MAX + 64];
    cli_errorf("%s", cs_error_format(err, buf, sizeof buf));
    return cli_exit_code(err->code);
}

/* Flush and check stdout: a table that did not reach its destination is not a success. */
static int finish_stdout(int rc)
{
    if (fflush(stdout) != 0 || ferror(stdout)) {
        cli_errorf("error writing to standard output");
        return rc ? rc : CLI_EXIT_DATA;
    }
    return rc;
}

int main(int argc, char **argv)
{
    if (argc < 2) {
        print_main_usage(stderr);
        return CLI_EXIT_USAGE;
    }
    const char *cmd = argv[1];
    if (strcmp(cmd, "--help") == 0 || strcmp(cmd, "-h") == 0) {
        print_main_usage(stdout);
        return finish_stdout(CLI_EXIT_OK);
    }
    if (strcmp(cmd, "--man") == 0) {   /* used by the build to make collshift.1 */
        print_man(stdout);
        return finish_stdout(CLI_EXIT_OK);
    }
    if (strcmp(cmd, "--version") == 0 || strcmp(cmd, "-V") == 0) {
        printf("collshift %s\n", CS_VERSION_STRING);
        return finish_stdout(CLI_EXIT_OK);
    }
    if (strcmp(cmd, "help") == 0) {
        if (argc < 3) {
            print_main_usage(stdout);
            return finish_stdout(CLI_EXIT_OK);
        }
        const cli_command *c = cli_find_command(argv[2]);
        if (!c) {
            cli_errorf("'%s' is not a command; see 'collshift --help'", argv[2]);
            return CLI_EXIT_USAGE;
        }
        cli_print_usage(c, stdout);
        return finish_stdout(CLI_EXIT_OK);
    }
    const cli_command *c = cli_find_command(cmd);
    if (!c) {
        cli_errorf("'%s' is not a command; see 'collshift --help'", cmd);
        return CLI_EXIT_USAGE;
    }
    for (int i = 2; i < argc; i++) {
        if (strcmp(argv[i], "--") == 0)
            break;
        if (strcmp(argv[i], "--help") == 0 || strcmp(argv[i], "-h") == 0) {
            cli_print_usage(c, stdout);
            return finish_stdout(CLI_EXIT_OK);
        }
    }
    return finish_stdout(c->handler(argc - 1, argv + 1));
}
