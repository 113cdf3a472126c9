/* FMA-bound loop: the floating-point peak of this machine under the flags it is built with.
 *
 * Each thread updates ACC independent accumulators with fma(acc, a, b): enough independent
 * chains to cover the FMA latency on every FMA pipe, no memory traffic, and the compiler
 * turns the inner loop into packed FMA instructions. One fma counts as 2 flops.
 * Usage: fma_peak SECONDS  -> prints "threads flops seconds".
 */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <omp.h>

#define ACC 48
#define INNER 1000000L

int main(int argc, char **argv)
{
    double seconds = argc > 1 ? atof(argv[1]) : 0.5;
    double total_flops = 0.0, elapsed = 0.0, sink = 0.0;
    int threads = 1;
#pragma omp parallel reduction(+ : total_flops, sink)
    {
#pragma omp single
        threads = omp_get_num_threads();
        double acc[ACC];
        const double a = 0.999999999, b = 1e-9 * (1 + omp_get_thread_num());
        for (int j = 0; j < ACC; ++j)
            acc[j] = 1.0 + j * 1e-3;
#pragma omp barrier
        double t0 = omp_get_wtime();
        long rounds = 0;
        do {
            for (long i = 0; i < INNER; ++i) {
#pragma omp simd
                for (int j = 0; j < ACC; ++j)
                    acc[j] = fma(acc[j], a, b);
            }
            ++rounds;
        } while (omp_get_wtime() - t0 < seconds);
        double t1 = omp_get_wtime();
        total_flops += 2.0 * ACC * INNER * rounds;
#pragma omp critical
        if (t1 - t0 > elapsed)
            elapsed = t1 - t0;
        for (int j = 0; j < ACC; ++j)
            sink += acc[j];
    }
    printf("%d %.6e %.6f %g\n", threads, total_flops, elapsed, sink);
    return 0;
}
