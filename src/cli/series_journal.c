/* `collshift series`: the journal of finished entries (--journal, --resume, --retry-failed), an
 * entry's JSON read back (also for merge), and the SIGINT/SIGTERM handling that stops a run. */
#include "cli.h"
#include "series_out.h"

#include <collshift/series.h>

#include <errno.h>
#include <fcntl.h>
#include <math.h>
#include <signal.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>

/* 1 when an output option names a file (not absent, not standard output). */
static int names_file(const char *path)
{
    return path && path[0] && strcmp(path, "-") != 0;
}

/* ---- an entry's JSON, read back ------------------------------------------------------------ */

static double jnum_or_nan(const json_t *o, const char *key)
{
    const json_t *v = json_object_get(o, key);
    return json_is_number(v) ? json_number_value(v) : NAN;
}

static const char *jstr(const json_t *o, const char *key)
{
    return json_string_value(json_object_get(o, key));
}

static void line_from_json(const json_t *o, cs_series_line *l)
{
    l->ok = json_is_object(o);
    if (!l->ok) {
        l->center_hz = l->center_hz_err = l->shift_hz = l->shift_hz_err = NAN;
        l->fwhm_hz = l->fwhm_hz_err = l->area = l->area_err = NAN;
        return;
    }
    l->center_hz = jnum_or_nan(o, "center_hz");
    l->center_hz_err = jnum_or_nan(o, "center_hz_err");
    l->shift_hz = jnum_or_nan(o, "shift_hz");
    l->shift_hz_err = jnum_or_nan(o, "shift_hz_err");
    l->fwhm_hz = jnum_or_nan(o, "fwhm_hz");
    l->fwhm_hz_err = jnum_or_nan(o, "fwhm_hz_err");
    l->area = jnum_or_nan(o, "area");
    l->area_err = jnum_or_nan(o, "area_err");
}

/* The fit status and at-bound parameters of era `name` (entry fields "fit_status" and
 * "at_bound", see series_entry_json); absent in files of older versions: no fit known. */
static void fit_from_json(const json_t *o, const char *name, cs_series_line *l)
{
    l->nfits = 0;
    l->fit_status = CS_FIT_CONVERGED;
    l->at_bound[0] = '\0';
    const char *st = json_string_value(json_object_get(json_object_get(o, "fit_status"), name));
    for (int k = CS_FIT_CONVERGED; st && k <= CS_FIT_BAD_INPUT; k++)
        if (strcmp(st, cs_fit_status_name((cs_fit_status)k)) == 0) {
            l->fit_status = (cs_fit_status)k;
            l->nfits = 1;
        }
    const json_t *ab = json_object_get(json_object_get(o, "at_bound"), name);
    size_t n = 0;
    for (size_t i = 0; i < json_array_size(ab); i++) {
        const json_t *x = json_array_get(ab, i);
        const char *nm = jstr(x, "name"), *bd = jstr(x, "bound");
        if (!nm)
            continue;
        int k = snprintf(l->at_bound + n, sizeof l->at_bound - n, "%s%s%s%s", n ? ";" : "", nm, bd ? ":" : "",
                         bd ? bd : "");
        if (k < 0 || (size_t)k >= sizeof l->at_bound - n)
            break;
        n += (size_t)k;
    }
}

