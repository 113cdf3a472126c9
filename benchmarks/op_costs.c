/* Throughput cost of the slow operations that the M1 kernel executes, in ns per operation on
 * one core (thread CPU time, so other users' load does not inflate it).
 *
 * Each measurement keeps 8 independent dependency chains in flight, so it shows the
 * throughput a kernel can reach; the "_latency" lines run one chain, so each operation waits
 * for the previous one, as in a serial formula. Built with lyacomp's
 * flags plus -fno-tree-vectorize -fno-tree-slp-vectorize: the kernel executes these
 * operations one at a time (scalar), and so does this loop.
 * Usage: op_costs ROUNDS  -> lines "name ns_per_op".
 */
#define _POSIX_C_SOURCE 199309L
#include <complex.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <time.h>

static double now(void)
{
    struct timespec t;
    clock_gettime(CLOCK_THREAD_CPUTIME_ID, &t);
    return t.tv_sec + 1e-9 * t.tv_nsec;
}

static volatile double sink;

#define MEASURE_CHAINS(NAME, CHAINS, INIT, STEP)                                   \
    do {                                                                           \
        double x[CHAINS];                                                          \
        for (int k = 0; k < CHAINS; k++)                                           \
            x[k] = INIT;                                                           \
        double t0 = now();                                                         \
        for (long i = 0; i < rounds; i++)                                          \
            for (int k = 0; k < CHAINS; k++)                                       \
                x[k] = STEP;                                                       \
        double t1 = now();                                                         \
        double s = 0.0;                                                            \
        for (int k = 0; k < CHAINS; k++)                                           \
            s += x[k];                                                             \
        sink = s;                                                                  \
        printf("%s %.4f\n", NAME, 1e9 * (t1 - t0) / ((double)rounds * CHAINS));   \
    } while (0)
#define MEASURE(NAME, INIT, STEP) MEASURE_CHAINS(NAME, 8, INIT, STEP)

int main(int argc, char **argv)
{
    const long rounds = argc > 1 ? atol(argv[1]) : 2000000;
    const double a = 1.0000001, b = 0.75;
    /* Each step feeds its result back, so the compiler cannot hoist or drop it. */
    MEASURE("division", 1.0 + k, b / x[k] + 0.5);
    MEASURE("sqrt", 2.0 + k, sqrt(x[k]) + 1.0);
    MEASURE("cabs", 0.5 + k, cabs(x[k] + b * I) * 0.5);
    MEASURE("hypot", 0.5 + k, hypot(x[k], b) * 0.5);
    MEASURE("fmax", 0.5 + k, fmax(x[k], b) * a);
    MEASURE("fmin", 0.5 + k, fmin(x[k], b) * a);
    MEASURE("exp", 0.1 * k, exp(-x[k]));
    MEASURE("tanh", 0.1 * k, tanh(x[k]) + 0.5);
    MEASURE("csqrt", 0.5 + k, creal(csqrt(x[k] + b * I)));
    MEASURE_CHAINS("division_latency", 1, 1.0 + k, b / x[k] + 0.5);
    MEASURE_CHAINS("cabs_latency", 1, 0.5 + k, cabs(x[k] + b * I) * 0.5);
    return 0;
}
