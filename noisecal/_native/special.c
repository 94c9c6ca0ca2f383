/* Special functions of the static job in C: element-wise twins of
 * noisecal/analysis/special.py (normal CDF and quantile, regularised incomplete
 * gamma and its inverses, regularised incomplete beta).
 *
 * Each function follows the numpy code step for step: the same regions, the same
 * constants, the same order of floating-point operations where it matters, and
 * the same convergence rule (a check after every _BLOCK steps), so the results
 * agree with it to rounding (a few 1e-16 relative; libm's lgamma and exp/log are
 * not bit-identical to Python's math.lgamma and numpy's SIMD exp/log).
 *
 * The coefficient tables of the uniform expansion (c_k(η), 20 × 30) and of
 * ln Γ(1 + a) near 0 are special.py's, passed in by the caller with every call:
 * one source for both paths. References: see special.py. */
#include "common.h"

#define SP_EPS 2.220446049250313e-16
#define SP_TINY 1e-300
#define SP_SQRT_HALF 0.70710678118654752440
#define SP_LOG_SQRT_2PI 0.91893853320467274178
#define SP_PI 3.141592653589793
#define SP_BLOCK 8
#define SP_MAX_STEPS 20000
#define TEMME_K 20 /* rows c_0 … c_19 */
#define TEMME_N 30 /* Taylor terms per row */
#define LG1P_N 26  /* coefficients of ln Γ(1 + a) / a below a = 0.2 */

static const double SP_A[8] = {
    3.3871328727963666080e0, 1.3314166789178437745e2, 1.9715909503065514427e3,
    1.3731693765509461125e4, 4.5921953931549871457e4, 6.7265770927008700853e4,
    3.3430575583588128105e4, 2.5090809287301226727e3};
static const double SP_B[8] = {
    1.0, 4.2313330701600911252e1, 6.8718700749205790830e2, 5.3941960214247511077e3,
    2.1213794301586595867e4, 3.9307895800092710610e4, 2.8729085735721942674e4,
    5.2264952788528545610e3};
static const double SP_C[8] = {
    1.42343711074968357734e0, 4.63033784615654529590e0, 5.76949722146069140550e0,
    3.64784832476320460504e0, 1.27045825245236838258e0, 2.41780725177450611770e-1,
    2.27238449892691845833e-2, 7.74545014278341407640e-4};
static const double SP_D[8] = {
    1.0, 2.05319162663775882187e0, 1.67638483018380384940e0, 6.89767334985100004550e-1,
    1.48103976427480074590e-1, 1.51986665636164571966e-2, 5.47593808499534494600e-4,
    1.05075007164441684324e-9};
static const double SP_E[8] = {
    6.65790464350110377720e0, 5.46378491116411436990e0, 1.78482653991729133580e0,
    2.96560571828504891230e-1, 2.65321895265761230930e-2, 1.24266094738807843860e-3,
    2.71155556874348757815e-5, 2.01033439929228813265e-7};
static const double SP_F[8] = {
    1.0, 5.99832206555887937690e-1, 1.36929880922735805310e-1, 1.48753612908506148525e-2,
    7.86869131145613259100e-4, 1.84631831751005468180e-5, 1.42151175831644588870e-7,
    2.04426310338993978564e-15};
static const double SP_STIRLING[8] = {
    1.0 / 12.0, -1.0 / 360.0, 1.0 / 1260.0, -1.0 / 1680.0, 1.0 / 1188.0,
    -691.0 / 360360.0, 1.0 / 156.0, -3617.0 / 122400.0};

/* Σ c[i] r^i, constant term first. */
static double horner(const double *c, int n, double r)
{
    double out = c[n - 1];
    for (int i = n - 2; i >= 0; i--)
        out = out * r + c[i];
    return out;
}

/* np.maximum: NaN if either is NaN. */
static double np_max(double a, double b)
{
    if (isnan(a) || isnan(b))
        return NAN;
    return a >= b ? a : b;
}

