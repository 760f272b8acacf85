#!/usr/bin/env python3
"""Recomputes the exposure gauges from the Recommend responses a client received, and
compares them with what plumb-serve's /metrics reports.

Usage: exposure_check.py QUERY SERVE_ADDR METRICS_ADDR EVENTS_CSV USERS [COUNT]

Definitions used here, written independently of the server's code from DESIGN.md §6:
- popularity of an item = its training degree (distinct users who interacted with it; the
  store was fitted without hold-out, so every distinct (user, item) pair of EVENTS_CSV);
- ARP of served slots = mean popularity over all served slots (Abdollahpouri et al., 2019);
- interaction popularity = sum d^2 / sum d; lift = ARP / interaction popularity;
- Gini coefficient of exposure counts over the whole catalogue, by the sorted formula
  G = sum_i (2i - n - 1) x_(i) / (n sum x) (e.g. Damgaard & Weiner 2000);
- coverage = share of items served at least once;
- popularity groups: items sorted by degree ascending (ties by first appearance order of the
  dense index), item goes to group ceil(cumulative degree * G / total) - 1 (equal degree
  mass); shares of served slots and of interactions per group;
- drift = Jensen-Shannon divergence, base 2 (Lin 1991).
"""
import csv
import math
import re
import subprocess
import sys
import urllib.request


def gini(xs):
    xs = sorted(xs)
    n, total = len(xs), sum(xs)
    if n == 0 or total == 0:
        return 0.0
    return sum((2 * (i + 1) - n - 1) * x for i, x in enumerate(xs)) / (n * total)


def js(p, q):
    sp, sq = sum(p), sum(q)
    p = [x / sp for x in p]
    q = [x / sq for x in q]
    m = [(a + b) / 2 for a, b in zip(p, q)]
    def kl(a, b):
        return sum(x * math.log2(x / y) for x, y in zip(a, b) if x > 0)
    return 0.5 * kl(p, m) + 0.5 * kl(q, m)


def main():
    query, serve, metrics, events_csv, users_arg = sys.argv[1:6]
    count = int(sys.argv[6]) if len(sys.argv) > 6 else 10
    groups = 5
    pairs = set()
    item_order = {}  # item id -> dense index (order of first appearance, as the store assigns)
    with open(events_csv) as f:
        for row in csv.DictReader(f):
            pairs.add((row["user"], row["item"]))
            item_order.setdefault(row["item"], len(item_order))
    degree = {}
    for _, item in pairs:
        degree[item] = degree.get(item, 0) + 1
    items = sorted(item_order, key=lambda i: item_order[i])

    users = users_arg.split(",")
    served = []
    version = None
    for user in users:
        out = subprocess.run([query, "recommend", "--server", serve, "--user", user,
                              "--count", str(count)],
                             capture_output=True, text=True, check=True).stdout
        got = re.findall(r"^\s*\d+\s+(\S+)\s", out, re.M)
        assert len(got) == count, out
        served.extend(got)
        v = re.search(r"version (\d+)", out)
        assert v, out
        assert version in (None, v.group(1)), "version changed during the check"
        version = v.group(1)

    counts = {i: 0 for i in items}
    for i in served:
        counts[i] += 1
    d = [degree[i] for i in items]
    arp = sum(degree[i] for i in served) / len(served)
    inter = sum(x * x for x in d) / sum(d)
    order = sorted(range(len(items)), key=lambda k: (d[k], k))
    total = sum(d)
    group = [0] * len(items)
    cum = 0
    for k in order:
        cum += d[k]
        group[k] = min(groups - 1, max(0, math.ceil(cum * groups / total) - 1))
    exp_share = [0.0] * groups
    int_share = [0.0] * groups
    for k, item in enumerate(items):
        exp_share[group[k]] += counts[item] / len(served)
        int_share[group[k]] += d[k] / total
    expected = {
        "plumb_exposure_window_lists": len(users),
        "plumb_exposure_served_popularity_interactions": arp,
        "plumb_interaction_popularity_interactions": inter,
        "plumb_exposure_popularity_lift_ratio": arp / inter,
        "plumb_exposure_gini_ratio": gini(list(counts.values())),
        "plumb_exposure_coverage_ratio": sum(1 for c in counts.values() if c) / len(items),
        "plumb_exposure_js_divergence": js(exp_share, int_share),
    }
    for g in range(groups):
        # Groups are numbered from 1 (least popular), as plumb eval numbers them.
        expected['plumb_exposure_group_share_ratio{group="%d"}' % (g + 1)] = exp_share[g]
        expected['plumb_interaction_group_share_ratio{group="%d"}' % (g + 1)] = int_share[g]

    text = urllib.request.urlopen("http://%s/metrics" % metrics, timeout=10).read().decode()
    reported = {}
    for line in text.splitlines():
        if line.startswith("#") or not line.strip():
            continue
        name, value = line.rsplit(" ", 1)
        reported[name] = float(value)
    failures = 0
    for name, want in expected.items():
        got = reported.get(name)
        ok = got is not None and math.isclose(got, want, rel_tol=1e-6, abs_tol=1e-9)
        print("%-4s %-55s server %-14s recomputed %.9g" % ("ok" if ok else "FAIL", name, got, want))
        failures += not ok
    print("%d lists of %d from version %s; %d figures compared, %d differ"
          % (len(users), count, version, len(expected), failures))
    return 1 if failures else 0


if __name__ == "__main__":
    sys.exit(main())
