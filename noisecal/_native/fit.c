/* Fit kernels: the C twins of the numba kernels of noisecal/fit (avar_cov,
 * select_kernel, gauss_markov), same arguments, same order of operations.
 * Scratch memory is on the stack or malloc'd per call: calls run concurrently on
 * threads. */
#include "common.h"
#include <stdlib.h>
#include <string.h>

#define NC_PI 3.141592653589793

static double nc_min(double a, double b) { return b < a ? b : a; }
static double nc_max(double a, double b) { return b > a ? b : a; }

/* ------------------------------------------------------------------------- */
/* avar_cov: exact covariance of overlapping Allan points (lag sums per pair). */

static double e_tail_1(double u)
{
    if (u < 0.5) {
        double term = -u * u * u / 6.0;
        double acc = term;
        for (int k = 4; k < 16; k++) {
            term = -term * u / k;
            acc += term;
        }
        return acc;
    }
    return exp(-u) - 1.0 + u - 0.5 * u * u;
}

static double g_1(double t, double white, double k2, double b2, const double *parts,
                  int64_t nparts)
{
    double a = fabs(t);
    double g = -white * a;
    if (k2 > 0.0)
        g += k2 / 12.0 * a * a * a;
    if (b2 > 0.0 && a > 0.0)
        g += b2 / (2.0 * NC_PI) * a * a * log(a);
    for (int64_t e = 0; e < nparts; e++)
        g -= parts[3 * e] * a + parts[3 * e + 1] * e_tail_1(a / parts[3 * e + 2]);
    return g;
}

static double nine_1(double lag, double a, double b, double period, double white,
                     double k2, double b2, const double *parts, int64_t nparts)
{
    double out = 0.0;
    for (int fp = 0; fp < 3; fp++) {
        double wp = fp != 1 ? 1.0 : -2.0;
        for (int fq = 0; fq < 3; fq++) {
            double wq = fq != 1 ? 1.0 : -2.0;
            out += wp * wq * g_1((lag + fq * b - fp * a) * period, white, k2, b2, parts,
                                 nparts);
        }
    }
    return out;
}

static double c_1(double lag, double a, double b, double period, double white, double k2,
                  double b2, const double *parts, int64_t nparts, double far_factor)
{
    if (lag < 2.0 * a && lag > -2.0 * b)
        return nine_1(lag, a, b, period, white, k2, b2, parts, nparts);
    double out = 0.0;
    if (b2 > 0.0) {
        if (fabs(lag) > far_factor * (a + b)) {
            double t = (lag + b - a) * period;
            double ab = a * b, p2 = period * period;
            out -= 2.0 * b2 / (2.0 * NC_PI) * (ab * ab) * (p2 * p2) / (t * t);
        } else {
            out += nine_1(lag, a, b, period, 0.0, 0.0, b2, parts, 0);
        }
    }
    for (int64_t e = 0; e < nparts; e++) {
        double C = parts[3 * e + 1], T = parts[3 * e + 2];
        double ea = -expm1(-a * period / T);
        double eb = -expm1(-b * period / T);
        double expo = ((lag > 0) ? (2.0 * a - lag) : (lag + 2.0 * b)) * period / T;
        double eab = ea * eb;
        out -= C * exp(nc_min(expo, 0.0)) * (eab * eab);
    }
    return out;
}

static double count_1(double lag, double Ma, double Mb)
{
    double v = nc_min(Ma, Mb - lag) - nc_max(0.0, -lag);
    return v > 0.0 ? v : 0.0;
}

static int cmp_double(const void *x, const void *y)
{
    double a = *(const double *)x, b = *(const double *)y;
    return (a > b) - (a < b);
}

#define NC_CUTS 512

