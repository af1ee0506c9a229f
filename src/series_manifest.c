/* Reading a campaign manifest: CSV with a header naming the file, density and optional columns. */
#include <collshift/series.h>

#include <ctype.h>
#include <errno.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <strings.h>

enum { COL_FILE = 0, COL_DENSITY, COL_TEMPERATURE, COL_THICKNESS, COL_SHOT, COL_ERA, COL_REFERENCE, NCOL };

static const char *const col_names[NCOL] = {"file", "density", "temperature", "thickness", "shot",
                                            "era", "reference"};
static const cs_dim col_dims[NCOL] = {CS_DIM_UNKNOWN, CS_DIM_DENSITY, CS_DIM_TEMPERATURE,
                                      CS_DIM_LENGTH, CS_DIM_UNKNOWN, CS_DIM_UNKNOWN,
                                      CS_DIM_FREQUENCY};

static const char *const col_example_unit[NCOL] = {"", "cm^-3", "K", "um", "", "", "Hz"};

static char *dupstr(const char *s)
{
    size_t n = strlen(s) + 1;
    char *d = malloc(n);
    if (d)
        memcpy(d, s, n);
    return d;
}

/* Trim spaces in place. */
static char *trim(char *s)
{
    while (isspace((unsigned char)*s))
        s++;
    size_t n = strlen(s);
    while (n && isspace((unsigned char)s[n - 1]))
        s[--n] = '\0';
    return s;
}

/* Split one line (modified in place) into at most max fields, RFC 4180: fields are separated by
 * commas; a field that starts with a double quote (after spaces) runs to the next quote that is
 * not doubled, may hold commas, and has its doubled quotes made single; spaces around a field
 * are dropped (inside quotes they are kept). The line holds no line break: a quote that is not
 * closed on it is refused (a field spanning lines would be a file name with a line break).
 * line_off: byte offset of the line in the manifest, for messages. Returns the number of fields
 * (max + 1: too many), or a negative CS_* code with err filled. */
static long split_fields(char *line, char **f, size_t max, const char *mname, long ln, long long line_off,
                         cs_error *err)
{
    size_t n = 0;
    char *p = line;
    for (;;) {
        while (isspace((unsigned char)*p))
            p++;
        char *field;
        int quoted = *p == '"';
        if (quoted) {
            char *open = p;
            field = ++p;
            char *w = p;
            for (;;) {
                if (*p == '\0')
                    return cs_error_set(err, CS_EFORMAT, mname, ln, line_off + (open - line),
                                        "field %zu: the quote opened at column %ld is not closed on this "
                                        "line (a line break inside a quoted field is not supported)",
                                        n + 1, (long)(open - line) + 1);
                if (*p == '"') {
                    if (p[1] != '"')
                        break;
                    p++;   /* "" stands for one quote */
                }
                *w++ = *p++;
            }
            p++;   /* past the closing quote */
            *w = '\0';   /* w < p: writing here never touches what is still to be read */
            while (isspace((unsigned char)*p))
                p++;
            if (*p != ',' && *p != '\0')
                return cs_error_set(err, CS_EFORMAT, mname, ln, line_off + (p - line),
                                    "field %zu: text after the closing quote at column %ld (quote the "
                                    "whole field and double the quotes inside it)", n + 1, (long)(p - line) + 1);
        } else {
            field = p;
            while (*p && *p != ',') {
                if (*p == '"')
                    return cs_error_set(err, CS_EFORMAT, mname, ln, line_off + (p - line),
                                        "field %zu: a double quote at column %ld inside an unquoted field "
                                        "(quote the whole field and double the quotes inside it)",
                                        n + 1, (long)(p - line) + 1);
                p++;
            }
        }
        int last = *p != ',';
        if (!last)
            *p++ = '\0';
        if (n < max)
            f[n] = quoted ? field : trim(field);
        n++;
        if (last)
            break;
    }
    return n > max ? (long)max + 1 : (long)n;
}

void cs_series_free(cs_series *s)
{
    if (!s)
        return;
    for (size_t i = 0; i < s->n; i++) {
        free(s->e[i].file);
        free(s->e[i].path);
    }
    free(s->e);
    free(s->manifest);
    free(s->dir);
    free(s);
}

#define MAX_FIELDS 64

