/* Private interface of the delimited-text loader: its state and the steps shared by its sources. */
#ifndef CS_IO_TEXT_IMPL_H
#define CS_IO_TEXT_IMPL_H

#include <collshift/io.h>

#include "io_internal.h"

#include <stdio.h>

#define TXT_STEP_TOL 0.01               /* uniform sampling: relative tolerance of each step */
#define NOCOL ((size_t)-1)

/* Roles of columns. */
enum { R_NONE = 0, R_X, R_Y, R_SIGMA, R_T, R_I, R_Q, R_COUNT };

/* How the kind was decided (the rule number of the comment in io_text_columns.c). */
enum { BY_KIND = 1, BY_OPTIONS, BY_HEADER, BY_META_KIND, BY_META_RATE, BY_UNIT_OPTION,
       BY_ONE_COLUMN, BY_DEFAULT };

typedef struct col_name {
    char *name;            /* as in the header, trimmed, quotes removed */
    char *base;            /* name without its unit */
    const cs_unit *unit;   /* unit of the name, or NULL */
} col_name;

typedef struct txt {
    const char *path;
    const cs_load_options *o;
    cs_loaded *out;
    cs_error *err;

    /* reader */
    FILE *f;
    char *buf;             /* TXT_BUF_BYTES + 1 */
    size_t len, pos, scan; /* valid bytes, start of the next line, where to resume memchr */
    int eof;
    long line;             /* physical line number of the current line */
    size_t slow_rows;      /* data rows read the general way (io_text.c, run) */
    int no_fast;           /* 1: the fast way (fast_rows) is no longer tried */

    /* table shape */
    char delim;            /* 0 undecided; ' ' runs of blanks */
    size_t ncols;          /* 0 until the first non-comment line */
    long header_line;      /* 0 when the file has no header */
    col_name *hdr;
    char *hdr_block;
    unsigned char *role;   /* ncols roles */

    /* decision */
    int decided, by;
    cs_kind kind;
    size_t cx, cy, cs, ct, ci, cq;
    int is_complex, has_time;
    const cs_unit *xunit;
    int x_assumed, x_positive;
    double tscale, toffset;
    const cs_unit *tunit;
    int meta_note_done;
    int meta_repeat_note_done;     /* the note about a repeated metadata key was given */
    cs_meta meta;

    /* data */
    size_t n, cap;
    double *a, *b, *c;     /* spectrum: x, y, sigma; record: samples (a) */
    long first_data_line, last_data_line;
    double prev_x;
    long prev_line;
    int dir;               /* spectrum axis direction: +1, -1, 0 unknown yet */
    double t_first, t_prev, step1, dmin, dmax;
    double step1_tol;      /* TXT_STEP_TOL * step1 */
    long step1_line, dmin_line, dmax_line;
} txt;

/* ---------------------------------------------------------------- io_text.c */

/* Set c->err to the formatted message with the file and line (-1: none); returns code. */
CS_IO_INTERNAL int io_text_fail(txt *c, int code, long line, const char *fmt, ...)
#if defined(__GNUC__)
    __attribute__((format(printf, 4, 5)))
#endif
    ;

/* An error from another module (no file, maybe no line): add ours. Returns rc. */
CS_IO_INTERNAL int io_text_adopt(txt *c, int rc, long line);

/* ---------------------------------------------------------------- io_text_columns.c */

/* Decide kind and columns at the first data row (the rules at the top of io_text_columns.c):
 * sets c->kind, the column indices, c->role, units and c->decided. */
CS_IO_INTERNAL int io_text_decide(txt *c, long line);

/* Metadata "kind": CS_KIND_AUTO when absent; -1 when it holds something else (then *line is the
 * line of the entry). */
CS_IO_INTERNAL int io_text_meta_kind(const txt *c, long *line);

/* ---------------------------------------------------------------- io_text_finish.c */

/* After the last line: check the row count, then make the spectrum or record of c->out. */
CS_IO_INTERNAL int io_text_finish(txt *c);

/* ---------------------------------------------------------------- io_number.c */

/* [b, e) as a plain decimal number (sign, digits, '.', exponent; at most 19 significant
 * digits; finite): 1 with *v bit-identical to strtod's ("C" locale, rounding to nearest), or 0
 * when it does not decide - anything else, for the caller to give to strtod. */
CS_IO_INTERNAL int cs_decimal_to_double(const char *b, const char *e, double *v);

#endif /* CS_IO_TEXT_IMPL_H */
