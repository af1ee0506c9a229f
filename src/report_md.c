/* Run reports: inputs with checksums and sections of paragraphs, fields, values with errors,
 * tables and figure links, rendered as Markdown and as JSON (Jansson) with the same content. */
#include <collshift/report.h>

#include <math.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <strings.h>
#include <sys/stat.h>

#include <jansson.h>

typedef enum item_type { IT_TEXT, IT_FIELD, IT_VALUE, IT_TABLE, IT_FIGURE } item_type;

typedef struct item {
    item_type type;
    char *name;      /* field / value name, table caption, figure caption */
    char *text;      /* paragraph, field text, formatted value, figure path */
    double value, err;
    cs_dim dim;
    size_t ncol, nrow;
    char **cells;    /* table: ncol header cells, then nrow * ncol cells */
} item;

typedef struct section {
    char *heading;
    size_t n, cap;
    item *it;
} section;

typedef struct input {
    char *role, *path;
    long long bytes;
    char sha[65];
} input;

struct cs_report {
    char *title;
    size_t nin, capin;
    input *in;
    size_t nsec, capsec;
    section *sec;
};

static char *dupstr(const char *s)
{
    size_t n = strlen(s ? s : "") + 1;
    char *d = malloc(n);
    if (d)
        memcpy(d, s ? s : "", n);
    return d;
}

static int grow(void **p, size_t *cap, size_t need, size_t size)
{
    if (need <= *cap)
        return 0;
    size_t c = *cap ? *cap * 2 : 8;
    while (c < need)
        c *= 2;
    void *q = realloc(*p, c * size);
    if (!q)
        return -1;
    *p = q;
    *cap = c;
    return 0;
}

cs_report *cs_report_alloc(const char *title)
{
    cs_report *r = calloc(1, sizeof *r);
    if (!r)
        return NULL;
    r->title = dupstr(title ? title : "collshift report");
    if (!r->title) {
        free(r);
        return NULL;
    }
    return r;
}

static void item_release(item *it)
{
    free(it->name);
    free(it->text);
    if (it->cells)
        for (size_t i = 0; i < it->ncol * (it->nrow + 1); i++)
            free(it->cells[i]);
    free(it->cells);
}

void cs_report_free(cs_report *r)
{
    if (!r)
        return;
    for (size_t i = 0; i < r->nin; i++) {
        free(r->in[i].role);
        free(r->in[i].path);
    }
    free(r->in);
    for (size_t s = 0; s < r->nsec; s++) {
        for (size_t i = 0; i < r->sec[s].n; i++)
            item_release(&r->sec[s].it[i]);
        free(r->sec[s].it);
        free(r->sec[s].heading);
    }
    free(r->sec);
    free(r->title);
    free(r);
}

int cs_report_add_input(cs_report *r, const char *role, const char *path, cs_error *err)
{
    if (!r || !path)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "report: NULL argument");
    char sha[65];
    int rc = cs_sha256_file(path, sha, err);
    if (rc != CS_OK)
        return rc;
    struct stat st;
    long long bytes = stat(path, &st) == 0 ? (long long)st.st_size : -1;
    if (grow((void **)&r->in, &r->capin, r->nin + 1, sizeof *r->in) != 0)
        return cs_error_set(err, CS_ENOMEM, NULL, -1, -1, "out of memory");
    input *in = &r->in[r->nin];
    in->role = dupstr(role ? role : "input");
    in->path = dupstr(path);
    if (!in->role || !in->path) {
        free(in->role);
        free(in->path);
        return cs_error_set(err, CS_ENOMEM, NULL, -1, -1, "out of memory");
    }
    in->bytes = bytes;
    memcpy(in->sha, sha, sizeof sha);
    r->nin++;
    return CS_OK;
}

size_t cs_report_ninputs(const cs_report *r)
{
    return r ? r->nin : 0;
}

const char *cs_report_input_sha256(const cs_report *r, size_t i)
{
    return r && i < r->nin ? r->in[i].sha : NULL;
}

int cs_report_section(cs_report *r, const char *heading)
{
    if (!r)
        return CS_EINVAL;
    if (grow((void **)&r->sec, &r->capsec, r->nsec + 1, sizeof *r->sec) != 0)
        return CS_ENOMEM;
    section *s = &r->sec[r->nsec];
    memset(s, 0, sizeof *s);
    s->heading = dupstr(heading ? heading : "");
    if (!s->heading)
        return CS_ENOMEM;
    r->nsec++;
    return CS_OK;
}

