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

static inline int64_t min64(int64_t a, int64_t b) { return a < b ? a : b; }

/* The vectorised kernels are compiled for the baseline (SSE2) and for AVX2 and
 * AVX-512; the loader picks the widest the CPU runs (a GNU ifunc), as numba
 * compiles for the host CPU. -std=c99 keeps multiply-adds unfused. */
#if defined(__GNUC__) && __GNUC__ >= 11 && !defined(__clang__) && defined(__x86_64__) \
    && defined(__linux__)
#define NC_WIDE __attribute__((target_clones("arch=x86-64-v4", "arch=x86-64-v3", "default")))
#else
#define NC_WIDE
#endif

#define NC_LANES 32 /* partial sums per tile sum: 4 AVX-512 or 8 AVX2 registers */

/* Sum of the lanes as a tree (lane l + lane l + w, halving w): a fixed order. */
static inline double lane_total(double *lane)
{
    for (int w = NC_LANES / 2; w > 0; w /= 2)
        for (int l = 0; l < w; l++)
            lane[l] += lane[l + w];
    return lane[0];
}

static inline double second_diff(const double *a0, const double *a1, const double *a2,
                                 int64_t i)
{
    return a2[i] - 2.0 * a1[i] + a0[i];
}

static inline double third_diff(const double *a0, const double *a1, const double *a2,
                                const double *a3, int64_t i)
{
    return a3[i] - 3.0 * a2[i] + 3.0 * a1[i] - a0[i];
}

/* Tiles t0 .. t1 - 1 of NC_BLOCK terms: every factor's overlapping Allan and
 * Hadamard sums over each tile, into out_a[t * k + j], out_h[t * k + j].
 * allan, hadamard: uint8 flags per factor. Writes only rows t0 .. t1 - 1 and
 * keeps no state, so threads may run disjoint tile ranges at once.
 *
 * Each tile sum is kept in NC_LANES partial sums (term i goes to lane i mod
 * NC_LANES), added as a tree at the end of the tile: the loop then vectorises
 * with independent accumulators (numba's reassociated loops keep several SIMD
 * partial sums too; a single accumulator waits on each add's latency), and,
 * unlike an "omp simd" reduction, the order of the additions is fixed, so the
 * sums do not depend on the vector width the CPU offers. */
NC_WIDE void nc_overlapping_tiles(const double *x, int64_t nx, const int64_t *ms,
                                  int64_t k, const uint8_t *allan,
                                  const uint8_t *hadamard, int64_t t0, int64_t t1,
                                  double *out_a, double *out_h)
{
    for (int64_t t = t0; t < t1; t++) {
        const int64_t i0 = t * NC_BLOCK;
        const int64_t end = i0 + NC_BLOCK;
        for (int64_t j = 0; j < k; j++) {
            const int64_t m = ms[j];
            const int64_t count_a = nx - 2 * m;
            const int64_t count_h = nx - 3 * m;
            double sa = 0.0, sh = 0.0;
            int64_t start = i0;
            int64_t stop = min64(end, count_h);
            if (hadamard[j] && stop > i0) {
                const double *a0 = x + i0, *a1 = x + i0 + m;
                const double *a2 = x + i0 + 2 * m, *a3 = x + i0 + 3 * m;
                double lh[NC_LANES] = {0.0};
                if (allan[j] && stop == end) {
                    /* Both forms in one loop over a full tile. */
                    double la[NC_LANES] = {0.0};
                    for (int64_t i = 0; i < NC_BLOCK; i += NC_LANES)
                        for (int l = 0; l < NC_LANES; l++) {
                            const double d = second_diff(a0, a1, a2, i + l);
                            la[l] += d * d;
                            const double h = third_diff(a0, a1, a2, a3, i + l);
                            lh[l] += h * h;
                        }
                    sa = lane_total(la);
                    start = end;
                } else {
                    const int64_t len = stop - i0;
                    int64_t i = 0;
                    for (; i + NC_LANES <= len; i += NC_LANES)
                        for (int l = 0; l < NC_LANES; l++) {
                            const double h = third_diff(a0, a1, a2, a3, i + l);
                            lh[l] += h * h;
                        }
                    for (int l = 0; i + l < len; l++) {
                        const double h = third_diff(a0, a1, a2, a3, i + l);
                        lh[l] += h * h;
                    }
                }
                sh = lane_total(lh);
            }
            stop = min64(end, count_a);
            if (allan[j] && stop > start) {
                const double *a0 = x + start, *a1 = x + start + m, *a2 = x + start + 2 * m;
                const int64_t len = stop - start;
                double la[NC_LANES] = {0.0};
                int64_t i = 0;
                for (; i + NC_LANES <= len; i += NC_LANES)
                    for (int l = 0; l < NC_LANES; l++) {
                        const double d = second_diff(a0, a1, a2, i + l);
                        la[l] += d * d;
                    }
                for (int l = 0; i + l < len; l++) {
                    const double d = second_diff(a0, a1, a2, i + l);
                    la[l] += d * d;
                }
                sa += lane_total(la);
            }
            out_a[t * k + j] = sa;
            out_h[t * k + j] = sh;
        }
    }
}

