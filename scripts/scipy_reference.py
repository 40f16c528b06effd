#!/usr/bin/env python3
"""Prints the scipy reference values that the analytic companion's unit tests copy.

Run through scripts/scipy_reference.sh, which installs the pinned scipy first (tests never need Python).
The scipy and numpy versions are printed first; tests that copy a value name the version beside it.
"""

import numpy as np
import scipy
from numpy.polynomial.hermite_e import hermegauss
from scipy import integrate, stats

print(f"# scipy {scipy.__version__}, numpy {np.__version__}")

print("\n# standard normal: x, pdf(x), cdf(x)  (scipy.stats.norm)")
for x in [-30.0, -12.5, -8.0, -5.0, -3.0, -2.5, -2.0, -1.3, -1.0, -0.7, -0.2, 0.0, 0.4, 1.0, 1.7, 2.6, 4.0, 8.0]:
    print(f"({x!r}, {float(stats.norm.pdf(x))!r}, {float(stats.norm.cdf(x))!r}),")

print("\n# standard normal: p, ppf(p)  (scipy.stats.norm)")
for p in [1e-300, 1e-20, 1e-8, 1e-4, 0.001, 0.025, 0.1, 0.3, 0.5, 0.75, 0.975, 0.999, 1 - 1e-10]:
    print(f"({p!r}, {float(stats.norm.ppf(p))!r}),")

print("\n# Gauss-Hermite (probabilists'), weights normalised to sum 1  (numpy hermegauss)")
for n in [5, 20]:
    x, w = hermegauss(n)
    w = w / w.sum()
    print(f"n = {n}: non-negative nodes and their weights")
    for xi, wi in zip(x[n // 2:], w[n // 2:]):
        print(f"({float(xi)!r}, {float(wi)!r}),")


def cond(m, p, rho):
    return stats.norm.cdf((stats.norm.ppf(p) - np.sqrt(rho) * m) / np.sqrt(1 - rho))


print("\n# hit-count law P(n), k = 5, p = 0.1, rho = 0.3  (scipy.integrate.quad over the factor)")
for n in range(6):
    f = lambda m: stats.binom.pmf(n, 5, cond(m, 0.1, 0.3)) * stats.norm.pdf(m)
    v, err = integrate.quad(f, -40, 40, epsabs=1e-14, epsrel=1e-13, limit=200, points=[stats.norm.ppf(0.1) / np.sqrt(0.3)])
    print(f"({n}, {float(v)!r}),  // quad error estimate {err:.1e}")

print("\n# finite-pool CDF P(N <= j), members = 100, p = 0.05, rho = 0.15  (scipy.integrate.quad)")
for j in [0, 5, 10, 20, 33]:
    f = lambda m: stats.binom.cdf(j, 100, cond(m, 0.05, 0.15)) * stats.norm.pdf(m)
    v, err = integrate.quad(f, -40, 40, epsabs=1e-14, epsrel=1e-13, limit=400)
    print(f"({j}, {float(v)!r}),  // quad error estimate {err:.1e}")

print("\n# order-statistic interval ranks for the q-quantile of n values: (n, q, binom.ppf(0.025, n, q), binom.ppf(0.975, n, q) + 1)")
for n, q in [(40, 0.5), (40, 0.95), (200, 0.95), (200, 0.99), (400, 0.99), (1000, 0.999), (20000, 0.999), (5000000, 0.99)]:
    print(f"({n}, {q!r}, {int(stats.binom.ppf(0.025, n, q))}, {int(stats.binom.ppf(0.975, n, q)) + 1}),")
print("\n# one-sided ranks: (n, q, alpha, binom.ppf(1 - alpha, n, q) + 1, binom.ppf(alpha, n, q))")
for n, q, a in [(200, 0.95, 0.05 / 6), (1000, 0.99, 0.01), (60, 0.5, 0.05)]:
    print(f"({n}, {q!r}, {a!r}, {int(stats.binom.ppf(1 - a, n, q)) + 1}, {int(stats.binom.ppf(a, n, q))}),")
