/* Shared declarations of the collshift command-line front end: the command table, exit codes,
 * message helpers and the file-loading options every subcommand accepts. */
#ifndef CS_CLI_H
#define CS_CLI_H

#include <getopt.h>
#include <jansson.h>
#include <stdio.h>

#include <collshift/error.h>
#include <collshift/gatefit.h>
#include <collshift/io.h>

/* Exit codes (documented in `collshift --help`). */
enum {
    CLI_EXIT_OK = 0,        /* success */
    CLI_EXIT_ANALYSIS = 1,  /* the analysis did not succeed (e.g. a fit did not converge) */
    CLI_EXIT_USAGE = 2,     /* usage error: unknown command or option, bad option value */
    CLI_EXIT_DATA = 3       /* input or data error: unreadable or malformed file, unusable data */
};

/* A subcommand: handler gets argc/argv with argv[0] = the command name. */
typedef struct cli_command {
    const char *name;
    int (*handler)(int argc, char **argv);
    const char *summary;
    const char *const *usage; /* usage text printed by `collshift help NAME` and `NAME --help`, as
                                 NULL-terminated chunks (ISO C caps one string literal at 4095) */
} cli_command;

/* Handlers, one file each in src/cli/. */
int cmd_info(int argc, char **argv);
extern const char *const cmd_info_usage[];
int cmd_fit(int argc, char **argv);
extern const char *const cmd_fit_usage[];
int cmd_gate(int argc, char **argv);
extern const char *const cmd_gate_usage[];
int cmd_split(int, char **);
extern const char *const cmd_split_usage[];
int cmd_predict(int, char **);
extern const char *const cmd_predict_usage[];
int cmd_series(int, char **);
extern const char *const cmd_series_usage[];
int cmd_simulate(int, char **);
extern const char *const cmd_simulate_usage[];
int cmd_merge(int, char **);
extern const char *const cmd_merge_usage[];
int cmd_demo(int, char **);
extern const char *const cmd_demo_usage[];

/* Print a command's usage chunks to f. */
void cli_print_usage(const cli_command *c, FILE *f);

/* The command table (main.c). */
const cli_command *cli_find_command(const char *name);

/* Print "collshift: " + formatted message + newline to stderr. */
void cli_errorf(const char *fmt, ...)
#if defined(__GNUC__)
    __attribute__((format(printf, 1, 2)))
#endif
    ;
/* Print a library error as "collshift: 'FILE': line N: message"; returns the exit code it maps to. */
int cli_report(const cs_error *err);
/* Map a CS_* status to an exit code. */
int cli_exit_code(int status);

/* Loading options shared by every command that reads lab files. */
#define CLI_LOAD_OPTIONS_HELP \
    "File options (any command that reads files):\n" \
    "  --x COL, --y COL, --sigma COL   spectrum columns: 1-based number or header name\n" \
    "  --t COL, --i COL, --q COL       record columns: time, in-phase, quadrature\n" \
    "  --x-unit UNIT                   axis unit: Hz kHz MHz GHz THz rad/s cm^-1 nm A\n" \
    "  --t-unit UNIT                   time unit: s ms us ns ps\n" \
    "  --air                           wavelengths were measured in standard air (Edlen 1966)\n" \
    "  --y-density                     y is a spectral density per unit of the axis (Jacobian applied)\n" \
    "  --kind spectrum|record          what the file holds (default: decided from the axis)\n" \
    "  --format text|raw|npy|hdf5      file format (default: from magic bytes and extension)\n" \
    "  --delimiter C                   text delimiter: , ; tab space (default: detected)\n" \
    "  --raw TYPE                      raw binary: i8 i16 i32 f32 f64, or ci8 ci16 ci32 cf32 cf64 (I/Q)\n" \
    "  --sample-rate FREQ              sample rate, e.g. 250MHz (raw, npy, or text without time)\n" \
    "  --big-endian                    raw samples are big-endian\n" \
    "  --offset-bytes N                skip N bytes at the start of a raw file\n" \
    "  --scale X                       multiply raw samples by X (e.g. volts per count)\n" \
    "  --records N                     a raw file holds N shots back to back\n" \
    "  --t0 TIME                       time of the first sample (default 0)\n" \
    "  --dataset PATH                  HDF5 dataset with the samples (or the spectrum values)\n" \
    "  --x-dataset PATH                HDF5 dataset with a spectrum's frequency axis\n"

/* First option code used by the shared load options (subcommands use codes below it). */
#define CLI_LOAD_OPT_BASE 1000
/* The shared long options; terminated by a zero entry. A command copies them into its own table
 * with cli_merge_options. */
extern const struct option cli_load_longopts[];
/* Concatenate a command's options (own, terminated by a zero entry) with cli_load_longopts into
 * out (capacity cap entries). Returns 0, or -1 when out is too small. */
