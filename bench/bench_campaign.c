/* Benchmark: a campaign of complex text records through the whole `split` pipeline (load the
 * text file with cs_io_load, then cs_split_run with the default parameters: automatic gates,
 * gate-aware fits of both eras, whole-record fit, matrix pencil), records per second on 1 and 2
 * threads, and the peak resident memory for K and for 2K records (it must not grow with K).
 *
 * usage: bench_campaign [--records K] [--samples N] [--dir DIR] [--smoke]
 *   --records K   records of the smaller run (default 6); the larger run has 2K
 *   --samples N   samples per generated record (default 2^17)
 *   --dir DIR     use the text records synthetic_record_*.csv already in DIR (sorted by name;
 *                 e.g. written by `collshift simulate`) instead of generating them; the runs use
 *                 the first K and the first 2K files (fewer when DIR holds fewer)
 *   --smoke       a tiny campaign (2 records of 2^12 samples), for ctest
 * Without --dir the records are synthetic (cs_simulate_record, the invented scenario of
 * simulate.h, one density, a stream per record), written as text to a temporary folder that is
 * removed afterwards.
 *
 * Prints one JSON object per line and per (threads, records):
 *   {"bench":"campaign","threads":T,"records":K,"samples":N,"mb_text":..,"seconds":..,
 *    "records_per_s":..,"ok":..,"peak_rss_kb":..}
 * (cpu_s_per_record: user + system time of the run per record, the figure to compare on a busy
 * machine; cpu_per_wall: how many cores the run kept busy, ~threads when nothing serialises the
 * threads and the cores are free; voluntary_switches: times a thread slept, e.g. waiting for a
 * lock; minor_faults: pages first touched, e.g. by large allocations that are mapped afresh for
 * every record), then a summary line with the peaks for K and 2K records and their ratio. Each run is a fresh
 * process (this program re-executed), so ru_maxrss is the peak of that run alone. Threads take
 * records from a shared counter; each owns one cs_gate_workspace. */
#include <collshift/simulate.h>
#include <collshift/split.h>

#include <dirent.h>
#include <pthread.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/resource.h>
#include <sys/stat.h>
#include <sys/wait.h>
#include <time.h>
#include <unistd.h>

static double now(void)
{
    struct timespec ts;
    clock_gettime(CLOCK_MONOTONIC, &ts);
    return (double)ts.tv_sec + 1e-9 * (double)ts.tv_nsec;
}

static int cmp_str(const void *a, const void *b)
{
    return strcmp(*(char *const *)a, *(char *const *)b);
}

/* The sorted paths of DIR/synthetic_record_*.csv; *n receives their number. */
static char **list_records(const char *dir, size_t *n)
{
    *n = 0;
    DIR *d = opendir(dir);
    if (!d)
        return NULL;
    size_t cap = 16;
    char **v = malloc(cap * sizeof *v);
    struct dirent *e;
    while (v && (e = readdir(d)) != NULL) {
        size_t len = strlen(e->d_name);
        if (strncmp(e->d_name, "synthetic_record_", 17) != 0 || len < 4 || strcmp(e->d_name + len - 4, ".csv") != 0)
            continue;
        if (*n == cap) {
            char **w = realloc(v, 2 * cap * sizeof *v);
            if (!w)
                break;
            v = w;
            cap *= 2;
        }
        size_t sz = strlen(dir) + len + 2;
        v[*n] = malloc(sz);
        if (!v[*n])
            break;
        snprintf(v[*n], sz, "%s/%s", dir, e->d_name);
        (*n)++;
    }
    closedir(d);
    if (v)
        qsort(v, *n, sizeof *v, cmp_str);
    return v;
}

static void free_list(char **v, size_t n)
{
    for (size_t i = 0; v && i < n; i++)
        free(v[i]);
    free(v);
}

/* ------------------------------------------------------------------ one run (child process) */

typedef struct shared {
    char **files;
    size_t nfiles;
    size_t next;            /* next record to take, under lock */
    pthread_mutex_t lock;
    size_t ok, failed;      /* under lock */
    size_t samples;         /* of the first record loaded, under lock */
    double bytes;
} shared;

