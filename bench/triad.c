/* triad.c - single-core STREAM-style triad a[i] = b[i] + s * c[i] for
 * bench/speed.sh (McCalpin, "Memory Bandwidth and Machine Balance in Current
 * High Performance Computers", IEEE TCCA Newsletter, 1995: 24 bytes counted
 * per element, the write-allocate read of a[] not counted).
 * usage: triad N_ELEMENTS REPS   -> one line per repetition: seconds GB/s
 *        triad N_ELEMENTS REPS read12
 *   instead streams what a Jacobi sweep streams per transition and nothing
 *   else: a 4-byte column and an 8-byte probability, summed (12 bytes
 *   counted per element, no gather of x[col], no per-pair work). What it
 *   reaches against the triad is a ceiling for the sweep on this machine:
 *   the sweep reads these bytes and more.
 *        triad N_ELEMENTS REPS gather12 N_STATES PER_STATE WIDTH JUMP
 *   the same records, and for each the product p * x[col] summed into four
 *   accumulators, col drawn as bench/random_sparse.c draws successors:
 *   element i belongs to state s = (i / PER_STATE) mod N_STATES, and its
 *   column is within WIDTH of s, or anywhere with probability JUMP (x is
 *   N_STATES doubles). The least a sweep over that model must do per
 *   transition (12 bytes counted per element, as for the sweep; x's reads
 *   not counted); no per-pair work (action maximum, pair boundaries), so
 *   the sweep cannot beat it by much either. */
#define _POSIX_C_SOURCE 200809L
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

static double now(void)
{
    struct timespec t;
    clock_gettime(CLOCK_MONOTONIC, &t);
    return (double)t.tv_sec + 1e-9 * (double)t.tv_nsec;
}

/* Four accumulators over n elements of E(k). */
#define SUM4(E)                                   \
    do {                                          \
        for (; i + 3 < n; i += 4) {               \
            a0 += E(i);                           \
            a1 += E(i + 1);                       \
            a2 += E(i + 2);                       \
            a3 += E(i + 3);                       \
        }                                         \
        for (; i < n; i++) a0 += E(i);            \
    } while (0)
#define READ(k) (p[k] + (double)col[k])
#define GATHER(k) (p[k] * x[col[k]])

/* The timed runs over the records (col, p): with x, the gather; else the
 * read-only stream. Frees what it is given. */
static int stream12(const char *name, long n, long reps, uint32_t *col, double *p, double *x)
{
    double check = 0;
    for (long r = 0; r < reps; r++) {
        double t0 = now(), a0 = 0, a1 = 0, a2 = 0, a3 = 0;
        long i = 0;
        if (x != NULL) SUM4(GATHER);
        else SUM4(READ);
        double t = now() - t0;
        check += a0 + a1 + a2 + a3;
        printf("%.6f %.3f\n", t, 12.0 * (double)n / t / 1e9);
    }
    fprintf(stderr, "%s checksum %g\n", name, check);
    free(col);
    free(p);
    free(x);
    return 0;
}

static int read12(long n, long reps)
{
    uint32_t *col = malloc((size_t)n * sizeof(uint32_t));
    double *p = malloc((size_t)n * sizeof(double));
    if (col == NULL || p == NULL) {
        fprintf(stderr, "triad: out of memory\n");
        free(col);
        free(p);
        return 71;
    }
    for (long i = 0; i < n; i++) col[i] = (uint32_t)(i & 1023), p[i] = 1.0 / (double)(1 + (i & 7));
    return stream12("read12", n, reps, col, p, NULL);
}

static int gather12(long n, long reps, long ns, long per, long width, double jump)
{
    if (ns < 1 || per < 1 || width < 0) {
        fprintf(stderr, "triad: gather12 needs N_STATES >= 1, PER_STATE >= 1, WIDTH >= 0\n");
        return 64;
    }
    uint32_t *col = malloc((size_t)n * sizeof(uint32_t));
    double *p = malloc((size_t)n * sizeof(double)), *x = malloc((size_t)ns * sizeof(double));
    if (col == NULL || p == NULL || x == NULL) {
        fprintf(stderr, "triad: out of memory\n");
        free(col);
        free(p);
        free(x);
        return 71;
    }
    uint64_t z = 0x9e3779b97f4a7c15ULL; /* xorshift64: fixed, so every run gathers alike */
    for (long i = 0; i < n; i++) {
        z ^= z << 13;
        z ^= z >> 7;
        z ^= z << 17;
        long st = (i / per) % ns, c;
        if ((double)(z >> 11) * (1.0 / 9007199254740992.0) < jump) c = (long)((z >> 7) % (uint64_t)ns);
        else c = (((st + (long)((z >> 7) % (uint64_t)(2 * width + 1)) - width) % ns) + ns) % ns;
        col[i] = (uint32_t)c;
        p[i] = 1.0 / (double)(1 + (i & 7));
    }
    for (long i = 0; i < ns; i++) x[i] = 1.0 + (double)(i & 15);
    return stream12("gather12", n, reps, col, p, x);
}

int main(int argc, char **argv)
{
    long n = argc > 1 ? atol(argv[1]) : 1L << 24, reps = argc > 2 ? atol(argv[2]) : 10;
    if (argc > 3 && strcmp(argv[3], "read12") == 0) return read12(2 * n, reps);
    if (argc > 7 && strcmp(argv[3], "gather12") == 0)
        return gather12(2 * n, reps, atol(argv[4]), atol(argv[5]), atol(argv[6]), atof(argv[7]));
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