/* (sum n c^2, sum n c) of one pair of factors and one run; avar_cov._pair_1. */
static void pair_1(double a, double b, double Ma, double Mb, double period, double white,
                   double k2, double b2, double q2, const double *parts, int64_t nparts,
                   const double *gl_x, const double *gl_w, int64_t ngl, double shortp,
                   double far_factor, double flicker_reach, double ou_reach,
                   double *out_s2, double *out_s1)
{
    double cuts[NC_CUTS];
    *out_s2 = 0.0;
    *out_s1 = 0.0;
    double lo = -(Ma - 1.0), hi = Mb - 1.0;
    if (hi < lo)
        return;
    double reach = b2 > 0.0 ? flicker_reach * (a + b) : 0.0;
    for (int64_t e = 0; e < nparts; e++)
        reach = nc_max(reach, ou_reach * parts[3 * e + 2] / period);
    double u = nc_max(lo, floor(-2.0 * b - reach));
    double v = nc_min(hi, floor(2.0 * a + reach));
    double kinks[9] = {0.0, -b, -2.0 * b, a, a - b, a - 2.0 * b, 2.0 * a, 2.0 * a - b,
                       2.0 * a - 2.0 * b};
    int n = 0;
    for (int x = 0; x < 9; x++)
        cuts[n++] = kinks[x];
    cuts[n] = Mb - Ma;
    cuts[n + 1] = -2.0 * b;
    cuts[n + 2] = 2.0 * a;
    n += 3;
    if (reach > 0.0) {
        double step = 1.0;
        while (step < v - 2.0 * a && n < NC_CUTS) {
            cuts[n++] = rint(2.0 * a + step);
            step *= 2.0;
        }
        step = 1.0;
        while (step < -2.0 * b - u && n < NC_CUTS) {
            cuts[n++] = rint(-2.0 * b - step);
            step *= 2.0;
        }
    }
    for (int64_t e = 0; e < nparts; e++) {
        double lag_T = parts[3 * e + 2] / period;
        if (lag_T * 64.0 > 1.0 && lag_T < 4.0 * (a + b)) {
            for (int x = 0; x < 9; x++) {
                double s = lag_T;
                for (int r = 0; r < 4 && n + 1 < NC_CUTS; r++) {
                    cuts[n] = rint(kinks[x] + s);
                    cuts[n + 1] = rint(kinks[x] - s);
                    n += 2;
                    s *= 2.0;
                }
            }
        }
    }
    if (v < u)
        return;
    qsort(cuts, (size_t)n, sizeof(double), cmp_double);
    double s2 = 0.0, s1 = 0.0, c, nl;
    double start = u;
    int done = 0, i = 0;
    while (!done) {
        while (i < n && cuts[i] <= start)
            i++;
        double stop = v;
        if (i < n && cuts[i] < v)
            stop = cuts[i];
        if (stop <= start)
            break;
        double size = stop - start;
        if (size <= shortp) {
            double lag = start;
            while (lag < stop) {
                c = c_1(lag, a, b, period, white, k2, b2, parts, nparts, far_factor);
                nl = count_1(lag, Ma, Mb);
                s2 += nl * c * c;
                s1 += nl * c;
                lag += 1.0;
            }
        } else {
            double half = 0.5 * size;
            for (int64_t g = 0; g < ngl; g++) {
                double lag = start + half * (gl_x[g] + 1.0);
                c = c_1(lag, a, b, period, white, k2, b2, parts, nparts, far_factor);
                nl = count_1(lag, Ma, Mb);
                s2 += half * gl_w[g] * nl * c * c;
                s1 += half * gl_w[g] * nl * c;
            }
            double ends[2] = {start, stop}, wts[2] = {0.5, -0.5};
            for (int q = 0; q < 2; q++) {
                c = c_1(ends[q], a, b, period, white, k2, b2, parts, nparts, far_factor);
                nl = count_1(ends[q], Ma, Mb);
                s2 += wts[q] * nl * c * c;
                s1 += wts[q] * nl * c;
            }
        }
        start = stop;
        done = stop >= v;
    }
    c = c_1(v, a, b, period, white, k2, b2, parts, nparts, far_factor);
    nl = count_1(v, Ma, Mb);
    s2 += nl * c * c;
    s1 += nl * c;
    if (q2 > 0.0) {
        /* Quantization's deltas at lags p - q: (c_s + d)^2 - c_s^2 = 2 c_s d + d^2. */
        for (int fp = 0; fp < 3; fp++) {
            for (int fq = 0; fq < 3; fq++) {
                double lag = fp * a - fq * b;
                int first = 1;
                double wsum = 0.0;
                for (int gp = 0; gp < 3; gp++) {
                    for (int gq = 0; gq < 3; gq++) {
                        if (gp * a - gq * b == lag) {
                            if (gp * 3 + gq < fp * 3 + fq)
                                first = 0;
                            wsum += (gp != 1 ? 1.0 : -2.0) * (gq != 1 ? 1.0 : -2.0);
                        }
                    }
                }
                if (!first || wsum == 0.0 || lag < lo || lag > hi)
                    continue;
                double d = q2 * wsum;
                double cs = c_1(lag, a, b, period, white, k2, b2, parts, nparts, far_factor);
                nl = count_1(lag, Ma, Mb);
                s2 += nl * (2.0 * cs * d + d * d);
                s1 += nl * d;
            }
        }
    }
    *out_s2 = s2;
    *out_s1 = s1;
}