int series_entry_from_json(const json_t *o, cs_series_entry *e, const char **why)
{
    memset(e, 0, sizeof *e);
    const json_t *ji = json_object_get(o, "index");
    const char *status = jstr(o, "status");
    if (!json_is_object(o) || !json_is_integer(ji) || json_integer_value(ji) < 0 || !jstr(o, "file") ||
        !status) {
        *why = "an entry without index, file or status (not written by 'collshift series'?)";
        return -1;
    }
    e->index = (size_t)json_integer_value(ji);
    e->line = (long)json_integer_value(json_object_get(o, "line"));
    e->file = cli_json_get_path(o, "file");   /* the exact bytes, also of a name that is not UTF-8 */
    e->path = cli_json_get_path(o, "file");
    if (!e->file || !e->path) {
        free(e->file);
        free(e->path);
        e->file = e->path = NULL;
        *why = "out of memory";
        return -1;
    }
    e->status = CS_SERIES_FAILED;
    for (int k = CS_SERIES_PENDING; k <= CS_SERIES_FAILED; k++)
        if (strcmp(status, cs_series_status_name((cs_series_status)k)) == 0)
            e->status = (cs_series_status)k;
    snprintf(e->message, sizeof e->message, "%s", jstr(o, "message") ? jstr(o, "message") : "");
    const json_t *jc = json_object_get(o, "error_code");   /* journal lines only */
    e->error_code = json_is_integer(jc) ? (int)json_integer_value(jc)
                  : e->status == CS_SERIES_OK ? CS_OK : CS_EDATA;
    const char *kind = jstr(o, "kind");
    e->kind = CS_KIND_AUTO;
    for (int k = CS_KIND_AUTO; kind && k <= CS_KIND_RECORD; k++)
        if (strcmp(kind, cs_kind_name((cs_kind)k)) == 0)
            e->kind = (cs_kind)k;
    const json_t *js = json_object_get(o, "shots");
    e->nshots = json_is_integer(js) && json_integer_value(js) > 0 ? (size_t)json_integer_value(js) : 0;
    e->density_used_m3 = jnum_or_nan(o, "density_m3");
    e->density_m3 = NAN;
    const char *src = jstr(o, "density_source");
    for (int k = CS_SERIES_DENSITY_NONE; src && k <= CS_SERIES_DENSITY_META_TEMPERATURE; k++)
        if (strcmp(src, cs_series_density_source_name((cs_series_density_source)k)) == 0)
            e->density_source = (cs_series_density_source)k;
    e->temperature_K = jnum_or_nan(o, "temperature_k");
    e->thickness_m = jnum_or_nan(o, "thickness_m");
    e->ref_used_hz = jnum_or_nan(o, "reference_hz");
    e->ref_hz = NAN;
    e->shot = -1;
    e->era = -1;
    const char *era = jstr(o, "era");
    for (int k = 0; k < CS_SPLIT_NERA; k++) {
        if (era && strcmp(era, cs_split_era_name((cs_split_era)k)) == 0)
            e->era = k;
        line_from_json(json_object_get(o, cs_split_era_name((cs_split_era)k)), &e->era_line[k]);
        fit_from_json(o, cs_split_era_name((cs_split_era)k), &e->era_line[k]);
    }
    return 0;
}

/* ---- the journal: one line per finished entry, on disk as soon as the entry is done ---------
 * Line 1: {"collshift_series_journal":1,"fingerprint":...,"manifest":...,"entries_total":N,
 * "shard":"K/N" or null,"options":...}. Each further line: the entry's object as in the JSON's
 * 'entries' (series_entry_json) plus "error_code". Lines are written whole with one write() and
 * fsync()ed; a reader stops at the first line that is cut short or does not parse. */

#define JOURNAL_KEY "collshift_series_journal"
#define JOURNAL_PREFIX "{\"" JOURNAL_KEY "\""

static volatile sig_atomic_t g_signal;   /* the stopping signal, 0 while running */

static void on_signal(int sig)
{
    g_signal = sig;
}

int series_stop_requested(void *ctx)
{
    (void)ctx;
    return g_signal != 0;
}

static int write_all(int fd, const char *buf, size_t n)
{
    while (n) {
        ssize_t k = write(fd, buf, n);
        if (k < 0) {
            if (errno == EINTR)
                continue;
            return -1;
        }
        buf += k;
        n -= (size_t)k;
    }
    return 0;
}

/* Make the journal's directory entry durable (best effort). */
static void sync_dir(const char *path)
{
    const char *slash = strrchr(path, '/');
    char dir[4096];
    if (!slash)
        snprintf(dir, sizeof dir, ".");
    else if (slash == path)
        snprintf(dir, sizeof dir, "/");
    else
        snprintf(dir, sizeof dir, "%.*s", (int)(slash - path), path);
    int fd = open(dir, O_RDONLY);
    if (fd >= 0) {
        (void)fsync(fd);
        close(fd);
    }
}

/* Write one JSON object as a line and flush it to disk. Returns 0 or -1 (errno set). */
static int journal_line(int fd, json_t *o)
{
    char *t = json_dumps(o, JSON_COMPACT | JSON_PRESERVE_ORDER | JSON_REAL_PRECISION(17));
    if (!t) {
        errno = ENOMEM;
        return -1;
    }
    size_t n = strlen(t);
    char *line = realloc(t, n + 2);
    if (!line) {
        free(t);
        errno = ENOMEM;
        return -1;
    }
    line[n] = '\n';
    line[n + 1] = '\0';
    int rc = write_all(fd, line, n + 1);
    free(line);
    if (rc == 0 && fsync(fd) != 0 && errno != EINVAL && errno != EROFS)
        rc = -1;   /* EINVAL/EROFS: a file (pipe, special file) that cannot be synced */
    return rc;
}

