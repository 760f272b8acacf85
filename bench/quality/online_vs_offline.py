#!/usr/bin/python3
"""Online vs offline quality: does the streamed model learn as well as a batch fit?

For each synthetic world (see WORLDS: they differ in size, popularity skew, stream order,
drift and embedding dimension) and each seed, this script
  1. generates the world with `plumb synth` and writes its events in the world's stream order;
  2. starts a real `plumb-train` on a fresh store, streams the events into it over gRPC
     (`plumb-load replay`, EventIngest.PublishBatch), waits until GetStatus says idle (caught up,
     everything learned published), and evaluates the active version on the world's
     ground-truth test with `plumb eval`;
  3. fits `plumb fit` on the same events with the same configuration (objective, dim, beta,
     hold-out share, learning rate, optimiser) and evaluates it on the same test;
  4. on a world whose tastes move, also fits "yesterday's batch model" on the first three
     quarters of the stream.
It prints one table: Recall@20, NDCG@20, ARP@20 and the tail / head popularity-group shares,
online / offline, per world (mean over seeds, with min..max), and writes every figure as JSON.

Usage: bench/quality/online_vs_offline.py BUILD_DIR [--seeds 1,2,3] [--worlds a,b] [--out DIR]
       [--train-flag=--optimizer=sgd ...]   (extra plumb-train flags, for trying a change)
Takes about 1-2 minutes per world and seed on a 2-core machine.
"""
import argparse
import json
import os
import random
import shutil
import statistics
import subprocess
import sys
import tempfile
import time

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), ".."))
from bench_support import free_port  # noqa: E402

# name: synth options, stream order, embedding dim. "time" = timestamp order; "shuffled" = a
# random permutation; "bursty" = each member's events in sessions of up to 8, sessions in
# time order (one member's borrowings arrive together).
WORLDS = {
    "strong-time": dict(users=3000, items=1500, interactions=120000, zipf=1.0,
                        arrival_span=0.5, order="time", dim=32),
    "mild-shuffled": dict(users=6000, items=3000, interactions=200000, zipf=0.5,
                          order="shuffled", dim=64),
    "strong-bursty": dict(users=4000, items=2000, interactions=120000, zipf=1.2,
                          arrival_span=0.3, order="bursty", dim=32),
    "popularity-drift": dict(users=4000, items=2000, interactions=150000, zipf=1.0,
                             drift="popularity", order="time", dim=48),
    "tastes-move": dict(users=4000, items=2000, interactions=150000, zipf=0.8,
                        drift="tastes", drift_strength=0.8, order="time", dim=32),
    "large-mild": dict(users=20000, items=6000, interactions=400000, zipf=0.6,
                       arrival_span=0.5, order="time", dim=64),
    "dense-small": dict(users=1000, items=400, interactions=60000, zipf=0.9,
                        arrival_span=0.2, order="bursty", dim=16),
}
DEFAULT_WORLDS = ["strong-time", "mild-shuffled", "strong-bursty", "popularity-drift",
                  "tastes-move"]
HOLDOUT = 0.02


def run(cmd, **kw):
    return subprocess.run(cmd, check=True, stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                          text=True, **kw)


def write_stream(world_dir, order, seed, out_path, upto=1.0):
    with open(os.path.join(world_dir, "events.csv")) as f:
        header = f.readline()
        rows = [line for line in f]
    parsed = [(int(r.rsplit(",", 1)[1]), r.split(",", 1)[0], r) for r in rows]
    parsed.sort(key=lambda t: t[0])
    if order == "shuffled":
        random.Random(seed).shuffle(parsed)
    elif order == "bursty":
        by_user = {}
        for t in parsed:
            by_user.setdefault(t[1], []).append(t)
        sessions = []
        for evs in by_user.values():
            for s in range(0, len(evs), 8):
                sessions.append(evs[s:s + 8])
        sessions.sort(key=lambda s: s[0][0])
        parsed = [t for s in sessions for t in s]
    n = int(len(parsed) * upto)
    with open(out_path, "w") as f:
        f.write(header)
        for t in parsed[:n]:
            f.write(t[2])


def evaluate(bin_dir, db, test):
    out = run([f"{bin_dir}/cli/plumb", "eval", "--db", db, "--test", test, "--k", "20",
               "--json"]).stdout
    data = json.loads(out)
    rep = list(data["reports"].values())[0]
    return dict(recall=rep["recall"], ndcg=rep["ndcg"], arp=rep["arp"],
                tail=rep["group_shares"][0], head=rep["group_shares"][-1])