/* avar_cov._sums_kernel: sums[i, j] (k x k, upper triangle) accumulates, over runs,
 * mult * (2 sum n c^2 + 4 ramp_i ramp_j sum n c). parts: (nparts, 3). */
void nc_avar_sums(const double *m, int64_t k, const double *runs, const double *mult,
                  int64_t nruns, double period, double white, double k2, double b2,
                  double q2, const double *ramp, const double *parts, int64_t nparts,
                  const double *gl_x, const double *gl_w, int64_t ngl, double shortp,
                  double far_factor, double flicker_reach, double ou_reach, double *sums)
{
    for (int64_t r = 0; r < nruns; r++) {
        for (int64_t i = 0; i < k; i++) {
            double Ma = runs[r] + 1.0 - 2.0 * m[i];
            if (Ma <= 0)
                continue;
            for (int64_t j = i; j < k; j++) {
                double Mb = runs[r] + 1.0 - 2.0 * m[j];
                if (Mb <= 0)
                    continue;
                double s2, s1;
                pair_1(m[i], m[j], Ma, Mb, period, white, k2, b2, q2, parts, nparts, gl_x,
                       gl_w, ngl, shortp, far_factor, flicker_reach, ou_reach, &s2, &s1);
                sums[i * k + j] += mult[r] * (2.0 * s2 + 4.0 * ramp[i] * ramp[j] * s1);
            }
        }
    }
}

/* ------------------------------------------------------------------------- */
/* select_kernel: Lawson-Hanson NNLS, weighted NNLS with reweighting, selection. */

typedef struct {
    int64_t k, p;  /* rows, most columns */
    double *Q, *R, *rhs, *zq, *z, *r, *w, *sub, *col, *ref, *M, *wrhs, *x, *cc;
    int64_t *idx;
    uint8_t *passive, *skip;
    void *block;
} nc_ws;

static int ws_alloc(nc_ws *ws, int64_t k, int64_t p)
{
    size_t nd = (size_t)(k * p) * 3 + (size_t)(p * p) + (size_t)p * 7 + (size_t)k * 3;
    size_t bytes = nd * sizeof(double) + (size_t)p * sizeof(int64_t) + 2 * (size_t)p + 16;
    char *b = malloc(bytes ? bytes : 1);
    if (!b)
        return -1;
    ws->block = b;
    ws->k = k;
    ws->p = p;
    double *d = (double *)b;
    ws->Q = d; d += k * p;
    ws->sub = d; d += k * p;
    ws->M = d; d += k * p;
    ws->R = d; d += p * p;
    ws->rhs = d; d += p;
    ws->zq = d; d += p;
    ws->z = d; d += p;
    ws->w = d; d += p;
    ws->col = d; d += p;
    ws->x = d; d += p;
    ws->cc = d; d += p;
    ws->r = d; d += k;
    ws->ref = d; d += k;
    ws->wrhs = d; d += k;
    ws->idx = (int64_t *)d;
    ws->passive = (uint8_t *)(ws->idx + p);
    ws->skip = ws->passive + p;
    return 0;
}