/* A new zeroed item at the end of the current section (one is opened when there is none). */
static item *new_item(cs_report *r, item_type t)
{
    if (r->nsec == 0 && cs_report_section(r, "") != CS_OK)
        return NULL;
    section *s = &r->sec[r->nsec - 1];
    if (grow((void **)&s->it, &s->cap, s->n + 1, sizeof *s->it) != 0)
        return NULL;
    item *it = &s->it[s->n++];
    memset(it, 0, sizeof *it);
    it->type = t;
    it->value = it->err = NAN;
    return it;
}

/* Undo the last item after a failed copy. */
static int drop_last(cs_report *r)
{
    section *s = &r->sec[r->nsec - 1];
    item_release(&s->it[--s->n]);
    return CS_ENOMEM;
}

int cs_report_text(cs_report *r, const char *fmt, ...)
{
    if (!r || !fmt)
        return CS_EINVAL;
    va_list ap;
    va_start(ap, fmt);
    int len = vsnprintf(NULL, 0, fmt, ap);
    va_end(ap);
    if (len < 0)
        return CS_EINVAL;
    char *t = malloc((size_t)len + 1);
    if (!t)
        return CS_ENOMEM;
    va_start(ap, fmt);
    vsnprintf(t, (size_t)len + 1, fmt, ap);
    va_end(ap);
    item *it = new_item(r, IT_TEXT);
    if (!it) {
        free(t);
        return CS_ENOMEM;
    }
    it->text = t;
    return CS_OK;
}

/* A cell or field holding only a printf'd non-finite number ("nan", "-nan", "inf", "-inf",
 * any case, optionally followed by a unit) stands for a number that could not be computed: it is
 * stored as "undefined", so the words never reach a report. */
static const char *defined_text(const char *t)
{
    const char *p = t;
    if (*p == '-' || *p == '+')
        p++;
    size_t k = 0;
    if (strncasecmp(p, "nan", 3) == 0)
        k = 3;
    else if (strncasecmp(p, "infinity", 8) == 0)
        k = 8;
    else if (strncasecmp(p, "inf", 3) == 0)
        k = 3;
    if (k == 0 || (p[k] != '\0' && p[k] != ' '))
        return t;
    return "undefined";
}

int cs_report_field(cs_report *r, const char *name, const char *text)
{
    if (!r || !name || !text)
        return CS_EINVAL;
    item *it = new_item(r, IT_FIELD);
    if (!it)
        return CS_ENOMEM;
    it->name = dupstr(name);
    it->text = dupstr(defined_text(text));
    return it->name && it->text ? CS_OK : drop_last(r);
}

int cs_report_value(cs_report *r, const char *name, double value, double err, cs_dim dim)
{
    if (!r || !name)
        return CS_EINVAL;
    item *it = new_item(r, IT_VALUE);
    if (!it)
        return CS_ENOMEM;
    char buf[128];
    cs_format_value_err(value, err, dim, buf, sizeof buf);
    it->name = dupstr(name);
    it->text = dupstr(buf);
    it->value = value;
    it->err = (isfinite(err) && err > 0) ? err : NAN;
    it->dim = dim;
    return it->name && it->text ? CS_OK : drop_last(r);
}

int cs_report_table(cs_report *r, const char *caption, size_t ncol, const char *const *columns)
{
    if (!r || ncol == 0 || !columns)
        return CS_EINVAL;
    item *it = new_item(r, IT_TABLE);
    if (!it)
        return CS_ENOMEM;
    it->name = caption ? dupstr(caption) : NULL;
    it->ncol = ncol;
    it->cells = calloc(ncol, sizeof *it->cells);
    if (!it->cells || (caption && !it->name))
        return drop_last(r);
    for (size_t j = 0; j < ncol; j++)
        if (!(it->cells[j] = dupstr(columns[j])))
            return drop_last(r);
    return CS_OK;
}

int cs_report_row(cs_report *r, const char *const *cells)
{
    if (!r || !cells || r->nsec == 0 || r->sec[r->nsec - 1].n == 0)
        return CS_EINVAL;
    section *s = &r->sec[r->nsec - 1];
    item *it = &s->it[s->n - 1];
    if (it->type != IT_TABLE)
        return CS_EINVAL;
    char **c = realloc(it->cells, it->ncol * (it->nrow + 2) * sizeof *c);
    if (!c)
        return CS_ENOMEM;
    it->cells = c;
    char **row = c + it->ncol * (it->nrow + 1);
    for (size_t j = 0; j < it->ncol; j++) {
        row[j] = dupstr(defined_text(cells[j]));
        if (!row[j]) {
            for (size_t k = 0; k < j; k++)
                free(row[k]);
            return CS_ENOMEM;
        }
    }
    it->nrow++;
    return CS_OK;
}

int cs_report_figure(cs_report *r, const char *caption, const char *path)
{
    if (!r || !path)
        return CS_EINVAL;
    item *it = new_item(r, IT_FIGURE);
    if (!it)
        return CS_ENOMEM;
    it->name = dupstr(caption ? caption : path);
    it->text = dupstr(path);
    return it->name && it->text ? CS_OK : drop_last(r);
}