def fit(bin_dir, events, db, dim, extra):
    run([f"{bin_dir}/cli/plumb", "fit", "--events", events, "--db", db, "--dim", str(dim),
         "--holdout-fraction", str(HOLDOUT)] + extra)


def query_status(bin_dir, target):
    r = subprocess.run([f"{bin_dir}/tools/plumb-query", "status", "--trainer", target],
                       stdout=subprocess.PIPE, stderr=subprocess.DEVNULL, text=True)
    if r.returncode != 0:
        return None
    st = {}
    for line in r.stdout.splitlines():
        if ":" in line:
            k, v = line.split(":", 1)
            st[k.strip()] = v.strip()
    return st


def online(bin_dir, events, db, dim, train_flags, log_path, rate=0, test=None, timeout_s=1800):
    port = free_port()
    target = f"127.0.0.1:{port}"
    log = open(log_path, "w")
    proc = subprocess.Popen([f"{bin_dir}/trainer/online/plumb-train", "--db", db, "--listen",
                             target, "--metrics", "", "--dim", str(dim), "--no-sync",
                             "--holdout-fraction", str(HOLDOUT), "--publish-interval", "5s",
                             # The same fixed beta as plumb fit (plumb-train would tune it).
                             "--no-tune"]
                            + train_flags, stdout=log, stderr=subprocess.STDOUT)
    try:
        t0 = time.time()
        run([f"{bin_dir}/tools/plumb-load", "replay", "--events", events, "--trainer", target,
             "--quiet", "--rate", str(rate)])
        streamed = time.time() - t0
        at_end = None
        if rate > 0 and test:
            # What a caller is served the moment the stream ends (plumb eval reads the store
            # as a follower while plumb-train runs).
            at_end = evaluate(bin_dir, db, test)
        deadline = time.time() + timeout_s
        while time.time() < deadline:
            st = query_status(bin_dir, target)
            if st and st.get("idle", "").startswith("yes"):
                break
            time.sleep(0.5)
        else:
            raise RuntimeError(f"plumb-train not idle after {timeout_s} s; see {log_path}")
        return streamed, time.time() - t0, at_end
    finally:
        proc.terminate()
        proc.wait(timeout=30)
        log.close()


def one(bin_dir, name, spec, seed, work, train_flags, fit_flags, rate):
    wdir = os.path.join(work, f"{name}-s{seed}")
    shutil.rmtree(wdir, ignore_errors=True)
    os.makedirs(wdir)
    synth = [f"{bin_dir}/cli/plumb", "synth", "--out", os.path.join(wdir, "world"),
             "--users", str(spec["users"]), "--items", str(spec["items"]),
             "--interactions", str(spec["interactions"]), "--zipf", str(spec["zipf"]),
             "--seed", str(seed)]
    for key in ("drift", "drift_strength", "arrival_span"):
        if key in spec:
            synth += ["--" + key.replace("_", "-"), str(spec[key])]
    run(synth)
    world = os.path.join(wdir, "world")
    test = os.path.join(world, "test.csv")
    stream = os.path.join(wdir, "stream.csv")
    write_stream(world, spec["order"], seed, stream)
    dim = spec["dim"]
    res = {"world": name, "seed": seed}
    streamed, total, at_end = online(bin_dir, stream, os.path.join(wdir, "online"), dim,
                                     train_flags, os.path.join(wdir, "plumb-train.log"), rate,
                                     test)
    if at_end:
        res["at_stream_end"] = at_end
    res["online"] = evaluate(bin_dir, os.path.join(wdir, "online"), test)
    res["online_seconds"] = total
    res["stream_seconds"] = streamed
    t0 = time.time()
    fit(bin_dir, stream, os.path.join(wdir, "offline"), dim, fit_flags)
    res["offline_seconds"] = time.time() - t0
    res["offline"] = evaluate(bin_dir, os.path.join(wdir, "offline"), test)
    if spec.get("drift") == "tastes":
        early = os.path.join(wdir, "first-three-quarters.csv")
        write_stream(world, spec["order"], seed, early, upto=0.75)
        fit(bin_dir, early, os.path.join(wdir, "stale"), dim, fit_flags)
        res["stale"] = evaluate(bin_dir, os.path.join(wdir, "stale"), test)
    return res