/* Least squares of M[:, passive] x = b (modified Gram-Schmidt), zeros elsewhere.
 * M: k x p with row stride ld. Q: k x p, row stride ws->p. */
static void ls(const double *M, int64_t ld, int64_t k, int64_t p, const double *b,
               const uint8_t *passive, double *out, nc_ws *ws)
{
    double *Q = ws->Q, *R = ws->R, *rhs = ws->rhs, *zq = ws->zq;
    int64_t *idx = ws->idx;
    int64_t P = ws->p;
    int64_t q = 0;
    for (int64_t j = 0; j < p; j++)
        if (passive[j])
            idx[q++] = j;
    for (int64_t a = 0; a < q; a++)
        for (int64_t i = 0; i < k; i++)
            Q[i * P + a] = M[i * ld + idx[a]];
    for (int64_t a = 0; a < q; a++) {
        for (int64_t c = 0; c < a; c++) {
            double d = 0.0;
            for (int64_t i = 0; i < k; i++)
                d += Q[i * P + c] * Q[i * P + a];
            R[c * P + a] = d;
            for (int64_t i = 0; i < k; i++)
                Q[i * P + a] -= d * Q[i * P + c];
        }
        double nrm = 0.0;
        for (int64_t i = 0; i < k; i++)
            nrm += Q[i * P + a] * Q[i * P + a];
        nrm = sqrt(nrm);
        R[a * P + a] = nrm;
        if (nrm > 0.0)
            for (int64_t i = 0; i < k; i++)
                Q[i * P + a] /= nrm;
    }
    for (int64_t a = 0; a < q; a++) {
        double d = 0.0;
        for (int64_t i = 0; i < k; i++)
            d += Q[i * P + a] * b[i];
        rhs[a] = d;
    }
    for (int64_t a = q - 1; a >= 0; a--) {
        double s = rhs[a];
        for (int64_t c = a + 1; c < q; c++)
            s -= R[a * P + c] * zq[c];
        zq[a] = R[a * P + a] > 0.0 ? s / R[a * P + a] : 0.0;
    }
    for (int64_t j = 0; j < p; j++)
        out[j] = 0.0;
    for (int64_t a = 0; a < q; a++)
        out[idx[a]] = zq[a];
}

/* select_kernel._nnls: x (p) from M (k x p, row stride ld) and b (k). */
static void nnls_ws(const double *M, int64_t ld, int64_t k, int64_t p, const double *b,
                    double *x, nc_ws *ws)
{
    uint8_t *passive = ws->passive, *skip = ws->skip;
    double *z = ws->z, *r = ws->r, *w = ws->w;
    for (int64_t j = 0; j < p; j++) {
        x[j] = 0.0;
        passive[j] = 0;
        skip[j] = 0;
    }
    for (int64_t i = 0; i < k; i++)
        r[i] = b[i];
    for (int64_t outer = 0; outer < 3 * p + 3; outer++) {
        for (int64_t j = 0; j < p; j++) {
            double s = 0.0;
            for (int64_t i = 0; i < k; i++)
                s += M[i * ld + j] * r[i];
            w[j] = s;
        }
        int64_t j_best = -1;
        double w_best = 0.0;
        for (int64_t j = 0; j < p; j++) {
            if (!passive[j] && !skip[j] && w[j] > w_best) {
                j_best = j;
                w_best = w[j];
            }
        }
        if (j_best < 0)
            break;
        passive[j_best] = 1;
        ls(M, ld, k, p, b, passive, z, ws);
        if (z[j_best] <= 0.0) {
            passive[j_best] = 0;
            skip[j_best] = 1;
            continue;
        }
        for (int64_t j = 0; j < p; j++)
            skip[j] = 0;
        for (int64_t inner = 0; inner < 3 * p + 3; inner++) {
            int ok = 1;
            for (int64_t j = 0; j < p; j++)
                if (passive[j] && z[j] <= 0.0)
                    ok = 0;
            if (ok) {
                for (int64_t j = 0; j < p; j++)
                    x[j] = z[j];
                break;
            }
            double alpha = INFINITY;
            for (int64_t j = 0; j < p; j++) {
                if (passive[j] && z[j] <= 0.0) {
                    double step = x[j] / (x[j] - z[j]);
                    if (step < alpha)
                        alpha = step;
                }
            }
            for (int64_t j = 0; j < p; j++) {
                x[j] += alpha * (z[j] - x[j]);
                if (passive[j] && x[j] <= 0.0) {
                    passive[j] = 0;
                    x[j] = 0.0;
                }
            }
            ls(M, ld, k, p, b, passive, z, ws);
        }
        for (int64_t i = 0; i < k; i++) {
            double s = b[i];
            for (int64_t j = 0; j < p; j++)
                s -= M[i * ld + j] * x[j];
            r[i] = s;
        }
    }
}

