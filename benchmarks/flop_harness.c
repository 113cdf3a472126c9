/* Driver for counting the floating-point work of a generated lyacomp kernel (see flops.py).
 *
 * Calls PREFIX_evaluate once per parameter row, set up as one sample of a batch call is.
 * flops.py builds it next to the emitted model.c / model.h with
 *   -DPREFIX=<prefix>  -DEVALUATE_ARGS="row, guess, ..."  and, when the interface has a
 *   warm start, -DPREPARE_ARGS="nominal, guess, ..." (argument order read from cffi).
 * Usage: flop_harness PARAMS.bin ROWS NPARAMS GUESS.bin NSTATES NOMINAL.bin
 * (raw little-endian doubles).
 */
#include <stdio.h>
#include <stdlib.h>
#include "model.h"

#define CAT2(a, b) a##b
#define CAT(a, b) CAT2(a, b)

static double *read_doubles(const char *path, long count)
{
    double *data = malloc(sizeof(double) * (size_t)(count > 0 ? count : 1));
    FILE *f = fopen(path, "rb");
    if (!data || !f || fread(data, sizeof(double), (size_t)count, f) != (size_t)count) {
        fprintf(stderr, "cannot read %ld doubles from %s\n", count, path);
        exit(2);
    }
    fclose(f);
    return data;
}

int main(int argc, char **argv)
{
    if (argc != 7) {
        fprintf(stderr, "usage: %s PARAMS.bin ROWS NPARAMS GUESS.bin NSTATES NOMINAL.bin\n",
                argv[0]);
        return 2;
    }
    const long rows = atol(argv[2]), np = atol(argv[3]), n = atol(argv[5]);
    double *params = read_doubles(argv[1], rows * np);
    double *guess = read_doubles(argv[4], n);
    double *nominal = read_doubles(argv[6], np);
    CAT(PREFIX, _options) options;
    CAT(PREFIX, _result) result;
    CAT(PREFIX, _default_options)(&options);
#ifdef PREPARE_ARGS
    CAT(PREFIX, _start) start;
    CAT(PREFIX, _prepare_start)(PREPARE_ARGS);
#endif
    long ok = 0;
    for (long i = 0; i < rows; i++) {
        const double *row = params + i * np;
        CAT(PREFIX, _evaluate)(EVALUATE_ARGS);
        ok += result.status == 0;
    }
    printf("%ld\n", ok);
    (void)nominal;
    free(params);
    free(guess);
    free(nominal);
    return 0;
}