/* ---------------------------------------------------------------- Markdown */

typedef struct sbuf {
    char *s;
    size_t len, cap;
    int failed;
} sbuf;

static void sb_add(sbuf *b, const char *fmt, ...)
#if defined(__GNUC__)
    __attribute__((format(printf, 2, 3)))
#endif
    ;

static void sb_add(sbuf *b, const char *fmt, ...)
{
    if (b->failed)
        return;
    va_list ap;
    va_start(ap, fmt);
    int len = vsnprintf(NULL, 0, fmt, ap);
    va_end(ap);
    if (len < 0 || grow((void **)&b->s, &b->cap, b->len + (size_t)len + 1, 1) != 0) {
        b->failed = 1;
        return;
    }
    va_start(ap, fmt);
    vsnprintf(b->s + b->len, (size_t)len + 1, fmt, ap);
    va_end(ap);
    b->len += (size_t)len;
}

/* A table cell: '|' escaped, line breaks as spaces. */
static void sb_cell(sbuf *b, const char *t)
{
    sb_add(b, " ");
    for (const char *p = t; *p; p++) {
        if (*p == '|')
            sb_add(b, "\\|");
        else if (*p == '\n' || *p == '\r')
            sb_add(b, " ");
        else
            sb_add(b, "%c", *p);
    }
    sb_add(b, " |");
}

static int is_image(const char *path)
{
    size_t n = strlen(path);
    if (n < 4)
        return 0;
    const char *e = path + n - 4;
    return strcmp(e, ".png") == 0 || strcmp(e, ".PNG") == 0 || strcmp(e, ".svg") == 0 ||
           strcmp(e, ".SVG") == 0;
}

char *cs_report_markdown(const cs_report *r)
{
    if (!r)
        return NULL;
    sbuf b = {0};
    sb_add(&b, "# %s\n", r->title);
    if (r->nin > 0) {
        sb_add(&b, "\n## Inputs\n\n| role | file | bytes | SHA-256 |\n|---|---|---|---|\n");
        for (size_t i = 0; i < r->nin; i++) {
            sb_add(&b, "|");
            sb_cell(&b, r->in[i].role);
            sb_cell(&b, r->in[i].path);
            sb_add(&b, " %lld | `%s` |\n", r->in[i].bytes, r->in[i].sha);
        }
    }
    for (size_t s = 0; s < r->nsec; s++) {
        const section *sec = &r->sec[s];
        if (sec->heading[0])
            sb_add(&b, "\n## %s\n", sec->heading);
        item_type prev = IT_TEXT;
        for (size_t i = 0; i < sec->n; i++) {
            const item *it = &sec->it[i];
            int list = it->type == IT_FIELD || it->type == IT_VALUE;
            if (!(list && i > 0 && (prev == IT_FIELD || prev == IT_VALUE)))
                sb_add(&b, "\n");
            switch (it->type) {
            case IT_TEXT: sb_add(&b, "%s\n", it->text); break;
            case IT_FIELD:
            case IT_VALUE: sb_add(&b, "- **%s**: %s\n", it->name, it->text); break;
            case IT_FIGURE:
                sb_add(&b, is_image(it->text) ? "![%s](%s)\n" : "[%s](%s)\n", it->name, it->text);
                break;
            case IT_TABLE:
                if (it->name)
                    sb_add(&b, "%s\n\n", it->name);
                for (size_t row = 0; row <= it->nrow; row++) {
                    sb_add(&b, "|");
                    for (size_t j = 0; j < it->ncol; j++)
                        sb_cell(&b, it->cells[row * it->ncol + j]);
                    sb_add(&b, "\n");
                    if (row == 0) {
                        sb_add(&b, "|");
                        for (size_t j = 0; j < it->ncol; j++)
                            sb_add(&b, "---|");
                        sb_add(&b, "\n");
                    }
                }
                break;
            }
            prev = it->type;
        }
    }
    if (b.failed) {
        free(b.s);
        return NULL;
    }
    return b.s;
}

/* ---------------------------------------------------------------- JSON */

static json_t *jnum(double x)
{
    return isfinite(x) ? json_real(x) : json_null();
}