static int parse_value(const char *mname, long ln, int col, const char *text, const cs_unit *hunit,
                       double *out, cs_error *err)
{
    cs_error e2;
    cs_error_clear(&e2);
    int rc = cs_quantity_parse(text, col_dims[col], hunit ? hunit->name : NULL, out, NULL, NULL, &e2);
    if (rc == CS_EUNIT && !hunit && strchr(text, ' ') == NULL) {
        char *end;
        errno = 0;
        (void)strtod(text, &end);
        if (end != text && *end == '\0')
            return cs_error_set(err, CS_EUNIT, mname, ln, -1,
                                "%s '%s' has no unit: give it in the header ('%s_%s') or in the value",
                                col_names[col], text, col_names[col], col_example_unit[col]);
    }
    if (rc != CS_OK)
        return cs_error_set(err, rc, mname, ln, -1, "%s: %s", col_names[col], e2.msg);
    if (col != COL_REFERENCE && !(*out > 0))
        return cs_error_set(err, CS_ERANGE, mname, ln, -1, "%s '%s' must be positive", col_names[col], text);
    return CS_OK;
}

static int parse_row(const char *mname, long ln, char **f, size_t nf, const int *colmap,
                     const cs_unit *const *units, const char *dir, cs_series_entry *e, cs_error *err)
{
    e->line = ln;
    e->density_m3 = e->temperature_K = e->thickness_m = e->ref_hz = NAN;
    e->shot = -1;
    e->era = -1;
    for (size_t k = 0; k < nf; k++) {
        int col = colmap[k];
        const char *t = f[k];
        if (col < 0 || !t[0])
            continue;
        switch (col) {
        case COL_FILE:
            e->file = dupstr(t);
            if (!e->file)
                return cs_error_set(err, CS_ENOMEM, mname, ln, -1, "out of memory");
            break;
        case COL_SHOT: {
            char *end;
            errno = 0;
            long v = strtol(t, &end, 10);
            if (end == t || *end || errno == ERANGE || v < 0)
                return cs_error_set(err, CS_EINVAL, mname, ln, -1,
                                    "shot '%s': expected a whole number >= 0", t);
            e->shot = v;
            break;
        }
        case COL_ERA:
            if (strcasecmp(t, "burst") == 0)
                e->era = CS_SPLIT_BURST;
            else if (strcasecmp(t, "tail") == 0)
                e->era = CS_SPLIT_TAIL;
            else
                return cs_error_set(err, CS_EINVAL, mname, ln, -1, "era '%s': expected burst or tail", t);
            break;
        default: {
            double *dst = col == COL_DENSITY ? &e->density_m3 : col == COL_TEMPERATURE ? &e->temperature_K
                        : col == COL_THICKNESS ? &e->thickness_m : &e->ref_hz;
            int rc = parse_value(mname, ln, col, t, units[k], dst, err);
            if (rc != CS_OK)
                return rc;
        }
        }
    }
    if (!e->file)
        return cs_error_set(err, CS_EFORMAT, mname, ln, -1, "the file name is empty");
    if (e->file[0] == '/' || !dir || strcmp(dir, ".") == 0) {
        e->path = dupstr(e->file);
    } else {
        size_t n = strlen(dir) + strlen(e->file) + 2;
        e->path = malloc(n);
        if (e->path)
            snprintf(e->path, n, "%s/%s", dir, e->file);
    }
    if (!e->path)
        return cs_error_set(err, CS_ENOMEM, mname, ln, -1, "out of memory");
    return CS_OK;
}

