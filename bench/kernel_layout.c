/* kernel_layout.c - how much the in-memory layout of the transition targets
 * costs a Jacobi Bellman sweep (bench/kernel.sh builds and runs it).
 *
 * Reads raw arrays exported from a model file (see kernel.sh):
 *   DIR/first_pair.i64 [S+1], DIR/first_trans.i64 [P+1], DIR/target.u32 [T],
 *   DIR/prob.f64 [T], DIR/reward.f64 [P], DIR/gamma.txt
 * and times one synchronous sweep y = T x with the residual range and the
 * greedy choice per state, written the way src/solve/kernel.c writes
 * sl_bellman_check (current choice first, relative 1e-13 tie margin), with
 * the targets held as
 *   i64  int64_t (8 B per transition: the solver's layout before it moved
 *        to 32-bit local columns)
 *   u32  uint32_t local columns (4 B per transition: the solver's layout now)
 *   u32v u32 targets and the probabilities value-indexed: a uint16_t index
 *        per transition into a table of the distinct values (6 instead of
 *        12 B per transition; only when there are at most 65,536 distinct
 *        values, as in the reservoir where pairs share inflow distributions)
 * Variants run interleaved, REPS times each; the figure is the minimum and
 * the median over repetitions, wall (CLOCK_MONOTONIC) and CPU
 * (CLOCK_PROCESS_CPUTIME_ID) seconds per sweep. All variants must produce
 * bit-identical y; the program checks it.
 *
 * usage: kernel_layout DIR [REPS]
 */
#define _POSIX_C_SOURCE 200809L
#include <math.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

static void *slurp(const char *dir, const char *name, size_t elem, size_t *count)
{
    char path[4096];
    snprintf(path, sizeof(path), "%s/%s", dir, name);
    FILE *f = fopen(path, "rb");
    if (f == NULL) {
        perror(path);
        exit(66);
    }
    fseek(f, 0, SEEK_END);
    long n = ftell(f);
    fseek(f, 0, SEEK_SET);
    void *buf = malloc((size_t)n + 1);
    if (buf == NULL || fread(buf, 1, (size_t)n, f) != (size_t)n) {
        fprintf(stderr, "%s: cannot read\n", path);
        exit(74);
    }
    fclose(f);
    *count = (size_t)n / elem;
    return buf;
}

static double now(clockid_t c)
{
    struct timespec ts;
    clock_gettime(c, &ts);
    return (double)ts.tv_sec + 1e-9 * (double)ts.tv_nsec;
}

static int cmp_d(const void *a, const void *b);

typedef struct model {
    int64_t S, P, T;
    const int64_t *first_pair, *first_trans;
    const double *prob, *reward;
    double gamma;
} model;

/* one sweep; TGT is the target type, PROB(t) the probability of transition
 * t (pidx/tab: the value-indexed probabilities, unused by the others) */
#define DEFINE_SWEEP(NAME, TGT, PROB)                                                                \
    static void NAME(const model *m, const TGT *target, const uint16_t *pidx, const double *tab,     \
                     const double *x, double *y, int32_t *pol, double *dmin_out, double *dmax_out)  \
    {                                                                                                \
        (void)pidx;                                                                                  \
        (void)tab;                                                                                   \
        double dmin = INFINITY, dmax = -INFINITY;                                                    \
        for (int64_t i = 0; i < m->S; i++) {                                                         \
            int64_t p0 = m->first_pair[i], p1 = m->first_pair[i + 1];                                \
            int32_t cur = pol[i];                                                                    \
            if (cur < 0 || cur >= p1 - p0) cur = 0;                                                  \
            double best = -INFINITY, qcur = 0;                                                       \
            int32_t arg = cur;                                                                       \
            for (int64_t k = p0; k < p1; k++) {                                                      \
                double acc = 0;                                                                      \
                for (int64_t t = m->first_trans[k]; t < m->first_trans[k + 1]; t++)                 \
                    acc += (PROB) * x[target[t]];                                                    \
                double q = m->reward[k] + m->gamma * acc;                                            \
                if (k - p0 == cur) qcur = q;                                                         \
                if (q > best) {                                                                      \
                    best = q;                                                                        \
                    arg = (int32_t)(k - p0);                                                         \
                }                                                                                    \
            }                                                                                        \
            if (arg != cur && best - qcur <= 1e-13 * (fabs(best) + 1e-300)) arg = cur;               \
            pol[i] = arg;                                                                            \
            double d = best - x[i];                                                                  \
            if (d < dmin) dmin = d;                                                                  \
            if (d > dmax) dmax = d;                                                                  \
            y[i] = best;                                                                             \
        }                                                                                            \
        *dmin_out = dmin;                                                                            \
        *dmax_out = dmax;                                                                            \
    }