/* select_kernel._weighted: weighted NNLS of A (k x p) on the columns flagged in cols;
 * coefficients written to c (p), zero off cols. */
static void weighted(const double *A, int64_t k, int64_t p, const double *avar,
                     const double *nu, const uint8_t *cols, int64_t passes, double *c,
                     nc_ws *ws)
{
    double *sub = ws->sub, *col = ws->col, *ref = ws->ref, *M = ws->M, *rhs = ws->wrhs;
    double *x = ws->x, *cc = ws->cc;
    int64_t P = ws->p;
    int64_t q = 0;
    for (int64_t j = 0; j < p; j++) {
        if (cols[j]) {
            for (int64_t i = 0; i < k; i++)
                sub[i * P + q] = A[i * p + j];
            q++;
        }
    }
    for (int64_t a = 0; a < q; a++) {
        double mx = 0.0;
        for (int64_t i = 0; i < k; i++)
            mx = nc_max(mx, fabs(sub[i * P + a]));
        col[a] = mx != 0.0 ? mx : 1.0;
    }
    for (int64_t i = 0; i < k; i++)
        ref[i] = avar[i];
    for (int64_t pass = 0; pass < passes + 1; pass++) {
        for (int64_t i = 0; i < k; i++) {
            double w = sqrt(nu[i] / 2.0) / ref[i];
            rhs[i] = avar[i] * w;
            for (int64_t a = 0; a < q; a++)
                M[i * P + a] = sub[i * P + a] * w / col[a];
        }
        nnls_ws(M, P, k, q, rhs, x, ws);
        for (int64_t a = 0; a < q; a++)
            cc[a] = x[a] / col[a];
        for (int64_t i = 0; i < k; i++) {
            double mdl = 0.0;
            for (int64_t a = 0; a < q; a++)
                mdl += sub[i * P + a] * cc[a];
            ref[i] = mdl > 0.0 ? mdl : avar[i];
        }
    }
    q = 0;
    for (int64_t j = 0; j < p; j++) {
        c[j] = 0.0;
        if (cols[j])
            c[j] = cc[q++];
    }
}

/* select_kernel.nnls: Lawson-Hanson NNLS of M (k x p) x = b; returns -1 when out of
 * memory. */
int64_t nc_nnls(const double *M, int64_t k, int64_t p, const double *b, double *x)
{
    nc_ws ws;
    if (ws_alloc(&ws, k, p))
        return -1;
    nnls_ws(M, p, k, p, b, x, &ws);
    free(ws.block);
    return 0;
}

/* select_kernel.weighted_nnls on every column of A (k x p); written to c (p). */
int64_t nc_weighted_nnls(const double *A, int64_t k, int64_t p, const double *avar,
                     const double *nu, int64_t passes, double *c)
{
    nc_ws ws;
    if (ws_alloc(&ws, k, p))
        return -1;
    uint8_t *cols = malloc((size_t)p + 1);
    if (!cols) {
        free(ws.block);
        return -1;
    }
    memset(cols, 1, (size_t)p);
    weighted(A, k, p, avar, nu, cols, passes, c, &ws);
    free(cols);
    free(ws.block);
    return 0;
}