/* Column sums of out (tiles x k) added in tile order, into total (k). */
void nc_tile_totals(const double *out, int64_t tiles, int64_t k, double *total)
{
    for (int64_t j = 0; j < k; j++)
        total[j] = 0.0;
    for (int64_t t = 0; t < tiles; t++)
        for (int64_t j = 0; j < k; j++)
            total[j] += out[t * k + j];
}

/* Alpha of the block means z (overwritten): detrend, then lag-1 autocorrelation
 * and differencing (Riley & Greenhall 2004). Reductions vectorised, as numba's
 * reassociated ones. */
static inline __attribute__((always_inline)) int64_t alpha_of_means(double *z, int64_t blocks, int64_t dmax)
{
    const double tc = (blocks - 1) / 2.0;
    double zm = 0.0;
#pragma omp simd reduction(+:zm)
    for (int64_t q = 0; q < blocks; q++)
        zm += z[q];
    zm /= blocks;
    double sxy = 0.0, sxx = 0.0;
#pragma omp simd reduction(+:sxy, sxx)
    for (int64_t q = 0; q < blocks; q++) {
        sxy += (q - tc) * (z[q] - zm);
        sxx += (q - tc) * (q - tc);
    }
    const double slope = sxy / sxx;
    for (int64_t q = 0; q < blocks; q++)
        z[q] -= zm + slope * (q - tc);
    int64_t d = 0;
    int64_t count = blocks;
    for (;;) {
        double mean = 0.0;
#pragma omp simd reduction(+:mean)
        for (int64_t q = 0; q < count; q++)
            mean += z[q];
        mean /= count;
        double den = 0.0, num = 0.0;
#pragma omp simd reduction(+:den, num)
        for (int64_t q = 0; q < count - 1; q++) {
            den += (z[q] - mean) * (z[q] - mean);
            num += (z[q] - mean) * (z[q + 1] - mean);
        }
        den += (z[count - 1] - mean) * (z[count - 1] - mean);
        const double r1 = den > 0 ? num / den : 0.0;
        const double rho = r1 > -1.0 ? r1 / (1.0 + r1) : -1.0;
        if (rho < 0.25 || d >= dmax)
            return (int64_t)(-rint(2.0 * rho)) - 2 * d;
        for (int64_t q = 0; q < count - 1; q++)
            z[q] = z[q + 1] - z[q];
        count -= 1;
        d += 1;
    }
}

/* Lag-1 noise identification at factor m: alpha, or 99 when fewer than
 * min_blocks block means fit. z: work space of min(n / m, max_blocks) values. */
NC_WIDE int64_t nc_noise_id_lag1(const double *y, int64_t n, int64_t m, int64_t dmax,
                         int64_t min_blocks, int64_t max_blocks, double *z)
{
    const int64_t blocks = min64(n / m, max_blocks);
    if (blocks < min_blocks)
        return 99;
    for (int64_t q = 0; q < blocks; q++) {
        double s = 0.0;
        for (int64_t i = q * m; i < (q + 1) * m; i++)
            s += y[i];
        z[q] = s / m;
    }
    return alpha_of_means(z, blocks, dmax);
}

/* Alphas at factors ms (increasing, each a multiple of the one before), into
 * out (99 where too few block means fit). A factor's block sums are those of
 * the factor before added in groups. sums: work space of n / 2 values (the first
 * factor above 1 is at least 2); z: of min(n, max_blocks). */
NC_WIDE void nc_noise_ids_chain(const double *y, int64_t n, const int64_t *ms, int64_t k,
                        int64_t dmax, int64_t min_blocks, int64_t max_blocks,
                        double *sums, double *z, int64_t *out)
{
    for (int64_t j = 0; j < k; j++)
        out[j] = 99;
    const double *src = y;
    int64_t len = n;
    int64_t at = 1;
    for (int64_t j = 0; j < k; j++) {
        const int64_t ratio = ms[j] / at;
        if (ratio > 1) {
            /* In place after the first step: entry q is written after entries
             * q * ratio .. are read, and q <= q * ratio. */
            const int64_t next = len / ratio;
            if (ratio == 2) {
                for (int64_t q = 0; q < next; q++)
                    sums[q] = (0.0 + src[2 * q]) + src[2 * q + 1];
            } else {
                for (int64_t q = 0; q < next; q++) {
                    double s = 0.0;
                    for (int64_t i = q * ratio; i < (q + 1) * ratio; i++)
                        s += src[i];
                    sums[q] = s;
                }
            }
            src = sums;
            len = next;
            at = ms[j];
        }
        const int64_t blocks = min64(len, max_blocks);
        if (blocks < min_blocks)
            break;
        const double div = (double)ms[j];
        for (int64_t q = 0; q < blocks; q++)
            z[q] = src[q] / div;
        out[j] = alpha_of_means(z, blocks, dmax);
    }
}

