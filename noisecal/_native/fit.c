/* Fit kernels: the C twins of the numba kernels of noisecal/fit (avar_cov,
 * select_kernel, gauss_markov), same arguments, same order of operations. */
#include "common.h"
