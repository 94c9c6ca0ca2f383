/* Shared declarations of noisecal's C kernels (called through ctypes, which
 * releases the GIL for the call). Arrays are C-contiguous float64 / int64 /
 * uint8 buffers; sizes are int64. */
#ifndef NOISECAL_NATIVE_COMMON_H
#define NOISECAL_NATIVE_COMMON_H
#include <stdint.h>
#include <stddef.h>
#include <math.h>

#define NC_BLOCK 4096 /* terms per blocked partial sum: the numba kernels' _BLOCK */

#endif
