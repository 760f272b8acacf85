#!/usr/bin/env python3
"""Compares plumb's metrics (via core_reference_probe) with outside references:

- NDCG@k: sklearn.metrics.ndcg_score (scikit-learn, Debian python3-sklearn).
  ndcg_score takes graded relevance over the whole catalogue and a score per item, and ranks
  by score. We give it binary relevance (1 for test items) and scores that realise our ranked
  list exactly: a full permutation of the catalogue, item at rank r scoring n - r, all scores
  distinct so no tie averaging happens. Its ideal DCG at k then places min(k, |relevant|) ones
  first, which is the binary-gain NDCG of Järvelin & Kekäläinen (2002) that plumb computes.
- Recall@k: hits / |relevant|, counted here with plain Python sets.
- Gini: numpy, by the mean-absolute-difference form sum|x_i - x_j| / (2 n^2 mean), a
  different formula from the sorted one plumb uses.
- Jensen-Shannon divergence: scipy.spatial.distance.jensenshannon(p, q, base=2) returns the
  JS *distance*, the square root of the divergence, so we square it.
Exits non-zero on any mismatch, printing the case.
"""
import subprocess
import sys

import numpy as np
from scipy.spatial.distance import jensenshannon
from sklearn.metrics import ndcg_score


def main(probe):
    rng = np.random.default_rng(20240601)
    lines, expected = [], []

    for _ in range(400):
        n = int(rng.integers(2, 60))
        k = int(rng.integers(1, n + 5))  # sometimes beyond the catalogue
        ranked = rng.permutation(n)
        m = int(rng.integers(1, n + 1))
        relevant = np.sort(rng.choice(n, size=m, replace=False))
        y_true = np.zeros((1, n))
        y_true[0, relevant] = 1.0
        y_score = np.zeros((1, n))
        y_score[0, ranked] = np.arange(n, 0, -1, dtype=float)
        ref_ndcg = ndcg_score(y_true, y_score, k=k)
        ref_recall = len(set(ranked[:k].tolist()) & set(relevant.tolist())) / m
        lines.append("ndcg %d %d %s %d %s" % (k, n, " ".join(map(str, ranked)), m,
                                             " ".join(map(str, relevant))))
        expected.append(("ndcg", (ref_ndcg, ref_recall)))

    for _ in range(200):
        n = int(rng.integers(1, 80))
        counts = rng.integers(0, 1000, size=n) * (rng.random(n) < 0.7)
        x = counts.astype(float)
        if x.sum() == 0:
            ref = 0.0
        else:
            ref = np.abs(x[:, None] - x[None, :]).sum() / (2.0 * n * n * x.mean())
        lines.append("gini %d %s" % (n, " ".join(map(str, counts))))
        expected.append(("gini", (ref,)))

    for _ in range(200):
        n = int(rng.integers(1, 12))
        p = rng.random(n) * (rng.random(n) < 0.7)
        q = rng.random(n) * (rng.random(n) < 0.7)
        p[0] += 0.01  # keep both sums positive (zero sums are undefined, tested in C++)
        q[-1] += 0.01
        ref = jensenshannon(p, q, base=2) ** 2
        lines.append("js %d %s %s" % (n, " ".join(repr(float(v)) for v in p),
                                      " ".join(repr(float(v)) for v in q)))
        expected.append(("js", (ref,)))

    out = subprocess.run([probe], input="\n".join(lines) + "\n", capture_output=True,
                         text=True, check=True).stdout.splitlines()
    if len(out) != len(expected):
        print("probe returned %d lines for %d cases" % (len(out), len(expected)))
        return 1
    failures = 0
    counts = {}
    for line, got, (kind, ref) in zip(lines, out, expected):
        values = [float(v) for v in got.split()]
        counts[kind] = counts.get(kind, 0) + 1
        for g, r in zip(values, ref):
            if not abs(g - r) <= 1e-9 + 1e-9 * abs(r):
                failures += 1
                print("MISMATCH %s: plumb %r reference %r\n  case: %s" % (kind, g, r, line[:200]))
    print("checked %s" % ", ".join("%d %s cases" % (v, k) for k, v in sorted(counts.items())))
    print("%d passed, %d failed" % (len(expected) - failures, failures))
    return 1 if failures else 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1]))
