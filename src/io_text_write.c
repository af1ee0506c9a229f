/* Delimited text: writing a spectrum or a record as CSV with its metadata as comment lines. */
#include <collshift/io.h>

#include <errno.h>
#include <math.h>
#include <stdio.h>
#include <string.h>

/* Metadata text on one line: control characters become blanks. */
static void put_clean(FILE *f, const char *s)
{
    for (; s && *s; s++)
        fputc((unsigned char)*s < 0x20 ? ' ' : *s, f);
}

static void put_meta(FILE *f, const cs_meta *m)
{
    for (size_t i = 0; i < m->n; i++) {
        const cs_meta_entry *e = &m->e[i];
        fputs("# ", f);
        put_clean(f, e->key);
        fputs(" = ", f);
        put_clean(f, e->text);
        if (e->unit && *e->unit) {
            fputc(' ', f);
            put_clean(f, e->unit);
        }
        fputc('\n', f);
    }
}

static int close_checked(FILE *f, const char *path, cs_error *err)
{
    int bad = ferror(f);
    int saved = errno;
    if (fclose(f) != 0 && !bad) {
        bad = 1;
        saved = errno;
    }
    if (bad)
        return cs_error_set(err, CS_EIO, path, -1, -1, "cannot write: %s", strerror(saved));
    return CS_OK;
}

int cs_io_text_write_spectrum(const char *path, const cs_spectrum *s, cs_error *err)
{
    if (!path || !s || (s->n && (!s->freq_hz || !s->y)))
        return cs_error_set(err, CS_EINVAL, path, -1, -1, "no spectrum to write");
    for (size_t i = 0; i < s->n; i++)
        if (!isfinite(s->freq_hz[i]) || !isfinite(s->y[i]) || (s->sigma && !isfinite(s->sigma[i])))
            return cs_error_set(err, CS_EINVAL, path, -1, -1,
                                "point %zu is NaN or infinite: nothing written", i);
    FILE *f = fopen(path, "wb");
    if (!f)
        return cs_error_set(err, CS_EIO, path, -1, -1, "cannot create: %s", strerror(errno));
    put_meta(f, &s->meta);
    fputs(s->sigma ? "frequency_hz,y,sigma\n" : "frequency_hz,y\n", f);
    for (size_t i = 0; i < s->n && !ferror(f); i++) {
        if (s->sigma)
            fprintf(f, "%.17g,%.17g,%.17g\n", s->freq_hz[i], s->y[i], s->sigma[i]);
        else
            fprintf(f, "%.17g,%.17g\n", s->freq_hz[i], s->y[i]);
    }
    return close_checked(f, path, err);
}

int cs_io_text_write_record(const char *path, const cs_record *r, cs_error *err)
{
    if (!path || !r || (r->n && !r->data))
        return cs_error_set(err, CS_EINVAL, path, -1, -1, "no record to write");
    size_t w = r->is_complex ? 2 : 1;
    if (!isfinite(r->t0_s) || !isfinite(r->dt_s) || !(r->dt_s > 0))
        return cs_error_set(err, CS_EINVAL, path, -1, -1,
                            "the record's time axis (t0 %g s, dt %g s) is not usable", r->t0_s,
                            r->dt_s);
    for (size_t i = 0; i < r->n * w; i++)
        if (!isfinite(r->data[i]))
            return cs_error_set(err, CS_EINVAL, path, -1, -1,
                                "sample %zu is NaN or infinite: nothing written", i / w);
    FILE *f = fopen(path, "wb");
    if (!f)
        return cs_error_set(err, CS_EIO, path, -1, -1, "cannot create: %s", strerror(errno));
    put_meta(f, &r->meta);
    fputs(r->is_complex ? "time_s,i,q\n" : "time_s,y\n", f);
    for (size_t i = 0; i < r->n && !ferror(f); i++) {
        double t = r->t0_s + (double)i * r->dt_s;
        if (r->is_complex)
            fprintf(f, "%.17g,%.17g,%.17g\n", t, r->data[2 * i], r->data[2 * i + 1]);
        else
            fprintf(f, "%.17g,%.17g\n", t, r->data[i]);
    }
    return close_checked(f, path, err);
}
