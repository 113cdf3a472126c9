/* FMA-bound loop: the floating-point peak of this machine under the flags it is built with.
 *
 * Each thread updates ACC independent accumulators with fma(acc, a, b): enough independent
 * chains to cover the FMA latency on every FMA pipe, no memory traffic, and the compiler
 * turns the inner loop into packed FMA instructions. One fma counts as 2 flops.
 * Usage: fma_peak SECONDS  -> prints "threads flops wall_seconds cpu_seconds sink"; the CPU
 * seconds are summed over threads, so flops / cpu_seconds is the peak of one core even when
 * other users' work takes turns on the cores.
 */
#define _POSIX_C_SOURCE 199309L
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <time.h>
#include <omp.h>

#define ACC 48
#define INNER 1000000L

int main(int argc, char **argv)
{
    double seconds = argc > 1 ? atof(argv[1]) : 0.5;
    double total_flops = 0.0, elapsed = 0.0, cpu = 0.0, sink = 0.0;
    int threads = 1;
#pragma omp parallel reduction(+ : total_flops, cpu, sink)
    {
#pragma omp single
        threads = omp_get_num_threads();
        double acc[ACC];
        const double a = 0.999999999, b = 1e-9 * (1 + omp_get_thread_num());
        for (int j = 0; j < ACC; ++j)
            acc[j] = 1.0 + j * 1e-3;
#pragma omp barrier
        struct timespec c0, c1;
        clock_gettime(CLOCK_THREAD_CPUTIME_ID, &c0);
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
        clock_gettime(CLOCK_THREAD_CPUTIME_ID, &c1);
        cpu += (c1.tv_sec - c0.tv_sec) + 1e-9 * (c1.tv_nsec - c0.tv_nsec);
        total_flops += 2.0 * ACC * INNER * rounds;
#pragma omp critical
        if (t1 - t0 > elapsed)
            elapsed = t1 - t0;
        for (int j = 0; j < ACC; ++j)
            sink += acc[j];
    }
    printf("%d %.6e %.6f %.6f %g\n", threads, total_flops, elapsed, cpu, sink);
    return 0;
}
