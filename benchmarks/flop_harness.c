/* Driver for counting the floating-point work of a generated lyacomp kernel (see flops.py).
 *
 * Calls PREFIX_evaluate once per parameter row, set up as one sample of a batch call is,
 * or with -DBATCH PREFIX_evaluate_batch once over all rows (one thread).
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
#ifdef BATCH
    /* One batch call over all rows on one thread, as the batch benchmark times it (with
       the warm start: the lane path of two- and three-state models). */
    const double **columns = malloc(sizeof(double *) * (size_t)(np > 0 ? np : 1));
    long *strides = malloc(sizeof(long) * (size_t)(np > 0 ? np : 1));
    int *status = malloc(sizeof(int) * (size_t)rows);
    int *unstable = malloc(sizeof(int) * (size_t)rows);
    signed char *small = malloc((size_t)(3 * rows));
    double *values = malloc(sizeof(double) * (size_t)(rows * (5 + 2 * n)));
    for (long k = 0; k < np; k++) {
        columns[k] = params + k;
        strides[k] = np;
    }
    CAT(PREFIX, _batch_out) out;
    out.status = status;
    out.unstable_count = unstable;
    out.criticality = small;
    out.cycle_side = small + rows;
    out.stable_side = small + 2 * rows;
    out.l1 = values;
    out.omega = values + rows;
    out.period = values + 2 * rows;
    out.critical_value = values + 3 * rows;
    out.transversality = values + 4 * rows;
    out.equilibrium = values + 5 * rows;
    out.amplitude = values + (5 + n) * rows;
#ifdef PREPARE_ARGS
    CAT(PREFIX, _evaluate_batch)(rows, columns, strides, guess, &start, &options, 1, &out);
#else
    CAT(PREFIX, _evaluate_batch)(rows, columns, strides, guess, NULL, &options, 1, &out);
#endif
    for (long i = 0; i < rows; i++) {
        ok += status[i] == 0;
    }
    free(columns);
    free(strides);
    free(status);
    free(unstable);
    free(small);
    free(values);
    (void)result;
#else
    for (long i = 0; i < rows; i++) {
        const double *row = params + i * np;
        CAT(PREFIX, _evaluate)(EVALUATE_ARGS);
        ok += result.status == 0;
    }
#endif
    printf("%ld\n", ok);
    (void)nominal;
    free(params);
    free(guess);
    free(nominal);
    return 0;
}