static void *worker(void *arg)
{
    shared *s = arg;
    cs_gate_workspace *ws = cs_gate_alloc();
    cs_split_params par;
    cs_split_params_default(&par);
    cs_load_options o;
    cs_load_options_init(&o);
    o.format = CS_FORMAT_TEXT;
    o.kind = CS_KIND_RECORD;
    for (;;) {
        pthread_mutex_lock(&s->lock);
        size_t k = s->next < s->nfiles ? s->next++ : s->nfiles;
        pthread_mutex_unlock(&s->lock);
        if (k >= s->nfiles)
            break;
        cs_error err;
        cs_loaded l;
        cs_loaded_init(&l);
        int good = 0;
        size_t ns = 0;
        if (ws && cs_io_load(s->files[k], &o, &l, &err) == CS_OK && l.nrecords >= 1) {
            ns = l.records[0]->n;
            cs_split_result *res = NULL;
            int rc = cs_split_run(ws, l.records, l.nrecords, &par, &res, &err);
            good = rc == CS_OK;
            cs_split_result_free(res);
        } else if (ws) {
            fprintf(stderr, "bench_campaign: %s\n", err.msg);
        }
        cs_loaded_release(&l);
        struct stat st;
        double b = stat(s->files[k], &st) == 0 ? (double)st.st_size : 0;
        pthread_mutex_lock(&s->lock);
        if (good)
            s->ok++;
        else
            s->failed++;
        if (!s->samples)
            s->samples = ns;
        s->bytes += b;
        pthread_mutex_unlock(&s->lock);
    }
    cs_gate_free(ws);
    return NULL;
}

/* Child mode: run `records` records of dir on `threads` threads, print the JSON line. */
static int run_child(const char *dir, int threads, size_t records)
{
    shared s;
    memset(&s, 0, sizeof s);
    size_t nall = 0;
    char **all = list_records(dir, &nall);
    if (!all || nall == 0) {
        fprintf(stderr, "bench_campaign: no synthetic_record_*.csv in %s\n", dir);
        free_list(all, nall);
        return 1;
    }
    s.files = all;
    s.nfiles = records < nall ? records : nall;
    pthread_mutex_init(&s.lock, NULL);
    pthread_t th[64];
    if (threads < 1)
        threads = 1;
    if (threads > 64)
        threads = 64;
    double t0 = now();
    int started = 0;
    for (int t = 0; t < threads; t++)
        if (pthread_create(&th[t], NULL, worker, &s) == 0)
            started++;
    for (int t = 0; t < started; t++)
        pthread_join(th[t], NULL);
    double wall = now() - t0;
    struct rusage ru;
    getrusage(RUSAGE_SELF, &ru);
    double cpu = (double)ru.ru_utime.tv_sec + 1e-6 * (double)ru.ru_utime.tv_usec + (double)ru.ru_stime.tv_sec +
                 1e-6 * (double)ru.ru_stime.tv_usec;
    printf("{\"bench\":\"campaign\",\"threads\":%d,\"records\":%zu,\"samples\":%zu,\"mb_text\":%.2f,"
           "\"seconds\":%.3f,\"records_per_s\":%.3f,\"text_mb_per_s\":%.1f,\"ok\":%zu,\"not_ok\":%zu,"
           "\"peak_rss_kb\":%ld,\"cpu_s_per_record\":%.4f,\"cpu_per_wall\":%.2f,\"voluntary_switches\":%ld,"
           "\"minor_faults\":%ld}\n",
           started, s.nfiles, s.samples, s.bytes / 1e6, wall, (double)s.nfiles / wall,
           s.bytes / 1e6 / wall, s.ok, s.failed, ru.ru_maxrss, s.nfiles ? cpu / (double)s.nfiles : 0.0,
           wall > 0 ? cpu / wall : 0.0, ru.ru_nvcsw, ru.ru_minflt);
    fflush(stdout);
    pthread_mutex_destroy(&s.lock);
    free_list(all, nall);
    /* every record must have gone through the pipeline; a shot the pipeline could not measure
       (status not OK) still counts as processed, but a load failure does not */
    return started == threads ? 0 : 1;
}

/* ------------------------------------------------------------------ generation */

static int generate(const char *dir, size_t nrec, size_t samples)
{
    cs_simulate_params p = cs_simulate_default_params();
    double dens = 1e19; /* m^-3 (1e13 cm^-3) */
    p.densities_m3 = &dens;
    p.ndensities = 1;
    p.samples = samples;
    cs_error err;
    for (size_t k = 0; k < nrec; k++) {
        cs_record *r = NULL;
        if (cs_simulate_record(&p, dens, (unsigned long)k, &r, NULL, &err) != CS_OK) {
            fprintf(stderr, "bench_campaign: simulate: %s\n", err.msg);
            return 1;
        }
        char *text = NULL;
        size_t len = 0;
        int rc = cs_simulate_format_record(r, &text, &len, &err);
        cs_record_free(r);
        if (rc != CS_OK) {
            fprintf(stderr, "bench_campaign: format: %s\n", err.msg);
            return 1;
        }
        char path[4096];
        snprintf(path, sizeof path, "%s/synthetic_record_%04zu.csv", dir, k);
        FILE *f = fopen(path, "wb");
        size_t w = f ? fwrite(text, 1, len, f) : 0;
        int bad = !f || w != len;
        if (f && fclose(f) != 0)
            bad = 1;
        free(text);
        if (bad) {
            fprintf(stderr, "bench_campaign: cannot write %s\n", path);
            return 1;
        }
    }
    return 0;
}

