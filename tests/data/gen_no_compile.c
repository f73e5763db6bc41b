/* gen_no_compile.c - test generator that must not compile (invented, for tests).
 * The function below uses an undeclared identifier on purpose; the build
 * must fail with exit 65 and show the compiler's message, which names
 * `undeclared_flow_rate`. */
#include "sluice/generator.h"

static int broken_init(const double *v, sluice_shape *shape, void **instance,
                       char *err, size_t errlen)
{
    (void)v; (void)instance; (void)err; (void)errlen;
    shape->n_states = undeclared_flow_rate;
    return 0;
}