/* rows segments of n samples from x[start], x[start + step], ...: each less its
 * least-squares line over t (centred abscissae, tt = t.t), times win, into
 * out (rows x n). centre is subtracted from every sample first. */
NC_WIDE void nc_detrended(const double *x, double centre, int64_t start, int64_t step,
                  const double *t, double tt, const double *win, int64_t rows,
                  int64_t n, double *out)
{
    for (int64_t r = 0; r < rows; r++) {
        const double *seg = x + start + r * step;
        double s = 0.0, st = 0.0;
        for (int64_t i = 0; i < n; i++) {
            double v = seg[i] - centre;
            s += v;
            st += v * t[i];
        }
        const double mean = s / n;
        const double slope = st / tt;
        double *o = out + r * n;
        for (int64_t i = 0; i < n; i++)
            o[i] = ((seg[i] - centre) - (mean + slope * t[i])) * win[i];
    }
}

#define NC_STRIP 256

/* acc[k] += sum over rows of |spec[r, k]|^2; spec holds rows x bins complex
 * values as (re, im) pairs. Per bin, the rows are summed in order from 0.0 and
 * the sum then added to acc (numpy's order); bins go in strips so the rows are
 * read along memory. */
NC_WIDE void nc_add_power(const double *spec, int64_t rows, int64_t bins, double *acc)
{
    double chunk[NC_STRIP];
    for (int64_t b0 = 0; b0 < bins; b0 += NC_STRIP) {
        const int64_t w = min64(NC_STRIP, bins - b0);
        for (int64_t q = 0; q < w; q++)
            chunk[q] = 0.0;
        for (int64_t r = 0; r < rows; r++) {
            const double *c = spec + 2 * (r * bins + b0);
            for (int64_t q = 0; q < w; q++)
                chunk[q] += c[2 * q] * c[2 * q] + c[2 * q + 1] * c[2 * q + 1];
        }
        for (int64_t q = 0; q < w; q++)
            acc[b0 + q] += chunk[q];
    }
}

/* One pass over v: counts[0] values below lo, counts[1] inside [lo, hi] (copied
 * to buf, of cap + 1 slots, while they fit; the rest overwrite buf[cap]),
 * counts[2] NaNs. absolute (0 or 1): take |v - centre|. Branch-free: the side
 * a value falls on is a coin toss near the median. */
NC_WIDE void nc_bracket(const double *v, int64_t n, double centre, int64_t absolute,
                double lo, double hi, double *buf, int64_t cap, int64_t *counts)
{
    int64_t below = 0, inside = 0, nan = 0;
    /* One loop per form, so neither tests the flag per value. */
#define NC_BRACKET_STEP(w)                          \
    do {                                            \
        below += (w) < lo;                          \
        nan += (w) != (w);                          \
        buf[min64(inside, cap)] = (w);              \
        inside += ((w) >= lo) & ((w) <= hi);        \
    } while (0)
    if (absolute) {
        for (int64_t i = 0; i < n; i++) {
            const double w = fabs(v[i] - centre);
            NC_BRACKET_STEP(w);
        }
    } else {
        for (int64_t i = 0; i < n; i++) {
            const double w = v[i];
            NC_BRACKET_STEP(w);
        }
    }
#undef NC_BRACKET_STEP
    counts[0] = below;
    counts[1] = inside;
    counts[2] = nan;
}

/* How many |v[i]| > limit. */
NC_WIDE int64_t nc_beyond_count(const double *v, int64_t n, double limit)
{
    int64_t count = 0;
    for (int64_t i = 0; i < n; i++)
        count += fabs(v[i]) > limit;
    return count;
}

/* Indices i with |v[i]| > limit, in order, into out (sized by nc_beyond_count). */
void nc_beyond_fill(const double *v, int64_t n, double limit, int64_t *out)
{
    int64_t q = 0;
    for (int64_t i = 0; i < n; i++)
        if (fabs(v[i]) > limit)
            out[q++] = i;
}
