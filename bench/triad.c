/* triad.c - single-core STREAM-style triad a[i] = b[i] + s * c[i] for
 * bench/speed.sh (McCalpin, "Memory Bandwidth and Machine Balance in Current
 * High Performance Computers", IEEE TCCA Newsletter, 1995: 24 bytes counted
 * per element, the write-allocate read of a[] not counted).
 * usage: triad N_ELEMENTS REPS   -> one line per repetition: seconds GB/s */
#define _POSIX_C_SOURCE 200809L
#include <stdio.h>
#include <stdlib.h>
#include <time.h>

static double now(void)
{
    struct timespec t;
    clock_gettime(CLOCK_MONOTONIC, &t);
    return (double)t.tv_sec + 1e-9 * (double)t.tv_nsec;
}

int main(int argc, char **argv)
{
    long n = argc > 1 ? atol(argv[1]) : 1L << 24, reps = argc > 2 ? atol(argv[2]) : 10;
    double *a = malloc((size_t)n * sizeof(double)), *b = malloc((size_t)n * sizeof(double)),
           *c = malloc((size_t)n * sizeof(double));
    if (a == NULL || b == NULL || c == NULL) {
        fprintf(stderr, "triad: out of memory\n");
        return 71;
    }
    for (long i = 0; i < n; i++) a[i] = 0, b[i] = 1.0 + (double)(i & 7), c[i] = 0.5;
    double s = 3.0, check = 0;
    for (long r = 0; r < reps; r++) {
        double t0 = now();
        for (long i = 0; i < n; i++) a[i] = b[i] + s * c[i];
        double t = now() - t0;
        check += a[n / 2];
        printf("%.6f %.3f\n", t, 24.0 * (double)n / t / 1e9);
    }
    fprintf(stderr, "triad checksum %g\n", check);
    free(a);
    free(b);
    free(c);
    return 0;
}
