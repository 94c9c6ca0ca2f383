"""Print the coefficient table of the uniform asymptotic expansion of the
incomplete gamma function used by :mod:`noisecal.analysis.special`.

Q(a, x) = ½ erfc(η √(a/2)) + R_a(η),
R_a(η) = exp(−a η²/2) / √(2π a) · Σ_k c_k(η) a^{−k}          (DLMF 8.12.3, 8.12.8)

with λ = x/a, η²/2 = λ − 1 − ln λ (η of the sign of λ − 1), and

c_0(η) = 1/(λ − 1) − 1/η,
c_k(η) = (1/η) c'_{k−1}(η) + (−1)^k g_k / (λ − 1),            (DLMF 8.12.9)

g_k the coefficients of Stirling's series Γ(a) ~ √(2π/a) (a/e)^a Σ g_k a^{−k}
(DLMF 5.11.3-5.11.4, from the Bernoulli numbers, DLMF 5.11.1 and 24.2.1).

Everything is exact rational arithmetic: write η/(λ − 1) = Σ s_n η^n (series
reversion of η²/2 = μ − ln(1 + μ), μ = λ − 1); then the Taylor coefficients
c_k(η) = Σ_n d[k][n] η^n follow from d[0][n] = s_{n+1} and
d[k][n] = (n + 2) d[k−1][n + 2] + (−1)^k g_k s_{n+1} (the 1/η poles cancel,
which is checked). Run ``python tools/make_gamma_coefficients.py`` and paste
the output over ``_TEMME`` in noisecal/analysis/special.py.
"""

from __future__ import annotations

from fractions import Fraction as F
from math import comb

K = 20  # rows c_0 … c_{K−1}
N = 30  # Taylor terms per row


def bernoulli(n_max: int) -> list[F]:
    """B_0 … B_n_max (B_1 = −1/2), from Σ_{j<m+1} C(m+1, j) B_j = 0."""
    b = [F(1)]
    for m in range(1, n_max + 1):
        b.append(-sum(comb(m + 1, j) * b[j] for j in range(m)) / (m + 1))
    return b


def stirling(k_max: int) -> list[F]:
    """g_0 … g_k_max: exp(Σ_j B_2j / (2j (2j − 1) a^(2j−1))) as a series in 1/a."""
    b = bernoulli(2 * k_max + 2)
    log_series = [F(0)] * (k_max + 1)
    for j in range(1, k_max // 2 + 2):
        if 2 * j - 1 <= k_max:
            log_series[2 * j - 1] = b[2 * j] / (2 * j * (2 * j - 1))
    # exp of a series without constant term: g' = (log_series)' g.
    g = [F(1)] + [F(0)] * k_max
    for n in range(1, k_max + 1):
        g[n] = sum(j * log_series[j] * g[n - j] for j in range(1, n + 1)) / n
    return g


def mu_of_eta(order: int) -> list[F]:
    """Coefficients of μ(η) = Σ m_n η^n, μ − ln(1 + μ) = η²/2, μ ~ η, to η^order."""
    # η = μ √(2 (μ − ln(1+μ)) / μ²) = μ h(μ); invert by fixed-point on the series.
    f = [F(0)] * (order + 2)  # 2(μ − ln(1+μ))/μ² = Σ f_n μ^n, f_n = 2(−1)^n/(n+2)
    for n in range(order + 2):
        f[n] = F(2 * (-1) ** n, n + 2)
    h = sqrt_series(f, order + 1)  # h(μ), h(0) = 1
    # Lagrange: [η^n] μ = (1/n) [μ^(n−1)] h(μ)^(−n).
    inv_h = inverse_series(h, order + 1)
    m = [F(0)] * (order + 1)
    power = [F(1)] + [F(0)] * order
    for n in range(1, order + 1):
        power = multiply(power, inv_h, order)
        m[n] = power[n - 1] / n
    return m


def multiply(p: list[F], q: list[F], order: int) -> list[F]:
    out = [F(0)] * (order + 1)
    for i, pi in enumerate(p[: order + 1]):
        if pi:
            for j, qj in enumerate(q[: order + 1 - i]):
                out[i + j] += pi * qj
    return out


def inverse_series(p: list[F], order: int) -> list[F]:
    out = [F(0)] * (order + 1)
    out[0] = 1 / p[0]
    for n in range(1, order + 1):
        out[n] = -sum(p[j] * out[n - j] for j in range(1, min(n, len(p) - 1) + 1)) / p[0]
    return out


def sqrt_series(p: list[F], order: int) -> list[F]:
    """Square root of a series with p[0] = 1."""
    out = [F(0)] * (order + 1)
    out[0] = F(1)
    for n in range(1, order + 1):
        s = sum(out[j] * out[n - j] for j in range(1, n))
        out[n] = (p[n] - s) / 2
    return out


def table() -> list[list[F]]:
    order = N + 2 * K + 2
    m = mu_of_eta(order + 1)  # m[0] = 0, m[1] = 1
    s = inverse_series(m[1:], order)  # η/μ
    g = stirling(K)
    d = [[s[n + 1] for n in range(N + 2 * K)]]
    for k in range(1, K):
        prev = d[-1]
        sign = (-1) ** k
        assert prev[1] + sign * g[k] == 0, "the 1/η poles do not cancel"
        d.append([(n + 2) * prev[n + 2] + sign * g[k] * s[n + 1]
                  for n in range(len(prev) - 2)])
    return [row[:N] for row in d]


def main() -> None:
    print("_TEMME = np.array([")
    for row in table():
        line = "    ["
        for i, v in enumerate(row):
            piece = repr(float(v)) + ("], " if i == len(row) - 1 else ", ")
            if len(line) + len(piece.rstrip()) > 92:
                print(line.rstrip())
                line = "     "
            line += piece
        print(line.rstrip())
    print("])")


if __name__ == "__main__":
    main()