DEFINE_SWEEP(sweep_i64, int64_t, m->prob[t])
DEFINE_SWEEP(sweep_u32, uint32_t, m->prob[t])
DEFINE_SWEEP(sweep_u32v, uint32_t, tab[pidx[t]])

/* pidx/tab for value-indexed probabilities; returns the number of distinct
 * values, or 0 if more than 65,536 (then the variant is skipped) */
static int64_t index_values(const model *m, uint16_t *pidx, double *tab)
{
    double *sorted = malloc((size_t)m->T * sizeof(double));
    if (sorted == NULL) return 0;
    memcpy(sorted, m->prob, (size_t)m->T * sizeof(double));
    qsort(sorted, (size_t)m->T, sizeof(double), cmp_d);
    int64_t nv = 0;
    for (int64_t t = 0; t < m->T; t++) {
        if (nv > 0 && memcmp(&sorted[t], &tab[nv - 1], sizeof(double)) == 0) continue;
        if (nv == 65536) {
            free(sorted);
            return 0;
        }
        tab[nv++] = sorted[t];
    }
    free(sorted);
    for (int64_t t = 0; t < m->T; t++) {
        int64_t lo = 0, hi = nv - 1;
        while (lo < hi) {
            int64_t mid = (lo + hi) / 2;
            if (tab[mid] < m->prob[t]) lo = mid + 1;
            else hi = mid;
        }
        pidx[t] = (uint16_t)lo;
    }
    return nv;
}

static int cmp_d(const void *a, const void *b)
{
    double x = *(const double *)a, y = *(const double *)b;
    return (x > y) - (x < y);
}

