/* names.c - names of objectives, methods and sweep orders. */
#include <string.h>

#include "sluice/sluice.h"

static const char *const objective_names[] = {"discounted", "total", "average", "finite"};
static const char *const method_names[] = {"gs", "jacobi", "mpi", "pi"};
static const char *const order_names[] = {"auto", "natural", "stage-reverse", "reverse"};

static int find(const char *const *names, int n, const char *name)
{
    for (int i = 0; i < n; i++)
        if (strcmp(names[i], name) == 0) return i;
    return -1;
}

int sl_objective_parse(const char *name, sl_objective *out)
{
    int i = find(objective_names, 4, name);
    if (i >= 0) *out = (sl_objective)i;
    return i >= 0;
}

const char *sl_objective_name(sl_objective obj)
{
    return (unsigned)obj < 4 ? objective_names[obj] : "unknown";
}

int sl_method_parse(const char *name, sl_method *out)
{
    int i = find(method_names, 4, name);
    if (i >= 0) *out = (sl_method)i;
    return i >= 0;
}

const char *sl_method_name(sl_method m) { return (unsigned)m < 4 ? method_names[m] : "unknown"; }

int sl_order_parse(const char *name, sl_order *out)
{
    int i = find(order_names, 4, name);
    if (i >= 0) *out = (sl_order)i;
    return i >= 0;
}

const char *sl_order_name(sl_order o) { return (unsigned)o < 4 ? order_names[o] : "unknown"; }
