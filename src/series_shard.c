/* Campaign shards: parse "K/N", keep every N-th manifest entry, and merge shards back in order. */
#include <collshift/series.h>

#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#define SHARD_MAX 1000000u

static int parse_whole(const char *t, const char *end, size_t *out)
{
    if (t == end || end - t > 9)
        return -1;
    size_t v = 0;
    for (const char *p = t; p < end; p++) {
        if (*p < '0' || *p > '9')
            return -1;
        v = 10 * v + (size_t)(*p - '0');
    }
    *out = v;
    return 0;
}

int cs_series_shard_parse(const char *text, size_t *k, size_t *n, cs_error *err)
{
    if (!text || !k || !n)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "no shard text or no output");
    const char *slash = strchr(text, '/');
    size_t kk = 0, nn = 0;
    if (!slash || parse_whole(text, slash, &kk) || parse_whole(slash + 1, slash + strlen(slash), &nn))
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "expected K/N with whole numbers, e.g. 2/8");
    if (nn < 1 || nn > SHARD_MAX)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "N must be from 1 to %u", SHARD_MAX);
    if (kk < 1 || kk > nn)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "K must be from 1 to N (%zu)", nn);
    *k = kk;
    *n = nn;
    return CS_OK;
}

static void entry_release(cs_series_entry *e)
{
    free(e->file);
    free(e->path);
    e->file = e->path = NULL;
}

int cs_series_shard(cs_series *s, size_t k, size_t n, cs_error *err)
{
    if (!s || k < 1 || n < 1 || k > n)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "shard %zu/%zu: expected 1 <= K <= N", k, n);
    size_t m = 0;
    for (size_t i = 0; i < s->n; i++) {
        if (s->e[i].index % n == k - 1)
            s->e[m++] = s->e[i];
        else
            entry_release(&s->e[i]);
    }
    s->n = m;
    return CS_OK;
}

static char *dup_or_null(const char *t, int *fail)
{
    if (!t)
        return NULL;
    size_t n = strlen(t) + 1;
    char *d = malloc(n);
    if (!d)
        *fail = 1;
    else
        memcpy(d, t, n);
    return d;
}

int cs_series_merge(const cs_series *const *parts, size_t nparts, cs_series **out, cs_error *err)
{
    if (!parts || !nparts || !out)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "no shards to merge");
    *out = NULL;
    for (size_t p = 0; p < nparts; p++)
        if (!parts[p])
            return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "shard %zu is missing", p + 1);
    size_t total = parts[0]->total;
    for (size_t p = 1; p < nparts; p++)
        if (parts[p]->total != total)
            return cs_error_set(err, CS_EDATA, parts[p]->manifest, -1, -1,
                                "this shard's manifest lists %zu entries, the first shard's %zu: "
                                "not the same manifest", parts[p]->total, total);
    if (total == 0)
        return cs_error_set(err, CS_EDATA, parts[0]->manifest, -1, -1, "the shards hold no entries");
    const cs_series_entry **slot = calloc(total, sizeof *slot);
    if (!slot)
        return cs_error_set(err, CS_ENOMEM, NULL, -1, -1, "out of memory");
    int rc = CS_OK;
    for (size_t p = 0; p < nparts && rc == CS_OK; p++) {
        for (size_t i = 0; i < parts[p]->n && rc == CS_OK; i++) {
            const cs_series_entry *e = &parts[p]->e[i];
            if (e->index >= total)
                rc = cs_error_set(err, CS_EDATA, parts[p]->manifest, e->line, -1,
                                  "entry %zu is beyond the manifest's %zu entries", e->index + 1, total);
            else if (slot[e->index])
                rc = cs_error_set(err, CS_EDATA, parts[p]->manifest, e->line, -1,
                                  "entry %zu (%s) is in two shards", e->index + 1, e->file ? e->file : "?");
            else
                slot[e->index] = e;
        }
    }
    if (rc == CS_OK) {
        size_t nmiss = 0;
        char list[160] = "";
        for (size_t i = 0; i < total; i++) {
            if (slot[i])
                continue;
            nmiss++;
            size_t len = strlen(list);
            if (nmiss <= 8 && len < sizeof list - 32)
                snprintf(list + len, sizeof list - len, "%s%zu", nmiss > 1 ? ", " : "", i + 1);
        }
        if (nmiss)
            rc = cs_error_set(err, CS_EDATA, parts[0]->manifest, -1, -1,
                              "%zu of the manifest's %zu entries are in no shard (entries %s%s, counted "
                              "from 1 in manifest order): is a shard missing?",
                              nmiss, total, list, nmiss > 8 ? ", ..." : "");
    }
    cs_series *s = NULL;
    if (rc == CS_OK) {
        s = calloc(1, sizeof *s);
        int fail = !s;
        if (s) {
            s->e = calloc(total, sizeof *s->e);
            fail |= !s->e;
            s->manifest = dup_or_null(parts[0]->manifest, &fail);
            s->dir = dup_or_null(parts[0]->dir, &fail);
            for (size_t i = 0; i < total && s->e; i++) {
                s->e[i] = *slot[i];
                s->e[i].file = dup_or_null(slot[i]->file, &fail);
                s->e[i].path = dup_or_null(slot[i]->path, &fail);
                s->n = i + 1;
            }
            s->total = total;
        }
        if (fail) {
            cs_series_free(s);
            s = NULL;
            rc = cs_error_set(err, CS_ENOMEM, NULL, -1, -1, "out of memory");
        }
    }
    free(slot);
    *out = s;
    return rc;
}