static double misfit(const double *A, int64_t k, int64_t p, const double *avar,
                     const double *nu, const double *c)
{
    double d = 0.0;
    for (int64_t i = 0; i < k; i++) {
        double mdl = 0.0;
        for (int64_t j = 0; j < p; j++)
            mdl += A[i * p + j] * c[j];
        mdl = nc_max(mdl, 1e-300);
        double ratio = avar[i] / mdl;
        d += nu[i] * (ratio - 1.0 - log(ratio));
    }
    return d;
}

/* Quickselect-free median for the rare fallback: sort a copy. */
static double median(double *vals, int64_t n)
{
    qsort(vals, (size_t)n, sizeof(double), cmp_double);
    if (n & 1)
        return vals[n >> 1];
    return (vals[(n >> 1) - 1] + vals[n >> 1]) / 2;
}

/* select_kernel.select_many: A (k x 6), sims (reps x k), nu (k), cands (C x 6, uint8),
 * walk_of (C); out (reps x 6) and deviance (reps) written. Returns -1 when out of
 * memory. */
int64_t nc_select_many(const double *A, int64_t k, const double *sims, int64_t reps,
                   const double *nu, const uint8_t *cands, int64_t C,
                   const int64_t *walk_of, double penalty, double band_penalty,
                   double near_tie, double walk_band, int64_t passes, double *out,
                   double *deviance)
{
    const int64_t p = 6;
    nc_ws ws;
    if (ws_alloc(&ws, k, p))
        return -1;
    size_t bytes = (size_t)C * (p + 2) * sizeof(double) + (size_t)C * sizeof(int64_t)
                   + 2 * (size_t)C + (size_t)k * sizeof(double) + 16;
    char *blk = calloc(bytes, 1);
    if (!blk) {
        free(ws.block);
        return -1;
    }
    double *fits = (double *)blk;
    double *crit = fits + C * p;
    double *vals = crit + C;
    int64_t *size = (int64_t *)(vals + k);
    uint8_t *valid = (uint8_t *)(size + C);
    uint8_t *ramp = valid + C;
    for (int64_t c = 0; c < C; c++) {
        for (int64_t j = 0; j < p; j++)
            if (cands[c * p + j] && j != 5)
                size[c] += 1;
        ramp[c] = cands[c * p + 4] != 0;
    }
    for (int64_t r = 0; r < reps; r++) {
        const double *avar = sims + r * k;
        double best_crit = INFINITY;
        for (int64_t c = 0; c < C; c++) {
            weighted(A, k, p, avar, nu, cands + c * p, passes, fits + c * p, &ws);
            valid[c] = 1;
            int64_t n_cols = 0;
            for (int64_t j = 0; j < p; j++) {
                if (cands[c * p + j]) {
                    n_cols += 1;
                    if (fits[c * p + j] <= 0.0)
                        valid[c] = 0;
                }
            }
            if (valid[c]) {
                double cost = penalty * (double)n_cols
                              + (cands[c * p + 5] ? (band_penalty - penalty) : 0.0);
                crit[c] = misfit(A, k, p, avar, nu, fits + c * p) + cost;
                best_crit = nc_min(best_crit, crit[c]);
            }
        }
        int64_t chosen = -1;
        for (int64_t c = 0; c < C; c++) {
            if (!valid[c] || crit[c] >= best_crit + near_tie)
                continue;
            if (chosen < 0) {
                chosen = c;
                continue;
            }
            /* Fewest terms, then no ramp, then the lower criterion. */
            if (size[c] < size[chosen]
                || (size[c] == size[chosen]
                    && ((!ramp[c] && ramp[chosen])
                        || (ramp[c] == ramp[chosen] && crit[c] < crit[chosen]))))
                chosen = c;
        }
        double *o = out + r * p;
        if (chosen < 0) {
            for (int64_t j = 0; j < p; j++)
                o[j] = 0.0;
            for (int64_t i = 0; i < k; i++)
                vals[i] = avar[i] / A[i * p + 1];
            o[1] = median(vals, k);
        } else {
            int64_t wk = walk_of[chosen];
            if (wk >= 0 && valid[wk] && crit[wk] < crit[chosen] + walk_band)
                chosen = wk;
            for (int64_t j = 0; j < p; j++)
                o[j] = fits[chosen * p + j];
        }
        deviance[r] = misfit(A, k, p, avar, nu, o);
    }
    free(blk);
    free(ws.block);
    return 0;
}