def spread(values, fmt):
    m = statistics.mean(values)
    if len(values) == 1:
        return fmt % m
    return (fmt % m) + " (" + (fmt % min(values)) + ".." + (fmt % max(values)) + ")"


def table(results):
    mid = any("at_stream_end" in r for r in results)
    lines = ["| world | Recall@20 online / offline | NDCG@20 | ARP@20 | tail share online vs offline"
             " | head share online vs offline | online Recall@20 | offline | stale (3/4) |"
             + (" at stream end / offline |" if mid else ""),
             "| --- | --- | --- | --- | --- | --- | --- | --- | --- |" + (" --- |" if mid else "")]
    for name in dict.fromkeys(r["world"] for r in results):
        rs = [r for r in results if r["world"] == name]
        ratio = lambda k: [r["online"][k] / r["offline"][k] for r in rs]
        stale = [r["stale"]["recall"] for r in rs if "stale" in r]
        lines.append("| %s | %s | %s | %s | %s vs %s | %s vs %s | %s | %s | %s |" % (
            name, spread(ratio("recall"), "%.3f"), spread(ratio("ndcg"), "%.3f"),
            spread(ratio("arp"), "%.3f"),
            spread([r["online"]["tail"] for r in rs], "%.3f"),
            spread([r["offline"]["tail"] for r in rs], "%.3f"),
            spread([r["online"]["head"] for r in rs], "%.3f"),
            spread([r["offline"]["head"] for r in rs], "%.3f"),
            spread([r["online"]["recall"] for r in rs], "%.4f"),
            spread([r["offline"]["recall"] for r in rs], "%.4f"),
            spread(stale, "%.4f") if stale else "-")
            + (" %s |" % spread([r["at_stream_end"]["recall"] / r["offline"]["recall"]
                                 for r in rs if "at_stream_end" in r], "%.3f") if mid else ""))
    return "\n".join(lines)


def main():
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("build_dir")
    ap.add_argument("--seeds", default="1,2,3")
    ap.add_argument("--worlds", default=",".join(DEFAULT_WORLDS),
                    help="comma-separated, from: " + ", ".join(WORLDS))
    ap.add_argument("--rate", type=float, default=0,
                    help="events/s of the stream (0: as fast as acknowledged); with a rate, "
                         "the version active when the stream ends is also evaluated")
    ap.add_argument("--out", default=None, help="keep work files and results.json here")
    ap.add_argument("--train-flag", action="append", default=[],
                    help="extra plumb-train flag (repeatable), e.g. --train-flag=--beta=1")
    ap.add_argument("--fit-flag", action="append", default=[],
                    help="extra plumb fit flag (repeatable); keep it the same configuration")
    args = ap.parse_args()
    bin_dir = os.path.abspath(args.build_dir)
    work = os.path.abspath(args.out) if args.out else tempfile.mkdtemp(prefix="plumb-quality-")
    os.makedirs(work, exist_ok=True)
    results = []
    for name in args.worlds.split(","):
        if name not in WORLDS:
            sys.exit(f"unknown world '{name}'; known: {', '.join(WORLDS)}")
        for seed in [int(s) for s in args.seeds.split(",")]:
            r = one(bin_dir, name, WORLDS[name], seed, work, args.train_flag, args.fit_flag,
                    args.rate)
            results.append(r)
            print("%-17s seed %d: Recall@20 online %.4f offline %.4f (%.3f)%s; online %.0f s "
                  "(stream %.0f s), offline %.0f s" % (
                      name, seed, r["online"]["recall"], r["offline"]["recall"],
                      r["online"]["recall"] / r["offline"]["recall"],
                      (" stale %.4f" % r["stale"]["recall"] if "stale" in r else "") +
                      (" at stream end %.4f" % r["at_stream_end"]["recall"]
                       if "at_stream_end" in r else ""),
                      r["online_seconds"], r["stream_seconds"], r["offline_seconds"]),
                  file=sys.stderr, flush=True)
            with open(os.path.join(work, "results.json"), "w") as f:
                json.dump(results, f, indent=1)
    print(table(results))
    print(f"\nwork files and results.json in {work}", file=sys.stderr)


if __name__ == "__main__":
    main()
