/* Replays inputs through a libFuzzer harness without libFuzzer: every file named on the command
 * line, and every regular file in a folder named there, is passed once to
 * LLVMFuzzerTestOneInput. ctest runs each harness over its seed corpus (tests/corpus/HARNESS/),
 * which also holds every input a fuzzing run ever found a problem with, so those stay fixed.
 * A harness aborts (fuzz_assert) when the library breaks its contract: the test then fails. */
#include <dirent.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size);

static int replay_file(const char *path)
{
    FILE *f = fopen(path, "rb");
    if (!f) {
        fprintf(stderr, "replay: cannot open %s\n", path);
        return -1;
    }
    size_t cap = 4096, n = 0;
    uint8_t *buf = malloc(cap);
    size_t got;
    while (buf && (got = fread(buf + n, 1, cap - n, f)) > 0) {
        n += got;
        if (n == cap) {
            uint8_t *nb = realloc(buf, cap *= 2);
            if (!nb) {
                free(buf);
                buf = NULL;
            }
            buf = nb;
        }
    }
    fclose(f);
    if (!buf) {
        fprintf(stderr, "replay: out of memory reading %s\n", path);
        return -1;
    }
    /* libFuzzer hands over a buffer of exactly the input's size: copy it so that ASan sees reads
     * past the end */
    uint8_t *exact = malloc(n ? n : 1);
    if (!exact) {
        free(buf);
        return -1;
    }
    memcpy(exact, buf, n);
    free(buf);
    LLVMFuzzerTestOneInput(exact, n);
    free(exact);
    return 0;
}

static int cmp_str(const void *a, const void *b)
{
    return strcmp(*(char *const *)a, *(char *const *)b);
}

int main(int argc, char **argv)
{
    int count = 0, bad = 0;
    for (int i = 1; i < argc; i++) {
        struct stat st;
        if (stat(argv[i], &st) != 0) {
            fprintf(stderr, "replay: no such file or folder: %s\n", argv[i]);
            return 1;
        }
        if (!S_ISDIR(st.st_mode)) {
            bad += replay_file(argv[i]) != 0;
            count++;
            continue;
        }
        DIR *d = opendir(argv[i]);
        if (!d) {
            fprintf(stderr, "replay: cannot read folder %s\n", argv[i]);
            return 1;
        }
        char **names = NULL;
        size_t nn = 0;
        struct dirent *e;
        while ((e = readdir(d)) != NULL) {
            if (e->d_name[0] == '.')
                continue;
            char **nw = realloc(names, (nn + 1) * sizeof *names);
            if (!nw)
                break;
            names = nw;
            size_t len = strlen(argv[i]) + strlen(e->d_name) + 2;
            names[nn] = malloc(len);
            if (!names[nn])
                break;
            snprintf(names[nn], len, "%s/%s", argv[i], e->d_name);
            nn++;
        }
        closedir(d);
        qsort(names, nn, sizeof *names, cmp_str);   /* same order on every machine */
        for (size_t k = 0; k < nn; k++) {
            struct stat fs;
            if (stat(names[k], &fs) == 0 && S_ISREG(fs.st_mode)) {
                bad += replay_file(names[k]) != 0;
                count++;
            }
            free(names[k]);
        }
        free(names);
    }
    printf("replay: %d inputs, %d unreadable\n", count, bad);
    return count == 0 || bad ? 1 : 0;
}