int main(int argc, char **argv)
{
    if (argc < 2) {
        fprintf(stderr, "usage: %s DIR [REPS]\n", argv[0]);
        return 64;
    }
    const char *dir = argv[1];
    int reps = argc > 2 ? atoi(argv[2]) : 15;
    if (reps < 1) reps = 1;
    size_t ns1, np1, nt, nt2, np;
    model m;
    m.first_pair = slurp(dir, "first_pair.i64", 8, &ns1);
    m.first_trans = slurp(dir, "first_trans.i64", 8, &np1);
    uint32_t *t32 = slurp(dir, "target.u32", 4, &nt);
    m.prob = slurp(dir, "prob.f64", 8, &nt2);
    m.reward = slurp(dir, "reward.f64", 8, &np);
    char gbuf[64] = "";
    FILE *g = NULL;
    {
        char path[4096];
        snprintf(path, sizeof(path), "%s/gamma.txt", dir);
        g = fopen(path, "r");
    }
    if (g == NULL || fgets(gbuf, sizeof(gbuf), g) == NULL) {
        fprintf(stderr, "%s/gamma.txt: cannot read\n", dir);
        return 66;
    }
    fclose(g);
    m.gamma = atof(gbuf);
    m.S = (int64_t)ns1 - 1;
    m.P = (int64_t)np;
    m.T = (int64_t)nt;
    if (nt2 != nt || np1 != np + 1 || m.first_trans[m.P] != m.T || m.first_pair[m.S] != m.P) {
        fprintf(stderr, "inconsistent arrays\n");
        return 65;
    }
    int64_t *t64 = malloc((size_t)m.T * sizeof(int64_t));
    uint16_t *pidx = malloc((size_t)m.T * sizeof(uint16_t));
    double *tab = malloc(65536 * sizeof(double));
    double *x = calloc((size_t)m.S, sizeof(double)), *y1 = malloc((size_t)m.S * sizeof(double)),
           *y2 = malloc((size_t)m.S * sizeof(double)), *y3 = malloc((size_t)m.S * sizeof(double));
    int32_t *pol1 = calloc((size_t)m.S, sizeof(int32_t)), *pol2 = calloc((size_t)m.S, sizeof(int32_t)),
            *pol3 = calloc((size_t)m.S, sizeof(int32_t));
    double *tw[3], *tc[3];
    for (int v = 0; v < 3; v++) {
        tw[v] = malloc((size_t)reps * sizeof(double));
        tc[v] = malloc((size_t)reps * sizeof(double));
        if (!tw[v] || !tc[v]) {
            fprintf(stderr, "out of memory\n");
            return 70;
        }
    }
    if (!t64 || !pidx || !tab || !x || !y1 || !y2 || !y3 || !pol1 || !pol2 || !pol3) {
        fprintf(stderr, "out of memory\n");
        return 70;
    }
    for (int64_t t = 0; t < m.T; t++) t64[t] = t32[t];
    int64_t n_values = index_values(&m, pidx, tab);
    int nvar = n_values > 0 ? 3 : 2;
    /* a value vector with the magnitude of a real iterate (not all zeros) */
    for (int64_t i = 0; i < m.S; i++) x[i] = 1000.0 + (double)(i % 977) * 0.25;
    double dmin, dmax;
    sweep_i64(&m, t64, NULL, NULL, x, y1, pol1, &dmin, &dmax); /* warm up, fault pages in */
    sweep_u32(&m, t32, NULL, NULL, x, y2, pol2, &dmin, &dmax);
    if (nvar == 3) sweep_u32v(&m, t32, pidx, tab, x, y3, pol3, &dmin, &dmax);
    for (int r = 0; r < reps; r++) {
        for (int v = 0; v < nvar; v++) {
            int vv = (v + r) % nvar; /* rotate which variant goes first */
            double w0 = now(CLOCK_MONOTONIC), c0 = now(CLOCK_PROCESS_CPUTIME_ID);
            if (vv == 0) sweep_i64(&m, t64, NULL, NULL, x, y1, pol1, &dmin, &dmax);
            else if (vv == 1) sweep_u32(&m, t32, NULL, NULL, x, y2, pol2, &dmin, &dmax);
            else sweep_u32v(&m, t32, pidx, tab, x, y3, pol3, &dmin, &dmax);
            tw[vv][r] = now(CLOCK_MONOTONIC) - w0;
            tc[vv][r] = now(CLOCK_PROCESS_CPUTIME_ID) - c0;
        }
    }
    if (memcmp(y1, y2, (size_t)m.S * sizeof(double)) != 0 || memcmp(pol1, pol2, (size_t)m.S * sizeof(int32_t)) != 0) {
        fprintf(stderr, "variants disagree\n");
        return 70;
    }
    if (nvar == 3 &&
        (memcmp(y1, y3, (size_t)m.S * sizeof(double)) != 0 || memcmp(pol1, pol3, (size_t)m.S * sizeof(int32_t)) != 0)) {
        fprintf(stderr, "value-indexed variant disagrees\n");
        return 70;
    }
    double bytes[3] = {16.0 * m.T + 16.0 * m.P + 28.0 * m.S, 12.0 * m.T + 16.0 * m.P + 28.0 * m.S,
                       6.0 * m.T + 16.0 * m.P + 28.0 * m.S + 8.0 * (double)n_values};
    const char *name[3] = {"i64", "u32", "u32v"};
    printf("{\"states\": %lld, \"pairs\": %lld, \"transitions\": %lld, \"distinct_probabilities\": %lld, "
           "\"reps\": %d, \"variants\": [",
           (long long)m.S, (long long)m.P, (long long)m.T, (long long)n_values, reps);
    for (int v = 0; v < nvar; v++) {
        qsort(tw[v], (size_t)reps, sizeof(double), cmp_d);
        qsort(tc[v], (size_t)reps, sizeof(double), cmp_d);
        printf("%s{\"targets\": \"%s\", \"bytes_per_sweep\": %.0f, \"wall_min\": %.6f, \"wall_median\": %.6f, "
               "\"cpu_min\": %.6f, \"cpu_median\": %.6f}",
               v ? ", " : "", name[v], bytes[v], tw[v][0], tw[v][reps / 2], tc[v][0], tc[v][reps / 2]);
    }
    printf("]}\n");
    return 0;
}
