/* words.c - a certificate bound in words: in the reward unit and relative to
 * the smallest value in magnitude. One implementation for the solve
 * summary, verify, evaluate, the JSON reports and `sluice report`'s data. */
#include <math.h>
#include <stdio.h>

#include "analysis/analysis.h"

void sl_value_extent_local(const double *v, int64_t n, double *vmin, double *vmax, double *min_abs)
{
    double lo = INFINITY, hi = -INFINITY, ab = INFINITY;
    for (int64_t s = 0; s < n; s++) {
        double x = v[s];
        if (x < lo) lo = x;
        if (x > hi) hi = x;
        if (fabs(x) < ab) ab = fabs(x);
    }
    *vmin = lo;
    *vmax = hi;
    *min_abs = ab;
}

double sl_bound_relative(double bound, double min_abs)
{
    return min_abs > 0 && isfinite(min_abs) ? bound / min_abs : NAN;
}

void sl_bound_words(double bound, const char *unit, double min_abs, char *buf, size_t n)
{
    double rel = sl_bound_relative(bound, min_abs);
    const char *u = unit && unit[0] ? unit : "reward units";
    if (isnan(rel))
        snprintf(buf, n, "%.2g %s, no relative figure: the smallest value is 0", bound, u);
    else
        snprintf(buf, n, "%.2g %s, %.2g of the smallest value in magnitude", bound, u, rel);
}