static double sp_ndtr(double x)
{
    double t = x * SP_SQRT_HALF;
    if (fabs(t) < SP_SQRT_HALF)
        return 0.5 + 0.5 * erf(t);
    double tail = 0.5 * erfc(fabs(t));
    return t > 0.0 ? 1.0 - tail : tail;
}

static double sp_ndtri(double p)
{
    double q = p - 0.5;
    double out = NAN;
    if (fabs(q) <= 0.425) {
        double r = 0.180625 - q * q;
        out = q * horner(SP_A, 8, r) / horner(SP_B, 8, r);
    } else if (p > 0.0 && p < 1.0) {
        double r = sqrt(-log(q < 0.0 ? p : 1.0 - p));
        double val;
        if (r <= 5.0) {
            double rn = r - 1.6;
            val = horner(SP_C, 8, rn) / horner(SP_D, 8, rn);
        } else {
            double rf = r - 5.0;
            val = horner(SP_E, 8, rf) / horner(SP_F, 8, rf);
        }
        out = q < 0.0 ? -val : val;
    }
    if (p == 0.0)
        out = -INFINITY;
    if (p == 1.0)
        out = INFINITY;
    return out;
}

/* ln Γ*(z) = ln Γ(z) − (z − ½) ln z + z − ln √(2π), z > 0 finite. */
static double lgamma_star(double z)
{
    if (z >= 10.0) {
        double w = 1.0 / z;
        return w * horner(SP_STIRLING, 8, w * w);
    }
    return lgamma(z) - (z - 0.5) * log(z) + z - SP_LOG_SQRT_2PI;
}

/* Σ_{j<terms} s2^j / (2j + 3). */
static double odd_series(double s2, int terms)
{
    double acc = 1.0 / (2 * terms + 1);
    for (int j = terms - 2; j >= 0; j--)
        acc = acc * s2 + 1.0 / (2 * j + 3);
    return acc;
}

/* ln(1 + m) − m for −½ ≤ m ≤ 1 without cancellation. */
static double log1pmx(double m)
{
    double s = m / (2.0 + m);
    double s2 = s * s;
    double acc = s2 >= 1e-3 ? odd_series(s2, 16) : odd_series(s2, 6);
    return -s * m + 2.0 * s * s2 * acc;
}

/* a (ln t − (t − 1)) with a (t − 1) = d (log_t = ln t). */
static double a_log_ratio(double a, double log_t, double d)
{
    double eps = d / a;
    if (eps >= -0.5 && eps <= 1.0)
        return a * log1pmx(eps);
    return a * log_t - d;
}

/* Σ_n x^n / ((a+1)…(a+n)). */
static double series_p(double a, double x)
{
    double term = 1.0, total = 1.0;
    int n = 0;
    while (n < SP_MAX_STEPS) {
        for (int i = 0; i < SP_BLOCK; i++) {
            n++;
            term = term * x / (a + n);
            total = total + term;
        }
        if (term <= SP_EPS * total)
            break;
    }
    return total;
}

/* Continued fraction of Q(a, x) e^x x^−a Γ(a), modified Lentz. */
static double fraction_q(double a, double x)
{
    double b = x + 1.0 - a;
    double c = 1.0 / SP_TINY;
    double d = 1.0 / b;
    double h = d, delta = 0.0;
    int i = 0;
    while (i < SP_MAX_STEPS) {
        for (int k = 0; k < SP_BLOCK; k++) {
            i++;
            double an = -i * (i - a);
            b = b + 2.0;
            d = an * d + b;
            if (fabs(d) < SP_TINY)
                d = SP_TINY;
            c = b + an / c;
            if (fabs(c) < SP_TINY)
                c = SP_TINY;
            d = 1.0 / d;
            delta = d * c;
            h = h * delta;
        }
        if (fabs(delta - 1.0) <= SP_EPS)
            break;
    }
    return h;
}

