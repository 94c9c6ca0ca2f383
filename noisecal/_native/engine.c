/* Deviation-engine kernels: the C twins of noisecal/analysis/engine.py's numba
 * kernels, same arguments, same order of operations. */
#include "common.h"

/* Phase of y: x[0] = 0, x[i+1] = x[i] + (y[i] - mean) * period; x has n + 1 slots. */
void nc_integrate(const double *y, int64_t n, double mean, double period, double *x)
{
    double acc = 0.0;
    x[0] = 0.0;
    for (int64_t i = 0; i < n; i++) {
        acc += (y[i] - mean) * period;
        x[i + 1] = acc;
    }
}
