#!/usr/bin/python3
"""Reference pipeline for tests/bench/compare.sh, written with
general-purpose libraries only (Debian's python3-numpy and python3-pandas),
the way an analyst would write it by hand.

It fits the model `priceiv estimate` fits in the comparison:

    ln units = a_(product,store) + s_week + e ln price + u,
    ln price instrumented by the cost shifters bean and freight,

by two-stage least squares after absorbing both fixed effects with
alternating demeaning, with standard errors clustered by store, and prints
one JSON object: the elasticity, its standard error, n, k, G and the
number of sweeps.

Conventions follow priceiv's README ("Conventions"):

* rows whose level of a fixed effect occurs once (singletons) are dropped,
  repeatedly, until none is left;
* absorption: each column is demeaned by the effects in turn (one sweep is
  one pass over both effects) until the largest change a sweep makes to
  any value is at most tol times the standard deviation of the original
  column (tol = 1e-10, priceiv's default);
* one-way cluster-robust covariance with the small-sample factor
  G/(G-1) * (n-1)/(n-k), where k counts the regressors plus the absorbed
  fixed-effect levels, except the levels of an effect nested within the
  clusters. The absorbed levels are L1 + L2 - C, C the number of connected
  components of the bipartite graph of the two effects' levels joined by
  the rows; the C redundant levels are counted against the second effect
  (week), so a nested first effect (product x store within store) leaves
  out all of its L1 levels.
"""

import argparse
import json
import sys

import numpy as np
import pandas as pd


def drop_singletons(groups):
    """Boolean mask of the rows kept after repeatedly dropping rows whose
    level of some effect occurs only once."""
    keep = np.ones(len(groups[0]), dtype=bool)
    while True:
        dropped = 0
        for g in groups:
            counts = np.bincount(g[keep], minlength=g.max() + 1)
            single = keep & (counts[g] == 1)
            dropped += int(single.sum())
            keep &= ~single
        if dropped == 0:
            return keep


def recode(g):
    """Codes 0..L-1 for the levels that occur."""
    codes, uniques = pd.factorize(g)
    return codes, len(uniques)


def demean(col, groups, tol, max_sweeps):
    """Alternating projections: subtract each effect's level means in turn
    until a sweep changes no value by more than tol * sd(col)."""
    counts = [np.bincount(g).astype(float) for g in groups]
    scale = col.std()
    r = col.copy()
    if scale == 0:
        return np.zeros_like(col), 0
    for sweep in range(1, max_sweeps + 1):
        before = r.copy()
        for g, c in zip(groups, counts):
            means = np.bincount(g, weights=r) / c
            r -= means[g]
        change = np.max(np.abs(r - before))
        if change <= tol * scale:
            return r, sweep
    sys.exit(f"reference: demeaning did not converge in {max_sweeps} sweeps")


def components(g1, l1, g2, l2):
    """Number of connected components of the bipartite graph whose nodes
    are the levels of two effects and whose edges are the rows, by label
    propagation (every level takes the smallest label it is joined to)."""
    lab1 = np.arange(l1)
    lab2 = np.arange(l2) + l1
    while True:
        row = np.minimum(lab1[g1], lab2[g2])
        new1 = pd.Series(row).groupby(g1).min().reindex(range(l1)).to_numpy()
        new2 = pd.Series(row).groupby(g2).min().reindex(range(l2)).to_numpy()
        new1 = np.minimum(new1, lab1)
        new2 = np.minimum(new2, lab2)
        if np.array_equal(new1, lab1) and np.array_equal(new2, lab2):
            break
        lab1, lab2 = new1, new2
    return len(np.unique(np.concatenate([lab1, lab2])))


def nested(g, cluster):
    """True when every level of g lies within one cluster."""
    return bool((pd.Series(cluster).groupby(g).nunique() == 1).all())


def main():
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("panel", help="CSV panel written by tests/bench/gen")
    ap.add_argument("--tol", type=float, default=1e-10)
    ap.add_argument("--max-sweeps", type=int, default=10000)
    a = ap.parse_args()

    df = pd.read_csv(a.panel)
    y = np.log(df["units"].to_numpy(dtype=float))
    x = np.log(df["price"].to_numpy(dtype=float))
    z = df[["bean", "freight"]].to_numpy(dtype=float)
    pair = df.groupby(["product", "store"], sort=False).ngroup().to_numpy()
    week = pd.factorize(df["week"])[0]
    store = pd.factorize(df["store"])[0]
    del df

    keep = drop_singletons([pair, week])
    y, x, z = y[keep], x[keep], z[keep]
    pair, l_pair = recode(pair[keep])
    week, l_week = recode(week[keep])
    store, G = recode(store[keep])
    n = len(y)

    groups = [pair, week]
    sweeps = 0
    cols = []
    for c in (y, x, z[:, 0], z[:, 1]):
        r, s = demean(c, groups, a.tol, a.max_sweeps)
        cols.append(r)
        sweeps = max(sweeps, s)
    y, x, z = cols[0], cols[1][:, None], np.column_stack(cols[2:])

    # 2SLS: X^ = Z (Z'Z)^-1 Z'X, b = (X^'X)^-1 X^'y.
    xhat = z @ np.linalg.solve(z.T @ z, z.T @ x)
    b = np.linalg.solve(xhat.T @ x, xhat.T @ y)
    e = y - x @ b

    # Cluster-robust: bread (X^'X^)^-1, meat sum_g s_g s_g', s_g = sum_{i in g} x^_i e_i.
    scores = np.column_stack([np.bincount(store, weights=xhat[:, j] * e, minlength=G) for j in range(xhat.shape[1])])
    bread = np.linalg.inv(xhat.T @ xhat)
    meat = scores.T @ scores

    absorbed = l_pair + l_week - components(pair, l_pair, week, l_week)
    nested_dof = 0
    if nested(pair, store):
        nested_dof += l_pair
    if nested(week, store):
        nested_dof += l_week - components(pair, l_pair, week, l_week)
    k = x.shape[1] + absorbed - nested_dof
    factor = G / (G - 1) * (n - 1) / (n - k)
    v = factor * bread @ meat @ bread

    json.dump({"n": n, "elasticity": float(b[0]), "std_error": float(np.sqrt(v[0, 0])),
               "k": int(k), "G": int(G), "absorbed_dof": int(absorbed), "sweeps": sweeps,
               "small_sample": factor}, sys.stdout, indent=2)
    sys.stdout.write("\n")


if __name__ == "__main__":
    main()