/* ------------------------------------------------------------------------- */
/* gauss_markov: white + quantization + Gauss-Markov over a grid of correlation times. */

/* gauss_markov._nnls3: exact NNLS from the normal equations G (p x p, p <= 3), h. */
static void nnls3(const double *G, int p, const double *h, double *x)
{
#define GG(i, j) G[(i) * p + (j)]
    double best = 0.0;
    for (int j = 0; j < p; j++)
        x[j] = 0.0;
    double z0, z1, z2;
    for (int mask = 1; mask < (1 << p); mask++) {
        int i0 = mask & 1;
        int i1 = (mask >> 1) & 1;
        int i2 = p > 2 ? (mask >> 2) & 1 : 0;
        int q = i0 + i1 + i2;
        int a = i0 ? 0 : (i1 ? 1 : 2);
        int b = q > 1 ? ((i0 && i1) ? 1 : 2) : -1;
        int c = q == 3 ? 2 : -1;
        double za, zb, zc;
        if (q == 1) {
            if (GG(a, a) <= 0.0)
                continue;
            za = h[a] / GG(a, a);
            zb = 0.0;
            zc = 0.0;
        } else if (q == 2) {
            double det = GG(a, a) * GG(b, b) - GG(a, b) * GG(b, a);
            if (det <= 0.0)
                continue;
            za = (GG(b, b) * h[a] - GG(a, b) * h[b]) / det;
            zb = (GG(a, a) * h[b] - GG(b, a) * h[a]) / det;
            zc = 0.0;
        } else {
            double c00 = GG(0, 0), c01 = GG(0, 1), c02 = GG(0, 2);
            double c11 = GG(1, 1), c12 = GG(1, 2), c22 = GG(2, 2);
            double m00 = c11 * c22 - c12 * c12;
            double m01 = c02 * c12 - c01 * c22;
            double m02 = c01 * c12 - c02 * c11;
            double det = c00 * m00 + c01 * m01 + c02 * m02;
            if (det <= 0.0)
                continue;
            double m11 = c00 * c22 - c02 * c02;
            double m12 = c01 * c02 - c00 * c12;
            double m22 = c00 * c11 - c01 * c01;
            za = (m00 * h[0] + m01 * h[1] + m02 * h[2]) / det;
            zb = (m01 * h[0] + m11 * h[1] + m12 * h[2]) / det;
            zc = (m02 * h[0] + m12 * h[1] + m22 * h[2]) / det;
        }
        if (za <= 0.0 || (q > 1 && zb <= 0.0) || (q > 2 && zc <= 0.0))
            continue;
        z0 = z1 = z2 = 0.0;
        int ids[3] = {a, b, c};
        double vs[3] = {za, zb, zc};
        for (int t = 0; t < 3; t++) {
            if (ids[t] == 0)
                z0 = vs[t];
            else if (ids[t] == 1)
                z1 = vs[t];
            else if (ids[t] == 2)
                z2 = vs[t];
        }
        /* Objective less ||b||^2: x'Gx - 2h'x. */
        double obj = (z0 * (GG(0, 0) * z0 + 2.0 * GG(0, 1) * z1 - 2.0 * h[0])
                      + z1 * (GG(1, 1) * z1 - 2.0 * h[1]));
        if (p > 2)
            obj += z2 * (GG(2, 2) * z2 + 2.0 * GG(0, 2) * z0 + 2.0 * GG(1, 2) * z1
                         - 2.0 * h[2]);
        if (obj < best) {
            best = obj;
            x[0] = z0;
            x[1] = z1;
            if (p > 2)
                x[2] = z2;
        }
    }
#undef GG
}