/* ln Γ(1 + a), by the caller's Taylor coefficients below a = 0.2. */
static double lgamma1p(double a, const double *lg1p)
{
    if (a < 0.2)
        return a * horner(lg1p, LG1P_N, a);
    return lgamma(1.0 + a);
}

/* Q(a, x) for small x by DLMF 8.7.3. */
static double series_q(double a, double x, const double *lg1p)
{
    double total = 0.0, fac = 1.0;
    for (int n = 1; n < 200; n++) {
        fac = fac * (-x / n);
        double term = fac / (a + n);
        total = total + term;
        if (fabs(term) <= SP_EPS * fabs(total))
            break;
    }
    double log_x = log(x);
    return -expm1(a * log_x - lgamma1p(a, lg1p)) - exp(a * log_x - lgamma(a)) * total;
}

/* Σ_k c_k(η) a^−k of the uniform expansion. */
static double temme_sum(double a, double eta, const double *temme)
{
    double eta_big = fabs(eta) < 1e-11 ? 0.0 : eta;
    double inverse = 1.0 / a;
    if (inverse < 1e-14)
        inverse = 0.0;
    double total = 0.0, ipow = 1.0;
    for (int k = 0; k < TEMME_K; k++) {
        const double *row = temme + k * TEMME_N;
        double ck = 0.0, epow = 1.0;
        for (int n = 0; n < TEMME_N; n++) {
            ck += row[n] * epow;
            epow *= eta_big;
        }
        ck += row[1] * (eta - eta_big);
        total += ck * ipow;
        ipow *= inverse;
    }
    return total;
}

static void asymptotic_pq(double a, double m, double half_eta2, const double *temme,
                          double *p, double *q)
{
    double sign = m > 0.0 ? 1.0 : (m < 0.0 ? -1.0 : 0.0);
    double eta = sign * sqrt(2.0 * half_eta2);
    double u = eta * sqrt(0.5 * a);
    double r = exp(-a * half_eta2) / sqrt(2.0 * SP_PI * a) * temme_sum(a, eta, temme);
    double e = erfc(fabs(u));
    *q = 0.5 * (u >= 0.0 ? e : 2.0 - e) + r;
    *p = 0.5 * (u >= 0.0 ? 2.0 - e : e) - r;
}

/* P, Q and ln(x^a e^−x / Γ(a)) for a, x > 0 finite; lgs = ln Γ*(a). */
static void regular_pq(double a, double x, double lgs, const double *temme,
                       const double *lg1p, double *p, double *q, double *log_front)
{
    double m = (x - a) / a;
    int near = m >= -0.5 && m <= 1.0;
    double l1 = log1pmx(near ? m : 0.0);
    double ratio = near ? a * l1 : a * (log(x) - log(a)) - (x - a);
    *log_front = ratio + 0.5 * log(a / (2.0 * SP_PI)) - lgs;
    if (a > 8.0 && fabs(m) < 0.45) {
        asymptotic_pq(a, m, -l1, temme, p, q);
        return;
    }
    int small_x_q = x <= 0.5 ? (-0.4 / log(x) >= a) : (1.1 * x >= a);
    if (x > 1.1 && x >= a) {
        *q = exp(*log_front) * fraction_q(a, x);
        *p = 1.0 - *q;
    } else if (x <= 1.1 && small_x_q) {
        *q = series_q(a, x, lg1p);
        *p = 1.0 - *q;
    } else {
        *p = exp(*log_front) / a * series_p(a, x);
        *q = 1.0 - *p;
    }
}

static void gamma_pq(double a, double x, const double *temme, const double *lg1p,
                     double *p, double *q)
{
    *p = NAN;
    *q = NAN;
    if (a > 0.0 && x > 0.0 && isfinite(a) && isfinite(x)) {
        double log_front;
        regular_pq(a, x, lgamma_star(a), temme, lg1p, p, q, &log_front);
    }
    if ((x == 0.0 && a > 0.0) || (a == INFINITY && x >= 0.0 && x < INFINITY)) {
        *p = 0.0;
        *q = 1.0;
    }
    if ((a == 0.0 && x > 0.0) || (x == INFINITY && a >= 0.0 && a < INFINITY)) {
        *p = 1.0;
        *q = 0.0;
    }
}

