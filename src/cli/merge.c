/* `collshift merge`: combine the JSON of `collshift series --shard K/N` runs into one campaign. */
#include "cli.h"
#include "series_out.h"

#include <collshift/series.h>
#include <collshift/theory.h>

#include <jansson.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

const char *const cmd_merge_usage[] = {
    "usage: collshift merge SHARD.json... [--json FILE] [--table FILE] [--theory-table FILE] [--quiet]\n"
    "\n"
    "Combines the JSON files written by 'collshift series MANIFEST --shard K/N --json FILE' (one\n"
    "per shard, e.g. per task of a cluster job array) into the campaign a single run over the\n"
    "whole manifest gives: the entries in manifest order, the per-density table, the regressions\n"
    "(recomputed from the merged entries by the same code as 'series') and the theory comparison.\n"
    "The summary, --json, --table and --theory-table are as for 'collshift series'; the merged\n"
    "CSV table is byte for byte that of the unsharded run, and the JSON's entries, regressions and\n"
    "theory hold the same numbers. The JSON of an unsharded run is accepted too (as shard 1/1).\n"
    "\n"
    "The shards must come from the same manifest (same bytes) and the same options (all but\n"
    "--threads, --shard and the outputs): each shard's JSON records a fingerprint of both in its\n"
    "'run' object, and merge refuses shards whose fingerprints differ. Every manifest entry must\n"
    "be in exactly one shard: a missing shard (an entry in none) and a shard given twice are\n"
    "errors.\n"
    "\n"
    "Options:\n"
    "  --json FILE           entries, regressions and theory as JSON ('-' for standard output)\n"
    "  --table FILE          CSV, one row per entry and era sorted by density (as 'series')\n"
    "  --theory-table FILE   CSV of the theory comparison (as 'series'; the shards need --line)\n"
    "  --quiet               no summary on standard output\n"
    "\n"
    "Exit codes: 0 every entry measured; 1 some entry failed or was only partly measured; 2 usage;\n"
    "3 a shard cannot be read, the shards come from different manifests or options, or an entry\n"
    "is missing or given twice, or a shard comes from an interrupted run (finish it with --resume).\n",
    NULL,
};

enum { O_JSON = 1, O_TABLE, O_THEORY_TABLE, O_QUIET };

static double num(const json_t *o, const char *key)
{
    const json_t *v = json_object_get(o, key);
    return json_is_number(v) ? json_number_value(v) : NAN;
}

static const char *str(const json_t *o, const char *key)
{
    return json_string_value(json_object_get(o, key));
}

static char *dup_text(const char *t)
{
    if (!t)
        t = "";
    size_t n = strlen(t) + 1;
    char *d = malloc(n);
    if (d)
        memcpy(d, t, n);
    return d;
}

/* A shard's JSON as a cs_series. Returns 0, or prints a message and returns CLI_EXIT_DATA. */
static int read_shard(const char *path, const json_t *root, cs_series **out)
{
    const json_t *run = json_object_get(root, "run");
    const json_t *ents = json_object_get(root, "entries");
    const json_t *jt = json_object_get(run, "entries_total");
    if (!json_is_object(run) || !json_is_string(json_object_get(run, "fingerprint")) || !json_is_array(ents) ||
        !json_is_integer(jt) || json_integer_value(jt) < 0) {
        cli_errorf("'%s': not the JSON of 'collshift series' (no 'run' object with a fingerprint, or no "
                   "'entries')", path);
        return CLI_EXIT_DATA;
    }
    const json_t *jp = json_object_get(run, "entries_pending");
    if (json_is_false(json_object_get(run, "complete")) || (json_is_integer(jp) && json_integer_value(jp) > 0)) {
        cli_errorf("'%s': the run was interrupted (%lld entries not analysed); finish it with the same "
                   "'collshift series' command and --resume before merging", path,
                   json_is_integer(jp) ? (long long)json_integer_value(jp) : -1LL);
        return CLI_EXIT_DATA;
    }
    cs_series *s = calloc(1, sizeof *s);
    size_t n = json_array_size(ents);
    if (s) {
        s->manifest = cli_json_get_path(root, "manifest");
        if (!s->manifest)
            s->manifest = dup_text("");
        s->dir = dup_text(".");
        s->e = calloc(n ? n : 1, sizeof *s->e);
        s->total = (size_t)json_integer_value(jt);
    }
    if (!s || !s->manifest || !s->dir || !s->e) {
        cs_series_free(s);
        cli_errorf("merge: out of memory");
        return CLI_EXIT_DATA;
    }
    for (size_t i = 0; i < n; i++) {
        const char *why = NULL;
        int bad = series_entry_from_json(json_array_get(ents, i), &s->e[i], &why);
        s->n = i + 1;
        if (!bad && s->e[i].status == CS_SERIES_PENDING) {
            bad = 1;
            why = "not analysed (an interrupted run: finish it with --resume before merging)";
        }
        if (bad) {
            cli_errorf("'%s': entry %zu: %s", path, i + 1, why);
            cs_series_free(s);
            return CLI_EXIT_DATA;
        }
    }
    *out = s;
    return 0;
}

