/* Example: link libcollshift from another C program, load any lab file and describe it.
 * Build against an installed collshift:  cc describe.c $(pkg-config --cflags --libs collshift) */
#include <collshift/io.h>

#include <stdio.h>

int main(int argc, char **argv)
{
    if (argc < 2) {
        fprintf(stderr, "usage: describe FILE\n");
        return 2;
    }
    cs_loaded l;
    cs_error err;
    cs_error_clear(&err);
    if (cs_io_load(argv[1], NULL, &l, &err) != CS_OK) {
        char buf[1024];
        fprintf(stderr, "describe: %s\n", cs_error_format(&err, buf, sizeof buf));
        return 3;
    }
    if (l.kind == CS_KIND_SPECTRUM)
        printf("spectrum %zu points %.17g %.17g\n", l.spectrum->n, l.spectrum->freq_hz[0],
               l.spectrum->freq_hz[l.spectrum->n - 1]);
    else
        printf("record %zu shots %zu samples dt %.17g\n", l.nrecords, l.records[0]->n,
               l.records[0]->dt_s);
    cs_loaded_release(&l);
    return 0;
}