/* on_entry: journal the finished entry (one thread at a time). */
void series_journal_entry(const cs_series_entry *e, void *ctx)
{
    series_journal *j = ctx;
    if (j->fd >= 0 && !j->failed) {
        json_t *o = series_entry_json(e);
        json_object_set_new(o, "error_code", json_integer(e->error_code));
        if (journal_line(j->fd, o) != 0) {
            j->failed = 1;
            cli_errorf("'%s': cannot write the journal: %s; the run goes on without it", j->path,
                       strerror(errno));
        }
        json_decref(o);
    }
    j->written++;
    if (j->raise_after && j->written == j->raise_after)
        raise(j->raise_sig);   /* test hook: as if the signal came from outside now */
}

/* The whole file in memory (NUL-terminated). NULL with errno set when it cannot be read. */
static char *slurp(const char *path, size_t *len)
{
    FILE *f = fopen(path, "rb");
    if (!f)
        return NULL;
    size_t cap = 65536, n = 0;
    char *t = malloc(cap);
    while (t) {
        size_t k = fread(t + n, 1, cap - n - 1, f);
        n += k;
        if (n + 1 < cap)
            break;
        char *t2 = realloc(t, 2 * cap);
        if (!t2)
            free(t);
        t = t2;
        cap *= 2;
    }
    int bad = ferror(f);
    fclose(f);
    if (!t) {
        errno = ENOMEM;
    } else if (bad) {
        free(t);
        t = NULL;
        errno = EIO;
    }
    if (t) {
        t[n] = '\0';
        *len = n;
    }
    return t;
}

/* 1 when text (n bytes) may be a journal written by this command: empty, or it starts with the
 * header's first bytes (possibly cut short). */
static int looks_like_journal(const char *text, size_t n)
{
    size_t k = strlen(JOURNAL_PREFIX);
    return n == 0 || memcmp(text, JOURNAL_PREFIX, n < k ? n : k) == 0;
}

static json_t *journal_header(const series_opts *so, const cs_series *s)
{
    json_t *h = json_object();
    json_object_set_new(h, JOURNAL_KEY, json_integer(1));
    json_object_set_new(h, "fingerprint", json_string(so->fingerprint));
    cli_json_set_path(h, "manifest", so->manifest);
    json_object_set_new(h, "entries_total", json_integer((json_int_t)s->total));
    if (so->shard_n) {
        char b[64];
        snprintf(b, sizeof b, "%zu/%zu", so->shard_k, so->shard_n);
        json_object_set_new(h, "shard", json_string(b));
    } else {
        json_object_set_new(h, "shard", json_null());
    }
    json_object_set_new(h, "options", cli_jstring(so->options ? so->options : ""));
    return h;
}

/* Start a new journal (truncating an old one of this command; any other file is refused). */
static int journal_create(series_journal *j, const series_opts *so, const cs_series *s)
{
    size_t len = 0;
    char *old = slurp(j->path, &len);
    if (old) {
        int ours = looks_like_journal(old, len);
        free(old);
        if (!ours) {
            cli_errorf("'%s': exists and is not a journal of 'collshift series'; refusing to overwrite it "
                       "(choose another --journal)", j->path);
            return CLI_EXIT_DATA;
        }
    }
    j->fd = open(j->path, O_WRONLY | O_CREAT | O_TRUNC, 0666);
    json_t *h = journal_header(so, s);
    int bad = j->fd < 0 || journal_line(j->fd, h) != 0;
    json_decref(h);
    if (bad) {
        cli_errorf("'%s': cannot write the journal: %s", j->path, strerror(errno));
        return CLI_EXIT_DATA;
    }
    sync_dir(j->path);
    return 0;
}

/* Copy the results of a journaled entry r onto the manifest's entry e. */
static void take_results(cs_series_entry *e, const cs_series_entry *r)
{
    e->status = r->status;
    memcpy(e->message, r->message, sizeof e->message);
    e->error_code = r->error_code;
    e->kind = r->kind;
    e->nshots = r->nshots;
    e->density_used_m3 = r->density_used_m3;
    e->density_source = r->density_source;
    e->ref_used_hz = r->ref_used_hz;
    memcpy(e->era_line, r->era_line, sizeof e->era_line);
}