static json_t *item_json(const item *it)
{
    json_t *o = json_object();
    switch (it->type) {
    case IT_TEXT:
        json_object_set_new(o, "type", json_string("text"));
        json_object_set_new(o, "text", json_string(it->text));
        break;
    case IT_FIELD:
        json_object_set_new(o, "type", json_string("field"));
        json_object_set_new(o, "name", json_string(it->name));
        json_object_set_new(o, "text", json_string(it->text));
        break;
    case IT_VALUE: {
        const char *u = cs_dim_si_symbol(it->dim);
        json_object_set_new(o, "type", json_string("value"));
        json_object_set_new(o, "name", json_string(it->name));
        json_object_set_new(o, "value", jnum(it->value));
        json_object_set_new(o, "error", jnum(it->err));
        json_object_set_new(o, "unit", json_string(it->dim == CS_DIM_DIMENSIONLESS || !u ? "" : u));
        json_object_set_new(o, "text", json_string(it->text));
        break;
    }
    case IT_TABLE: {
        json_object_set_new(o, "type", json_string("table"));
        json_object_set_new(o, "caption", it->name ? json_string(it->name) : json_null());
        json_t *cols = json_array();
        for (size_t j = 0; j < it->ncol; j++)
            json_array_append_new(cols, json_string(it->cells[j]));
        json_object_set_new(o, "columns", cols);
        json_t *rows = json_array();
        for (size_t row = 1; row <= it->nrow; row++) {
            json_t *a = json_array();
            for (size_t j = 0; j < it->ncol; j++)
                json_array_append_new(a, json_string(it->cells[row * it->ncol + j]));
            json_array_append_new(rows, a);
        }
        json_object_set_new(o, "rows", rows);
        break;
    }
    case IT_FIGURE:
        json_object_set_new(o, "type", json_string("figure"));
        json_object_set_new(o, "caption", json_string(it->name));
        json_object_set_new(o, "path", json_string(it->text));
        break;
    }
    return o;
}

char *cs_report_json(const cs_report *r)
{
    if (!r)
        return NULL;
    json_t *root = json_object();
    json_object_set_new(root, "title", json_string(r->title));
    json_t *ins = json_array();
    for (size_t i = 0; i < r->nin; i++) {
        json_t *o = json_object();
        json_object_set_new(o, "role", json_string(r->in[i].role));
        json_object_set_new(o, "path", json_string(r->in[i].path));
        json_object_set_new(o, "bytes", json_integer((json_int_t)r->in[i].bytes));
        json_object_set_new(o, "sha256", json_string(r->in[i].sha));
        json_array_append_new(ins, o);
    }
    json_object_set_new(root, "inputs", ins);
    json_t *secs = json_array();
    for (size_t s = 0; s < r->nsec; s++) {
        json_t *o = json_object();
        json_object_set_new(o, "heading", json_string(r->sec[s].heading));
        json_t *items = json_array();
        for (size_t i = 0; i < r->sec[s].n; i++)
            json_array_append_new(items, item_json(&r->sec[s].it[i]));
        json_object_set_new(o, "items", items);
        json_array_append_new(secs, o);
    }
    json_object_set_new(root, "sections", secs);
    char *text = json_dumps(root, JSON_INDENT(2) | JSON_PRESERVE_ORDER | JSON_REAL_PRECISION(17));
    json_decref(root);
    if (!text)
        return NULL;
    /* json_dumps' memory comes from Jansson's allocator (malloc by default): copy with a newline */
    size_t n = strlen(text);
    char *out = malloc(n + 2);
    if (out) {
        memcpy(out, text, n);
        out[n] = '\n';
        out[n + 1] = '\0';
    }
    free(text);
    return out;
}

/* ---------------------------------------------------------------- writing */

int cs_report_check_output(const cs_report *r, const char *path, cs_error *err)
{
    if (!r || !path)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "report: NULL argument");
    struct stat so;
    int have = stat(path, &so) == 0;
    for (size_t i = 0; i < r->nin; i++) {
        struct stat si;
        int same = strcmp(path, r->in[i].path) == 0;
        if (!same && have && stat(r->in[i].path, &si) == 0)
            same = si.st_dev == so.st_dev && si.st_ino == so.st_ino;
        if (same)
            return cs_error_set(err, CS_EINVAL, path, -1, -1,
                                "refusing to overwrite the input '%s'", r->in[i].path);
    }
    return CS_OK;
}

static int write_text(const cs_report *r, const char *path, char *text, cs_error *err)
{
    if (!text)
        return cs_error_set(err, CS_ENOMEM, path, -1, -1, "out of memory");
    int rc = cs_report_check_output(r, path, err);
    if (rc == CS_OK)
        rc = cs_write_atomic(path, text, strlen(text), err);
    free(text);
    return rc;
}

int cs_report_write(const cs_report *r, const char *md_path, const char *json_path, cs_error *err)
{
    if (!r)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "report: NULL argument");
    int rc = CS_OK;
    if (md_path)
        rc = write_text(r, md_path, cs_report_markdown(r), err);
    if (rc == CS_OK && json_path)
        rc = write_text(r, json_path, cs_report_json(r), err);
    return rc;
}