int cmd_merge(int argc, char **argv)
{
    static const struct option longopts[] = {
        {"json", required_argument, NULL, O_JSON},
        {"table", required_argument, NULL, O_TABLE},
        {"theory-table", required_argument, NULL, O_THEORY_TABLE},
        {"quiet", no_argument, NULL, O_QUIET},
        {NULL, 0, NULL, 0},
    };
    series_opts so;
    memset(&so, 0, sizeof so);
    cs_series_params_default(&so.p);
    so.thickness_m = NAN;
    so.command = "merge";
    int c;
    optind = 1;
    opterr = 0;
    while ((c = getopt_long(argc, argv, ":", longopts, NULL)) != -1) {
        switch (c) {
        case O_JSON: so.json = optarg; break;
        case O_TABLE: so.table = optarg; break;
        case O_THEORY_TABLE: so.theory_table = optarg; break;
        case O_QUIET: so.quiet = 1; break;
        case ':':
            cli_errorf("merge: option '%s' needs a value", argv[optind - 1]);
            return CLI_EXIT_USAGE;
        default:
            cli_errorf("merge: unknown option '%s'; see 'collshift merge --help'", argv[optind - 1]);
            return CLI_EXIT_USAGE;
        }
    }
    size_t np = (size_t)(argc - optind);
    if (np == 0) {
        cli_errorf("merge: expected the JSON files of the shards; see 'collshift merge --help'");
        return CLI_EXIT_USAGE;
    }
    json_t **root = calloc(np, sizeof *root);
    cs_series **part = calloc(np, sizeof *part);
    int rc = (root && part) ? 0 : CLI_EXIT_DATA;
    const char *fp0 = NULL;
    for (size_t i = 0; i < np && !rc; i++) {
        const char *path = argv[optind + (int)i];
        json_error_t je;
        root[i] = json_load_file(path, 0, &je);
        if (!root[i]) {
            cli_errorf("'%s': line %d: %s", path, je.line, je.text);
            rc = CLI_EXIT_DATA;
            break;
        }
        if ((rc = read_shard(path, root[i], &part[i])) != 0)
            break;
        const json_t *run = json_object_get(root[i], "run");
        const char *fp = str(run, "fingerprint");
        if (i == 0) {
            fp0 = fp;
        } else if (strcmp(fp, fp0) != 0) {
            cli_errorf("'%s' and '%s' come from different manifests or options (fingerprints %s and %s; "
                       "options:\n%s  and:\n%s); refusing to merge", argv[optind], path, fp0, fp,
                       str(json_object_get(root[0], "run"), "options"), str(run, "options"));
            rc = CLI_EXIT_DATA;
        }
    }
    cs_series *s = NULL;
    if (!rc) {
        cs_error err;
        cs_error_clear(&err);
        if (cs_series_merge((const cs_series *const *)part, np, &s, &err) != CS_OK)
            rc = cli_report(&err) == CLI_EXIT_USAGE ? CLI_EXIT_USAGE : CLI_EXIT_DATA;
    }
    int status = CLI_EXIT_OK;
    if (!rc) {
        const json_t *run = json_object_get(root[0], "run");
        const char *line = str(run, "line");
        so.line = line ? cs_line_find(line) : NULL;
        if (line && !so.line) {
            cli_errorf("'%s': line '%s' is not known to this collshift", argv[optind], line);
            rc = CLI_EXIT_DATA;
        }
        if (so.theory_table && !so.line) {
            cli_errorf("merge: --theory-table: the shards were made without --line");
            rc = CLI_EXIT_USAGE;
        }
        so.thickness_m = num(run, "thickness_m");
        if (json_is_true(json_object_get(run, "through_origin")))
            so.flags |= CS_SERIES_FIT_ORIGIN;
        if (json_is_true(json_object_get(run, "inflate")))
            so.flags |= CS_SERIES_FIT_INFLATE;
        if (str(root[0], "model"))
            so.p.model = str(root[0], "model");
        const json_t *jt = json_object_get(root[0], "threads");
        if (json_is_integer(jt) && json_integer_value(jt) >= 1 && json_integer_value(jt) <= 1024)
            so.p.threads = (int)json_integer_value(jt);
        so.options = str(run, "options");
        snprintf(so.fingerprint, sizeof so.fingerprint, "%s", fp0);
        so.merged = np;
        if (!rc) {
            for (size_t i = 0; i < s->n; i++)
                if (s->e[i].status != CS_SERIES_OK) {
                    cli_errorf("'%s': line %ld: %s: %s", s->manifest, s->e[i].line,
                               cs_series_status_name(s->e[i].status), s->e[i].message);
                    status = CLI_EXIT_ANALYSIS;
                }
            rc = series_output(s, &so);
        }
    }
    cs_series_free(s);
    for (size_t i = 0; i < np; i++) {
        if (part)
            cs_series_free(part[i]);
        if (root)
            json_decref(root[i]);
    }
    free(part);
    free(root);
    if (rc == CLI_EXIT_DATA && (!root || !part))
        cli_errorf("merge: out of memory");
    return rc ? rc : status;
}