/* gauss_markov._fit_many_kernel: base (k x 2), gm_cols (ng x (k + 1): T then the
 * Gauss-Markov column), sims (reps x k), nu (k); out (reps x 2): sigma, T. Returns -1
 * when out of memory. */
int64_t nc_gm_fit_many(const double *base, int64_t k, const double *gm_cols, int64_t ng,
                   const double *sims, int64_t reps, const double *nu, double *out)
{
    double *blk = malloc(sizeof(double) * (size_t)(k * 3 + 3 * k + 1));
    if (!blk)
        return -1;
    double *A = blk, *w0 = A + 3 * k, *ref = w0 + k, *wv = ref + k;
    double x[3] = {0.0, 0.0, 0.0}, c[3] = {0.0, 0.0, 0.0}, col[3], G[9], h[3];
    for (int64_t i = 0; i < k; i++) {
        w0[i] = sqrt(nu[i] / 2.0);
        A[3 * i] = base[2 * i];
        A[3 * i + 1] = base[2 * i + 1];
    }
    for (int64_t r = 0; r < reps; r++) {
        const double *avar = sims + r * k;
        double best = INFINITY;
        out[2 * r] = 0.0;
        out[2 * r + 1] = gm_cols[0];
        for (int64_t g = 0; g < ng; g++) {
            const double *gc = gm_cols + g * (k + 1);
            for (int64_t i = 0; i < k; i++)
                A[3 * i + 2] = gc[1 + i];
            for (int j = 0; j < 3; j++) {
                double mx = 0.0;
                for (int64_t i = 0; i < k; i++)
                    mx = nc_max(mx, fabs(A[3 * i + j]));
                col[j] = mx != 0.0 ? mx : 1.0;
            }
            for (int64_t i = 0; i < k; i++)
                ref[i] = avar[i];
            for (int pass = 0; pass < 2; pass++) { /* weighted_nnls with passes=1 */
                for (int64_t i = 0; i < k; i++)
                    wv[i] = w0[i] / ref[i];
                for (int a = 0; a < 3; a++) {
                    double s = 0.0;
                    for (int64_t i = 0; i < k; i++)
                        s += A[3 * i + a] * wv[i] * wv[i] * avar[i];
                    h[a] = s / col[a];
                    for (int b = a; b < 3; b++) {
                        s = 0.0;
                        for (int64_t i = 0; i < k; i++)
                            s += A[3 * i + a] * A[3 * i + b] * wv[i] * wv[i];
                        G[3 * a + b] = s / (col[a] * col[b]);
                        G[3 * b + a] = G[3 * a + b];
                    }
                }
                nnls3(G, 3, h, x);
                for (int j = 0; j < 3; j++)
                    c[j] = x[j] / col[j];
                for (int64_t i = 0; i < k; i++) {
                    double mdl = A[3 * i] * c[0] + A[3 * i + 1] * c[1] + A[3 * i + 2] * c[2];
                    ref[i] = mdl > 0 ? mdl : avar[i];
                }
            }
            double cost = 0.0;
            for (int64_t i = 0; i < k; i++) {
                double mdl = A[3 * i] * c[0] + A[3 * i + 1] * c[1] + A[3 * i + 2] * c[2];
                double rr = mdl > 0 ? mdl : avar[i];
                double e = w0[i] * (avar[i] - mdl) / rr;
                cost += e * e;
            }
            if (cost < best) {
                best = cost;
                out[2 * r] = sqrt(c[2]);
                out[2 * r + 1] = gc[0];
            }
        }
    }
    free(blk);
    return 0;
}