static void remove_dir(const char *dir)
{
    size_t n = 0;
    char **v = list_records(dir, &n);
    for (size_t i = 0; i < n; i++)
        unlink(v[i]);
    free_list(v, n);
    rmdir(dir);
}

/* ------------------------------------------------------------------ parent */

/* Run a child (this program, re-executed) and capture its JSON line; *peak_kb gets its peak. */
static int spawn(const char *self, const char *dir, int threads, size_t records, long *peak_kb)
{
    char tb[16], rb[32];
    snprintf(tb, sizeof tb, "%d", threads);
    snprintf(rb, sizeof rb, "%zu", records);
    int fd[2];
    if (pipe(fd) != 0)
        return 1;
    fflush(stdout);
    pid_t pid = fork();
    if (pid == 0) {
        close(fd[0]);
        dup2(fd[1], STDOUT_FILENO);
        close(fd[1]);
        execl("/proc/self/exe", self, "--child", dir, tb, rb, (char *)NULL);
        _exit(127);
    }
    close(fd[1]);
    if (pid < 0) {
        close(fd[0]);
        return 1;
    }
    char line[1024];
    size_t got = 0;
    ssize_t r;
    while (got + 1 < sizeof line && (r = read(fd[0], line + got, sizeof line - 1 - got)) > 0)
        got += (size_t)r;
    line[got] = '\0';
    close(fd[0]);
    int st = 0;
    if (waitpid(pid, &st, 0) < 0 || !WIFEXITED(st) || WEXITSTATUS(st) != 0)
        return 1;
    fputs(line, stdout);
    const char *k = strstr(line, "\"peak_rss_kb\":");
    *peak_kb = k ? atol(k + 14) : 0;
    return got == 0;
}

int main(int argc, char **argv)
{
    size_t records = 6, samples = (size_t)1 << 17;
    const char *dir = NULL;
    if (argc == 5 && strcmp(argv[1], "--child") == 0)
        return run_child(argv[2], atoi(argv[3]), (size_t)strtoull(argv[4], NULL, 10));
    for (int i = 1; i < argc; i++) {
        if (strcmp(argv[i], "--smoke") == 0) {
            records = 1;
            samples = (size_t)1 << 12;
        } else if (strcmp(argv[i], "--records") == 0 && i + 1 < argc) {
            records = (size_t)strtoull(argv[++i], NULL, 10);
        } else if (strcmp(argv[i], "--samples") == 0 && i + 1 < argc) {
            samples = (size_t)strtoull(argv[++i], NULL, 10);
        } else if (strcmp(argv[i], "--dir") == 0 && i + 1 < argc) {
            dir = argv[++i];
        } else {
            fprintf(stderr, "usage: bench_campaign [--records K] [--samples N] [--dir DIR] [--smoke]\n");
            return 2;
        }
    }
    if (records < 1 || samples < 64) {
        fprintf(stderr, "bench_campaign: need --records >= 1 and --samples >= 64\n");
        return 2;
    }
    char tmpl[] = "/tmp/bench_campaign_XXXXXX";
    int own = 0;
    if (!dir) {
        if (!mkdtemp(tmpl)) {
            perror("bench_campaign: mkdtemp");
            return 1;
        }
        dir = tmpl;
        own = 1;
        if (generate(dir, 2 * records, samples) != 0) {
            remove_dir(dir);
            return 1;
        }
    }
    int rc = 0;
    long peak[2][2] = {{0, 0}, {0, 0}};   /* [threads-1][K, 2K] */
    for (int threads = 1; threads <= 2; threads++)
        for (int r = 0; r < 2; r++)
            rc |= spawn(argv[0], dir, threads, (size_t)(r + 1) * records, &peak[threads - 1][r]);
    for (int t = 0; t < 2; t++)
        printf("{\"bench\":\"campaign_memory\",\"threads\":%d,\"records_k\":%zu,\"peak_rss_kb_k\":%ld,"
               "\"records_2k\":%zu,\"peak_rss_kb_2k\":%ld,\"ratio_2k_to_k\":%.3f}\n",
               t + 1, records, peak[t][0], 2 * records, peak[t][1],
               peak[t][0] > 0 ? (double)peak[t][1] / (double)peak[t][0] : 0.0);
    if (own)
        remove_dir(dir);
    return rc;
}
