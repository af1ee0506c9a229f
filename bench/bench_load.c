/* Benchmark: loading speed (MB/s) of delimited text, raw binary and .npy records, and the peak
 * memory of loading one large complex record relative to its in-memory size.
 *
 * usage: bench_load [--samples N] [--smoke]
 * Prints one JSON object per line: {"bench":"load","format":...,"mb_per_s":...,...}.
 * Files are written to a temporary folder and removed afterwards. Reading is timed with the file
 * in the page cache (the second of two loads), so the figure is parse/convert speed, not disk. */
#include <collshift/io.h>

#include <complex.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/resource.h>
#include <time.h>
#include <sys/wait.h>
#include <unistd.h>

#define PI_ 3.14159265358979323846

static double now(void)
{
    struct timespec ts;
    clock_gettime(CLOCK_MONOTONIC, &ts);
    return (double)ts.tv_sec + 1e-9 * (double)ts.tv_nsec;
}

static long peak_rss_kb(void)
{
    struct rusage ru;
    getrusage(RUSAGE_SELF, &ru);
    return ru.ru_maxrss;
}

static long current_rss_kb(void)
{
    long pages = 0, rss = 0;
    FILE *f = fopen("/proc/self/statm", "r");
    if (f) {
        if (fscanf(f, "%ld %ld", &pages, &rss) != 2)
            rss = 0;
        fclose(f);
    }
    return rss * (sysconf(_SC_PAGESIZE) / 1024);
}

static double file_mb(const char *path)
{
    FILE *f = fopen(path, "rb");
    if (!f)
        return 0;
    fseek(f, 0, SEEK_END);
    long n = ftell(f);
    fclose(f);
    return (double)n / 1e6;
}

static int time_load(const char *label, const char *path, const cs_load_options *o, size_t expect_n)
{
    cs_loaded l;
    cs_error err;
    double best = 1e30;
    for (int rep = 0; rep < 2; rep++) {
        double t0 = now();
        if (cs_io_load(path, o, &l, &err) != CS_OK) {
            char buf[1024];
            fprintf(stderr, "bench_load: %s\n", cs_error_format(&err, buf, sizeof buf));
            return 1;
        }
        double dt = now() - t0;
        if (dt < best)
            best = dt;
        size_t n = l.kind == CS_KIND_RECORD ? l.records[0]->n : l.spectrum->n;
        cs_loaded_release(&l);
        if (n != expect_n) {
            fprintf(stderr, "bench_load: %s: loaded %zu samples, expected %zu\n", label, n, expect_n);
            return 1;
        }
    }
    double mb = file_mb(path);
    printf("{\"bench\":\"load\",\"format\":\"%s\",\"samples\":%zu,\"file_mb\":%.3f,\"seconds\":%.5f,\"mb_per_s\":%.1f}\n",
           label, expect_n, mb, best, mb / best);
    return 0;
}

/* Child mode: load one raw cf64 record and report peak RSS growth relative to the data size. */
static int memory_child(const char *path, size_t n)
{
    long before = current_rss_kb();
    cs_load_options o;
    cs_load_options_init(&o);
    o.raw_type = CS_RAW_CF64;
    o.sample_rate_hz = 500e6;
    cs_loaded l;
    cs_error err;
    if (cs_io_load(path, &o, &l, &err) != CS_OK)
        return 1;
    long peak = peak_rss_kb();
    double data_mb = (double)n * 16 / 1e6;
    double grown = (double)(peak - before) * 1024 / 1e6;
    printf("{\"bench\":\"load_memory\",\"format\":\"raw_cf64\",\"samples\":%zu,\"data_mb\":%.2f,"
           "\"peak_rss_growth_mb\":%.2f,\"ratio\":%.3f}\n", n, data_mb, grown, grown / data_mb);
    cs_loaded_release(&l);
    return 0;
}

int main(int argc, char **argv)
{
    size_t n = (size_t)1 << 20;
    if (argc == 4 && strcmp(argv[1], "--memory-raw") == 0)
        return memory_child(argv[2], (size_t)strtoull(argv[3], NULL, 10));
    for (int i = 1; i < argc; i++) {
        if (strcmp(argv[i], "--smoke") == 0)
            n = 4096;
        else if (strcmp(argv[i], "--samples") == 0 && i + 1 < argc)
            n = (size_t)strtoull(argv[++i], NULL, 10);
    }
    char dir[] = "/tmp/cs_bench_XXXXXX";
    if (!mkdtemp(dir)) {
        perror("mkdtemp");
        return 1;
    }
    char text[64], raw[64], npy[64];
    snprintf(text, sizeof text, "%s/rec.csv", dir);
    snprintf(raw, sizeof raw, "%s/rec.cf64", dir);
    snprintf(npy, sizeof npy, "%s/rec.npy", dir);

    /* one synthetic complex record: a decaying tone plus a little deterministic jitter */
    cs_record *r = cs_record_alloc(n, 1);
    if (!r)
        return 1;
    r->dt_s = 2e-9;
    for (size_t i = 0; i < n; i++) {
        double t = (double)i * r->dt_s;
        double complex z = cexp(-t / 1e-3) * cexp(2.0 * PI_ * I * 37e6 * t) + 1e-3 * (double)(i % 7);
        r->data[2 * i] = creal(z);
        r->data[2 * i + 1] = cimag(z);
    }
    cs_error err;
    int rc = 0;
    if (cs_io_text_write_record(text, r, &err) != CS_OK || cs_io_npy_write_records(npy, &r, 1, &err) != CS_OK) {
        char buf[1024];
        fprintf(stderr, "bench_load: %s\n", cs_error_format(&err, buf, sizeof buf));
        return 1;
    }
    FILE *f = fopen(raw, "wb");
    if (!f || fwrite(r->data, sizeof(double), 2 * n, f) != 2 * n || fclose(f) != 0) {
        perror(raw);
        return 1;
    }
    cs_record_free(r);

    cs_load_options o;
    cs_load_options_init(&o);
    rc |= time_load("text", text, &o, n);
    cs_load_options_init(&o);
    o.raw_type = CS_RAW_CF64;
    o.sample_rate_hz = 500e6;
    rc |= time_load("raw_cf64", raw, &o, n);
    cs_load_options_init(&o);
    o.sample_rate_hz = 500e6;
    rc |= time_load("npy_c16", npy, &o, n);

    /* peak memory of one load of the raw record, measured in a fresh process (so earlier loads
     * and the writing above do not count) */
    char nbuf[32];
    snprintf(nbuf, sizeof nbuf, "%zu", n);
    fflush(stdout);
    pid_t pid = fork();
    if (pid == 0) {
        execl("/proc/self/exe", argv[0], "--memory-raw", raw, nbuf, (char *)NULL);
        _exit(127);
    }
    int st = 0;
    if (pid < 0 || waitpid(pid, &st, 0) < 0 || !WIFEXITED(st) || WEXITSTATUS(st) != 0)
        rc = 1;
    unlink(text);
    unlink(raw);
    unlink(npy);
    rmdir(dir);
    return rc;
}