/* The options text ("--a=x\n--b\n") on one line for messages: "--a=x --b", or "(none)". */
static void one_line(const char *opts, char *out, size_t cap)
{
    size_t k = 0;
    for (const char *p = opts ? opts : ""; *p && k + 1 < cap; p++)
        if (*p != '\n' || p[1])
            out[k++] = *p == '\n' ? ' ' : *p;
    out[k] = '\0';
    if (!k)
        snprintf(out, cap, "(none)");
}

/* --resume: take the finished entries of the journal, cut off a damaged tail, append from there.
 * Returns 0 (also when there is no journal yet: a fresh start) or an exit code. */
static int journal_resume(series_journal *j, const series_opts *so, cs_series *s, int retry_failed)
{
    size_t len = 0;
    char *text = slurp(j->path, &len);
    if (!text) {
        if (errno != ENOENT) {
            cli_errorf("'%s': cannot read the journal: %s", j->path, strerror(errno));
            return CLI_EXIT_DATA;
        }
        cli_errorf("note: no journal '%s' to resume from: starting from the beginning", j->path);
        return journal_create(j, so, s);
    }
    if (!looks_like_journal(text, len)) {
        free(text);
        cli_errorf("'%s': not a journal of 'collshift series'", j->path);
        return CLI_EXIT_DATA;
    }
    char *nl = memchr(text, '\n', len);
    json_t *h = nl ? json_loadb(text, (size_t)(nl - text), 0, NULL) : NULL;
    if (!h) {   /* the header itself was cut short: nothing was journaled */
        free(text);
        cli_errorf("note: the journal '%s' holds no entry: starting from the beginning", j->path);
        return journal_create(j, so, s);
    }
    const char *fp = json_string_value(json_object_get(h, "fingerprint"));
    const json_t *jt = json_object_get(h, "entries_total");
    const char *shard = json_string_value(json_object_get(h, "shard"));
    char want_shard[64] = "";
    if (so->shard_n)
        snprintf(want_shard, sizeof want_shard, "%zu/%zu", so->shard_k, so->shard_n);
    int rc = 0;
    if (!fp || strcmp(fp, so->fingerprint) != 0) {
        char o1[512], o2[512];
        one_line(json_string_value(json_object_get(h, "options")), o1, sizeof o1);
        one_line(so->options, o2, sizeof o2);
        cli_errorf("'%s': the journal comes from another run: the manifest's bytes or the options that "
                   "change results differ (fingerprint %s, options %s; this run: fingerprint %s, options "
                   "%s); refusing to resume (run without --resume to start again)", j->path,
                   fp ? fp : "none", o1, so->fingerprint, o2);
        rc = CLI_EXIT_DATA;
    } else if (!json_is_integer(jt) || (size_t)json_integer_value(jt) != s->total) {
        cli_errorf("'%s': the journal counts %lld manifest entries, the manifest %zu; refusing to resume",
                   j->path, json_is_integer(jt) ? (long long)json_integer_value(jt) : -1LL, s->total);
        rc = CLI_EXIT_DATA;
    } else if (strcmp(shard ? shard : "", want_shard) != 0) {
        cli_errorf("'%s': the journal is of shard %s, this run %s; refusing to resume", j->path,
                   shard ? shard : "(none)", so->shard_n ? want_shard : "(none)");
        rc = CLI_EXIT_DATA;
    }
    json_decref(h);
    /* position of each manifest entry in s (a shard holds some of them) */
    size_t *pos = rc ? NULL : malloc((s->total ? s->total : 1) * sizeof *pos);
    if (!rc && !pos) {
        cli_errorf("series: out of memory");
        rc = CLI_EXIT_DATA;
    }
    for (size_t i = 0; pos && i < s->total; i++)
        pos[i] = (size_t)-1;
    for (size_t i = 0; pos && i < s->n; i++)
        if (s->e[i].index < s->total)
            pos[s->e[i].index] = i;
    size_t good = (size_t)(nl - text) + 1, taken = 0, lines = 0;
    int damaged = 0;
    while (!rc && good < len) {
        char *end = memchr(text + good, '\n', len - good);
        json_t *o = end ? json_loadb(text + good, (size_t)(end - (text + good)), 0, NULL) : NULL;
        cs_series_entry r;
        const char *why = NULL;
        if (!o || series_entry_from_json(o, &r, &why) != 0) {
            if (o)
                free(r.file), free(r.path);
            json_decref(o);
            damaged = 1;
            break;   /* cut short by a kill, or damaged: this entry and any later ones are redone */
        }
        json_decref(o);
        size_t at = r.index < s->total ? pos[r.index] : (size_t)-1;
        if (r.index >= s->total || (at != (size_t)-1 && strcmp(r.file, s->e[at].file) != 0)) {
            cli_errorf("'%s': line %zu: entry %zu ('%s') is not the manifest's; refusing to resume", j->path,
                       lines + 2, r.index + 1, r.file);
            rc = CLI_EXIT_DATA;
        } else if (at != (size_t)-1 && r.status != CS_SERIES_PENDING) {
            int redo = retry_failed && (r.status == CS_SERIES_FAILED || r.status == CS_SERIES_PARTIAL);
            if (redo)
                s->e[at].status = CS_SERIES_PENDING;
            else
                take_results(&s->e[at], &r);
        }
        free(r.file);
        free(r.path);
        lines++;
        good = (size_t)(end - text) + 1;
    }
    free(pos);
    free(text);
    if (rc)
        return rc;
    taken = s->n - cs_series_count(s, CS_SERIES_PENDING);
    if (damaged)
        cli_errorf("note: '%s': the journal's last line was cut short (the process was killed while "
                   "writing it); that entry is analysed again", j->path);
    cli_errorf("note: resuming from '%s': %zu of %zu entries already finished, %zu to analyse", j->path,
               taken, s->n, s->n - taken);
    j->fd = open(j->path, O_WRONLY | O_APPEND);
    if (j->fd < 0 || ftruncate(j->fd, (off_t)good) != 0) {
        cli_errorf("'%s': cannot write the journal: %s", j->path, strerror(errno));
        return CLI_EXIT_DATA;
    }
    return 0;
}