/* x > 0 with Q(a, x) = t (upper) or P(a, x) = t; a > 0 finite, 0 < t ≤ ½:
 * special._gamma_root for one element. */
static double gamma_root(double a, double t, int upper, const double *temme,
                         const double *lg1p)
{
    double lg1 = lgamma(1.0 + a);
    double log_t = log(t);
    double s = sp_ndtri(t);
    if (upper)
        s = -s;
    double ra = sqrt(a);
    double s2 = s * s;
    double cf = (a + s * ra + (s2 - 1.0) / 3.0 + (s2 * s - 7.0 * s) / (36.0 * ra)
                 - (3.0 * s2 * s2 + 7.0 * s2 - 16.0) / (810.0 * a)
                 + (9.0 * s2 * s2 * s + 256.0 * s2 * s - 433.0 * s) / (38880.0 * a * ra));
    if (!(a >= 1.0))
        cf = 0.0;
    double small = exp(((upper ? log1p(-t) : log_t) + lg1) / a);
    double big = -log_t - (lg1 - log(a));
    for (int i = 0; i < 4; i++)
        big = -log_t - (lg1 - log(a)) + (a - 1.0) * log(np_max(big, 1.0));
    double x;
    if (upper)
        x = a >= 1.0 ? np_max(cf, big) : (big > 1.0 + a ? big : small);
    else
        x = np_max(cf, small);
    if (!(x > 0.0))
        return x;
    double lgs = lgamma_star(a);
    for (int it = 0; it < 100; it++) {
        double p, q, log_front;
        regular_pq(a, x, lgs, temme, lg1p, &p, &q, &log_front);
        double tail = upper ? q : p;
        double log_tail = log(tail);
        double g = upper ? log_t - log_tail : log_tail - log_t;
        double r = exp(log_front - log_tail);
        double newton = -g / r;
        double curve = r * (a - x) + (upper ? r * r : -r * r);
        double factor = 1.0 + 0.5 * newton * curve / r;
        int halley = factor > 0.5 && factor < 2.0;
        double step = halley ? newton / factor : newton;
        if (!(tail > 0.0))
            step = upper ? -1.0 : 1.0;
        if (isnan(step))
            step = 0.0;
        if (step < -10.0)
            step = -10.0;
        if (step > 10.0)
            step = 10.0;
        x = x * exp(step);
        int close = fabs(g) < (halley ? 1e-5 : 1e-8);
        if (close || fabs(step) < 1e-9 || x == 0.0 || !isfinite(x))
            break;
    }
    return x;
}

static double gamma_inverse(double a, double y, int complement, const double *temme,
                            const double *lg1p)
{
    double out = NAN;
    if (a > 0.0 && isfinite(a) && y > 0.0 && y < 1.0) {
        int upper = (y > 0.5) != (complement != 0);
        double t = y > 0.5 ? 1.0 - y : y;
        out = gamma_root(a, t, upper, temme, lg1p);
    }
    if (a >= 0.0 && a < INFINITY) {
        double lo = complement ? 1.0 : 0.0, hi = complement ? 0.0 : 1.0;
        if (y == lo)
            out = 0.0;
        if (y == hi)
            out = INFINITY;
    }
    return out;
}

/* Continued fraction of I_x(a, b) (DLMF 8.17.22), modified Lentz; guard keeps the
 * denominators off zero. */