int cs_series_manifest_parse(const char *text, const char *name, const char *dir, cs_series **out,
                             cs_error *err)
{
    if (!text || !out)
        return cs_error_set(err, CS_EINVAL, name, -1, -1, "no manifest text or no output");
    *out = NULL;
    const char *mname = name ? name : "manifest";
    cs_series *s = calloc(1, sizeof *s);
    char *buf = dupstr(text);
    if (!s || !buf) {
        free(s);
        free(buf);
        return cs_error_set(err, CS_ENOMEM, mname, -1, -1, "out of memory");
    }
    s->manifest = dupstr(mname);
    s->dir = dupstr(dir ? dir : ".");
    int rc = (s->manifest && s->dir) ? CS_OK : cs_error_set(err, CS_ENOMEM, mname, -1, -1, "out of memory");
    size_t cap = 0, nheader = 0;
    int colmap[MAX_FIELDS];
    const cs_unit *units[MAX_FIELDS];
    int have_header = 0;
    long ln = 0;
    char *save = buf;
    while (rc == CS_OK && save) {
        char *line = save;
        char *nl = strchr(line, '\n');
        if (nl) {
            *nl = '\0';
            save = nl + 1;
        } else {
            save = NULL;
        }
        ln++;
        size_t len = strlen(line);
        if (len && line[len - 1] == '\r')
            line[len - 1] = '\0';
        const char *t = line;
        while (isspace((unsigned char)*t))
            t++;
        if (!t[0] || t[0] == '#')
            continue;
        char *f[MAX_FIELDS];
        long nfl = split_fields(line, f, MAX_FIELDS, mname, ln, (long long)(line - buf), err);
        if (nfl < 0) {
            rc = (int)nfl;
            break;
        }
        size_t nf = (size_t)nfl;
        if (nf > MAX_FIELDS) {
            rc = cs_error_set(err, CS_EFORMAT, mname, ln, -1, "more than %d columns", MAX_FIELDS);
            break;
        }
        if (!have_header) {
            int have_file = 0;
            for (size_t k = 0; k < nf; k++) {
                char base[64];
                const cs_unit *u = cs_unit_from_column_name(f[k], base, sizeof base);
                colmap[k] = -1;
                units[k] = NULL;
                for (int c = 0; c < NCOL; c++) {
                    if (strcasecmp(base, col_names[c]) == 0) {
                        for (size_t j = 0; j < k; j++)
                            if (colmap[j] == c)
                                rc = cs_error_set(err, CS_EFORMAT, mname, ln, -1,
                                                  "column '%s' is given twice", col_names[c]);
                        colmap[k] = c;
                        if (u && col_dims[c] != CS_DIM_UNKNOWN && u->dim != col_dims[c])
                            rc = cs_error_set(err, CS_EUNIT, mname, ln, -1,
                                              "column '%s': unit '%s' is not a %s", f[k], u->name,
                                              cs_dim_name(col_dims[c]));
                        else if (u && col_dims[c] != CS_DIM_UNKNOWN)
                            units[k] = u;
                        if (c == COL_FILE)
                            have_file = 1;
                    }
                }
            }
            if (rc == CS_OK && !have_file)
                rc = cs_error_set(err, CS_EFORMAT, mname, ln, -1,
                                  "the header has no 'file' column (expected e.g. 'file,density_cm^-3')");
            nheader = nf;
            have_header = 1;
            continue;
        }
        if (nf > nheader) {
            rc = cs_error_set(err, CS_EFORMAT, mname, ln, -1, "%zu fields, but the header has %zu", nf, nheader);
            break;
        }
        if (s->n == cap) {
            size_t nc = cap ? 2 * cap : 16;
            cs_series_entry *ne = realloc(s->e, nc * sizeof *ne);
            if (!ne) {
                rc = cs_error_set(err, CS_ENOMEM, mname, ln, -1, "out of memory");
                break;
            }
            s->e = ne;
            cap = nc;
        }
        cs_series_entry *e = &s->e[s->n++];
        memset(e, 0, sizeof *e);
        e->index = s->n - 1;
        rc = parse_row(mname, ln, f, nf, colmap, units, s->dir, e, err);
    }
    if (rc == CS_OK && !have_header)
        rc = cs_error_set(err, CS_EFORMAT, mname, -1, -1, "empty manifest: no header row");
    else if (rc == CS_OK && s->n == 0)
        rc = cs_error_set(err, CS_EFORMAT, mname, -1, -1, "the manifest lists no files");
    s->total = s->n;
    free(buf);
    if (rc != CS_OK) {
        cs_series_free(s);
        return rc;
    }
    *out = s;
    return CS_OK;
}

int cs_series_manifest_load(const char *path, cs_series **out, cs_error *err)
{
    if (!path || !out)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "no manifest path or no output");
    *out = NULL;
    FILE *fp = fopen(path, "rb");
    if (!fp)
        return cs_error_set(err, CS_EIO, path, -1, -1, "cannot open: %s", strerror(errno));
    size_t cap = 4096, n = 0;
    char *text = malloc(cap);
    int rc = CS_OK;
    while (text) {
        if (n + 1 >= cap) {
            char *nt = realloc(text, cap * 2);
            if (!nt) {
                free(text);
                text = NULL;
                break;
            }
            text = nt;
            cap *= 2;
        }
        size_t got = fread(text + n, 1, cap - 1 - n, fp);
        n += got;
        if (got == 0)
            break;
    }
    if (!text)
        rc = cs_error_set(err, CS_ENOMEM, path, -1, -1, "out of memory");
    else if (ferror(fp))
        rc = cs_error_set(err, CS_EIO, path, -1, -1, "read error");
    fclose(fp);
    if (rc != CS_OK) {
        free(text);
        return rc;
    }
    text[n] = '\0';
    if (memchr(text, '\0', n))
        rc = cs_error_set(err, CS_EFORMAT, path, -1, -1, "not a text file (NUL byte)");
    char *dir = dupstr(path);
    if (rc == CS_OK && !dir)
        rc = cs_error_set(err, CS_ENOMEM, path, -1, -1, "out of memory");
    if (rc == CS_OK) {
        char *slash = strrchr(dir, '/');
        if (slash == dir)
            dir[1] = '\0';
        else if (slash)
            *slash = '\0';
        else
            strcpy(dir, ".");
        rc = cs_series_manifest_parse(text, path, dir, out, err);
    }
    free(dir);
    free(text);
    return rc;
}
