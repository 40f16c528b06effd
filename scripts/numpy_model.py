"""A vectorised NumPy version of the loan-cycle model of benches/large.toml, for speed comparison.

It implements the same law as the engine for the benchmark's features (a member-scope shock with
village and portfolio factors, a village-scope shock with reach, fixed income and severities,
reshuffled groups of k within villages, joint liability with peer cover, group exclusion for E
cycles, interest-first losses loan by loan) with NumPy's own generator, so its figures agree with
`loancycle run` in law (within standard errors), not bit for bit. It prints served member-cycles per
second of its simulation loop on one core, and its group repayment rate with a standard error
between replications, so the two tools can be checked to simulate the same model.

Usage: python3 numpy_model.py [replications]   (scripts/numpy_bench.sh runs it in a private venv)
"""

import math
import sys
import time

import numpy as np
from scipy.stats import norm

# benches/large.toml
BORROWERS, VILLAGES = 100_000, 500
CYCLES = 50
PRINCIPAL, RATE, RECOVERY = 100.0, 0.1, 0.1
INCOME = 1.2
P_ILL, RHO_V, RHO_P, SEV_ILL = 0.05, 0.1, 0.02, 0.6
P_HARVEST, REACH, SEV_HARVEST = 0.03, 0.7, 0.5
K, COVER, EXCLUSION = 5, 0.5, 2
SLACK = 1e-9


def replication(rng):
    """One replication: returns (served member-cycles, groups, groups repaid, loss, disbursed)."""
    village = np.arange(BORROWERS) % VILLAGES
    order_by_village = np.argsort(village, kind="stable")
    village_sorted = village[order_by_village]
    excluded_until = np.zeros(BORROWERS, dtype=np.int64)
    threshold = norm.ppf(P_ILL)
    a_v, a_p, b = math.sqrt(RHO_V), math.sqrt(RHO_P), math.sqrt(1.0 - RHO_V - RHO_P)
    due = PRINCIPAL * (1.0 + RATE)
    served_total = groups_total = repaid_total = 0
    loss_total = disbursed_total = 0.0
    for cycle in range(1, CYCLES + 1):
        eligible = excluded_until[order_by_village] < cycle
        members = order_by_village[eligible]
        villages_of = village_sorted[eligible]
        # shuffle within villages: sort by (village, random key)
        keys = rng.random(members.size)
        perm = np.lexsort((keys, villages_of))
        members, villages_of = members[perm], villages_of[perm]
        # position within village; keep whole groups only
        counts = np.bincount(villages_of, minlength=VILLAGES)
        starts = np.concatenate(([0], np.cumsum(counts)[:-1]))
        pos = np.arange(members.size) - starts[villages_of]
        whole = (counts // K * K)[villages_of]
        keep = pos < whole
        members, villages_of = members[keep], villages_of[keep]
        n = members.size
        # shocks
        m_p = rng.standard_normal()
        m_v = rng.standard_normal(VILLAGES)
        eps = rng.standard_normal(n)
        ill = a_p * m_p + a_v * m_v[villages_of] + b * eps < threshold
        struck = rng.random(VILLAGES) < P_HARVEST
        harvest = struck[villages_of] & (rng.random(n) < REACH)
        capacity = due * INCOME * np.where(ill, 1.0 - SEV_ILL, 1.0) * np.where(harvest, 1.0 - SEV_HARVEST, 1.0)
        short = np.maximum(due - capacity, 0.0).reshape(-1, K)
        surplus = np.maximum(capacity - due, 0.0).reshape(-1, K)
        own = np.minimum(capacity, due).reshape(-1, K)
        s_sum, u_sum = short.sum(axis=1), surplus.sum(axis=1)
        repaid = s_sum <= COVER * u_sum + SLACK * K * due
        # defaulting groups: cover shared in proportion to unpaid amounts, interest first
        cover = COVER * u_sum
        share = np.divide(short, s_sum[:, None], out=np.zeros_like(short), where=s_sum[:, None] > 0)
        received = own + share * cover[:, None]
        unpaid_principal = np.minimum(PRINCIPAL, np.maximum(due - received, 0.0))
        loss = (1.0 - RECOVERY) * unpaid_principal[~repaid].sum()
        defaulters = members.reshape(-1, K)[~repaid].ravel()
        excluded_until[defaulters] = cycle + EXCLUSION
        served_total += n
        groups_total += repaid.size
        repaid_total += int(repaid.sum())
        loss_total += loss
        disbursed_total += n * PRINCIPAL
    return served_total, groups_total, repaid_total, loss_total, disbursed_total


def main():
    replications = int(sys.argv[1]) if len(sys.argv) > 1 else 4
    rng = np.random.default_rng(1)
    start = time.perf_counter()
    results = [replication(rng) for _ in range(replications)]
    seconds = time.perf_counter() - start
    served = sum(r[0] for r in results)
    rates = np.array([r[2] / r[1] for r in results])
    groups = np.array([r[1] for r in results], dtype=float)
    repaid = np.array([r[2] for r in results], dtype=float)
    pooled = repaid.sum() / groups.sum()
    # delta-method standard error of the pooled ratio, from the replications
    resid = repaid - pooled * groups
    se = math.sqrt((resid ** 2).sum() / (replications * (replications - 1))) / groups.mean() if replications > 1 else float("nan")
    print(f"numpy {np.__version__}: {replications} replications, {served} served member-cycles in {seconds:.2f} s")
    print(f"numpy rate: {served / seconds / 1e6:.2f} million member-cycles per second (one core)")
    print(f"numpy group repayment: {pooled:.5f} (se {se:.5f}); per replication {np.round(rates, 5).tolist()}")


if __name__ == "__main__":
    main()