static double fraction_beta(double a, double b, double x, int guard)
{
    double c = 1.0;
    double d = 1.0 - (a + b) * x / (a + 1.0);
    if (fabs(d) < SP_TINY)
        d = SP_TINY;
    d = 1.0 / d;
    double h = d, delta = 0.0;
    int m = 0;
    while (m < SP_MAX_STEPS) {
        for (int k = 0; k < SP_BLOCK; k++) {
            m++;
            double m2 = 2.0 * m;
            double nums[2] = {
                (double)m * (b - m) * x / ((a - 1.0 + m2) * (a + m2)),
                -(a + m) * (a + b + m) * x / ((a + m2) * (a + 1.0 + m2))};
            for (int j = 0; j < 2; j++) {
                double num = nums[j];
                d = 1.0 + num * d;
                c = 1.0 + num / c;
                if (guard) {
                    if (fabs(d) < SP_TINY)
                        d = SP_TINY;
                    if (fabs(c) < SP_TINY)
                        c = SP_TINY;
                }
                d = 1.0 / d;
                delta = d * c;
                h = h * delta;
            }
        }
        if (fabs(delta - 1.0) <= SP_EPS)
            break;
    }
    return h;
}

static double log_beta_front(double a, double b, double x)
{
    double c = a + b;
    double y = 1.0 - x;
    double d = x * b - y * a;
    double log_c = log(c);
    double front_a = a_log_ratio(a, log(x) + log_c - log(a), d);
    double front_b = a_log_ratio(b, log(y) + log_c - log(b), -d);
    return (0.5 * log(a * b / (2.0 * SP_PI * c)) + lgamma_star(c) - lgamma_star(a)
            - lgamma_star(b) + front_a + front_b);
}

static double sp_betainc(double a, double b, double x)
{
    double out = NAN;
    if (a > 0.0 && b > 0.0 && isfinite(a) && isfinite(b) && x > 0.0 && x < 1.0) {
        double front = exp(log_beta_front(a, b, x));
        int swap = x > (a + 1.0) / (a + b + 2.0);
        double first = swap ? b : a, second = swap ? a : b, arg = swap ? 1.0 - x : x;
        double fraction = fraction_beta(first, second, arg, 0);
        if (!isfinite(fraction))
            fraction = fraction_beta(first, second, arg, 1);
        double part = front * fraction / first;
        out = swap ? 1.0 - part : part;
    }
    int edge = x >= 0.0 && x <= 1.0 && a >= 0.0 && b >= 0.0 && !(a == 0.0 && b == 0.0)
               && !(a == INFINITY && b == INFINITY);
    int zero = edge && (x == 0.0 || (b == 0.0 && x < 1.0) || (a == INFINITY && x < 1.0));
    int one = edge && (x == 1.0 || (a == 0.0 && x > 0.0) || (b == INFINITY && x > 0.0));
    if (zero && !one)
        out = 0.0;
    if (one && !zero)
        out = 1.0;
    return out;
}

/* Element-wise entry points: n values each, out filled. */

void nc_ndtr(const double *x, int64_t n, double *out)
{
    for (int64_t i = 0; i < n; i++)
        out[i] = sp_ndtr(x[i]);
}

void nc_ndtri(const double *p, int64_t n, double *out)
{
    for (int64_t i = 0; i < n; i++)
        out[i] = sp_ndtri(p[i]);
}

/* P(a, x) (upper = 0) or Q(a, x) (upper = 1). */
void nc_gammainc(const double *a, const double *x, int64_t n, const double *temme,
                 const double *lg1p, int64_t upper, double *out)
{
    for (int64_t i = 0; i < n; i++) {
        double p, q;
        gamma_pq(a[i], x[i], temme, lg1p, &p, &q);
        out[i] = upper ? q : p;
    }
}

/* x with P(a, x) = y (complement = 0) or Q(a, x) = y (complement = 1). */
void nc_gammaincinv(const double *a, const double *y, int64_t n, const double *temme,
                    const double *lg1p, int64_t complement, double *out)
{
    for (int64_t i = 0; i < n; i++)
        out[i] = gamma_inverse(a[i], y[i], (int)complement, temme, lg1p);
}

void nc_betainc(const double *a, const double *b, const double *x, int64_t n, double *out)
{
    for (int64_t i = 0; i < n; i++)
        out[i] = sp_betainc(a[i], b[i], x[i]);
}