int cli_merge_options(const struct option *own, struct option *out, size_t cap);
/* Handle a shared load option (code >= CLI_LOAD_OPT_BASE). Returns 0 on success, or prints a usage
 * message and returns CLI_EXIT_USAGE. */
int cli_load_option(int code, const char *arg, cs_load_options *o);

/* A growing text buffer for tables and reports (p is NULL until the first write; free(p)). */
typedef struct cli_buf {
    char *p;
    size_t len, cap;
} cli_buf;
/* Append formatted text; on allocation failure the text is dropped (p keeps what it had). */
void cli_bprintf(cli_buf *b, const char *fmt, ...)
#if defined(__GNUC__)
    __attribute__((format(printf, 2, 3)))
#endif
    ;
/* A JSON number, or null for NaN/Inf (numbers that could not be computed are never numbers). */
json_t *cli_jnum(double v);
/* Strings from bytes (file names, paths, messages quoting them): JSON strings are Unicode text
 * (RFC 8259, section 7; jansson refuses anything else), but a file name is any bytes.
 * cli_utf8_valid: 1 when bytes are well-formed UTF-8 (Unicode Standard, Table 3-7).
 * cli_jstring: a JSON string of bytes; valid UTF-8 is kept as it is, and each maximal subpart of
 *   an ill-formed sequence becomes one U+FFFD REPLACEMENT CHARACTER (Unicode Standard, section
 *   3.9, "U+FFFD Substitution of Maximal Subparts"); NULL gives JSON null. Never fails.
 * cli_json_set_path: sets KEY to cli_jstring(bytes) and, only when bytes are not valid UTF-8,
 *   KEY_bytes to the exact bytes: valid UTF-8 kept, '%' and every byte of an ill-formed sequence
 *   written as %XX (two upper-case hex digits, as in RFC 3986 percent-encoding).
 * cli_json_get_path: the exact bytes of such a field back (KEY_bytes decoded when present, else
 *   KEY), malloc'd; NULL when the object has no string KEY or out of memory. */
int cli_utf8_valid(const char *bytes);
json_t *cli_jstring(const char *bytes);
void cli_json_set_path(json_t *obj, const char *key, const char *bytes);
char *cli_json_get_path(const json_t *obj, const char *key);
/* The fields of a gate-aware component (profile, centre, FWHM, rate or tau and peak time,
 * amplitude, phase, each with its error) set on the JSON object jc. */
void cli_gatefit_component_json(const cs_gatefit_component *c, json_t *jc);

/* Write text to PATH atomically (temporary file in the same folder, then rename), or to stdout
 * when path is "-". Returns 0, or prints a message and returns CLI_EXIT_DATA. */
int cli_write_text(const char *path, const char *text);

/* One entry of a series as the JSON object of 'series --json' (series_out.c; also a journal
 * line of --resume), and back (series_journal.c): series_entry_from_json fills *e (file and path are allocated; free
 * them) and returns 0, or -1 with a reason in *why. merge and --resume read entries with it. */
struct cs_series_entry;
json_t *series_entry_json(const struct cs_series_entry *e);
int series_entry_from_json(const json_t *o, struct cs_series_entry *e, const char **why);

/* The journal of `collshift series` (series_journal.c): one line per finished entry, flushed to
 * disk at once, read back by --resume; and the SIGINT/SIGTERM handling that stops a run. */
struct series_opts;
struct cs_series;
typedef struct series_journal {
    char *path;               /* NULL: no journal (free it) */
    int fd;                   /* -1: not open */
    int failed;               /* a write failed: journaling stopped, the run goes on */
    size_t written;           /* entries journaled by this run */
    int raise_sig;            /* test hook: raise this signal ... */
    size_t raise_after;       /* ... after this many entries of this run (0: never) */
} series_journal;
/* Open the journal (path: journal, else the first output naming a file + ".journal"; none when
 * neither) for a fresh run, or with resume read it, check its fingerprint, give its finished
 * entries to s (all but failed and partial ones with retry_failed) and append from there.
 * Returns 0, or prints a message and returns an exit code. */
int series_journal_open(series_journal *j, const struct series_opts *so, struct cs_series *s,
                        const char *journal, int resume, int retry_failed);
/* cs_series_params.on_entry: append the entry (ctx: the series_journal). */
void series_journal_entry(const struct cs_series_entry *e, void *ctx);
void series_journal_close(series_journal *j);
/* Read the test hook CS_SERIES_TEST_RAISE=INT:N or TERM:N (raise the signal after N entries). */
void series_journal_test_hook(series_journal *j);
/* SIGINT and SIGTERM stop a run (series_stop_requested turns nonzero) instead of killing it. */
void series_signals_catch(void);
void series_signals_release(void);
int series_stop_requested(void *ctx);
/* The signal that stopped the run, or 0. */
int series_signal_received(void);

#endif /* CS_CLI_H */