/* The journal's path (--journal, else the first output naming a file + ".journal"), opened for a
 * fresh run or a resumed one. Returns 0 or an exit code. */
int series_journal_open(series_journal *j, const series_opts *so, cs_series *s, const char *journal,
                        int resume, int retry_failed)
{
    const char *base = journal;
    const char *outs[3] = {so->json, so->table, so->theory_table};
    for (int i = 0; i < 3 && !base; i++)
        if (names_file(outs[i]))
            base = outs[i];
    if (!base)
        return 0;
    size_t n = strlen(base) + 16;
    j->path = malloc(n);
    if (!j->path) {
        cli_errorf("series: out of memory");
        return CLI_EXIT_DATA;
    }
    snprintf(j->path, n, "%s%s", base, journal ? "" : ".journal");
    if (resume)
        return journal_resume(j, so, s, retry_failed);
    return journal_create(j, so, s);
}

void series_journal_close(series_journal *j)
{
    if (j->fd >= 0)
        close(j->fd);
    j->fd = -1;
}

/* Test hook (undocumented on purpose): CS_SERIES_TEST_RAISE=INT:N or TERM:N makes the command
 * raise SIGINT or SIGTERM itself once N entries of this run are journaled, so that the tests can
 * interrupt a run at a known point. */
void series_journal_test_hook(series_journal *j)
{
    const char *t = getenv("CS_SERIES_TEST_RAISE");
    if (!t)
        return;
    int sig = strncmp(t, "INT:", 4) == 0 ? SIGINT : strncmp(t, "TERM:", 5) == 0 ? SIGTERM : 0;
    if (!sig)
        return;
    char *end;
    long v = strtol(strchr(t, ':') + 1, &end, 10);
    if (*end || v < 1)
        return;
    j->raise_sig = sig;
    j->raise_after = (size_t)v;
}

/* SIGINT and SIGTERM set g_signal (once: SA_RESETHAND makes a second one stop at once). A signal
 * ignored when the command started (nohup, background jobs) stays ignored. */
static struct sigaction g_old[2];

void series_signals_catch(void)
{
    static const int sigs[2] = {SIGINT, SIGTERM};
    struct sigaction *old = g_old;
    g_signal = 0;
    for (int i = 0; i < 2; i++) {
        struct sigaction sa;
        memset(&sa, 0, sizeof sa);
        sigaction(sigs[i], NULL, &old[i]);
        if (old[i].sa_handler == SIG_IGN)
            continue;
        sa.sa_handler = on_signal;
        sigemptyset(&sa.sa_mask);
        sa.sa_flags = SA_RESETHAND | SA_RESTART;
        sigaction(sigs[i], &sa, NULL);
    }
}

void series_signals_release(void)
{
    sigaction(SIGINT, &g_old[0], NULL);
    sigaction(SIGTERM, &g_old[1], NULL);
}

int series_signal_received(void)
{
    return g_signal;
}
