#!/usr/bin/python3
"""Where does plumb_exposure_shift_ratio sit for healthy, under- and over-corrected models?

The measurements behind the thresholds of PlumbUnderCorrected and PlumbOverCorrected
(deploy/prometheus/alerts.yml) and the advice in docs/operators.md. For each synthetic world it
fits several models with `plumb fit` (CPR at several betas, BPR, BCE) and the one `plumb tune`
chooses, serves each with a real plumb-serve, sends it 5 s of Recommend traffic with plumb-load
(top-20 lists for the world's members, 4 in flight, as deploy/demo.sh does), and reads the
exposure gauges from /metrics: the served popularity shift against the served version's
validation target, its distance, and the head share. Each model is also evaluated on the world's
ground-truth test (Recall@20). The true-relevance ranking cannot be served; its shift is
computed from `plumb compare --json`'s "truth" group shares against the same target (groups cut
on all pairs rather than the 98 % the fits train on: a close approximation).

With --online, the demo world is also streamed into a real plumb-train (deploy/demo.sh's
settings: dim 32, hold-out 2 %, publishes every 40,000 events or 5 s, beta tuned on rebuilds)
and its active version is served and measured the same way.

Usage: bench/quality/served_shift.py BUILD_DIR [--worlds demo,mild,mild2,strong,strong2,appeal]
       [--online] [--out results.json]
Copy the binaries elsewhere first if you keep building (DEVELOPERS.md, "Benchmarks"): BUILD_DIR
needs cli/plumb, server/plumb-serve, trainer/online/plumb-train, tools/plumb-query and
tools/plumb-load.
"""
import argparse
import json
import os
import shutil
import signal
import subprocess
import sys
import tempfile
import time
import urllib.request

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), ".."))
from bench_support import free_port  # noqa: E402

WORLD_SIZE = ["--users", "3000", "--items", "1500", "--interactions", "120000"]
WORLDS = {
    # deploy/demo.sh's world (default skew, visibility unrelated to appeal)
    "demo": ["--seed", "42"],
    "mild": ["--seed", "1", "--zipf", "0.4"],
    "mild2": ["--seed", "2", "--zipf", "0.4"],
    "strong": ["--seed", "1", "--zipf", "1.3"],
    "strong2": ["--seed", "2", "--zipf", "1.3"],
    # popular because good: appeal matters more and the shelf shows the appealing tools
    "appeal": ["--seed", "1", "--zipf", "0.6", "--appeal-spread", "1.5",
               "--appeal-visibility", "0.8"],
}
# (label, plumb fit flags): under-corrected (BPR, BCE, plain CPR), the default (beta 3), and
# pushed further: beta 10, 30 and 50 with k = 2 samples, and beta 10 with all samples k = 3.
FITS = [("cpr b=1", ["--objective", "cpr", "--beta", "1"]),
        ("cpr b=3", ["--objective", "cpr", "--beta", "3"]),
        ("cpr b=10", ["--objective", "cpr", "--beta", "10"]),
        ("cpr b=30", ["--objective", "cpr", "--beta", "30"]),
        ("cpr b=50", ["--objective", "cpr", "--beta", "50"]),
        ("cpr b=10 k3", ["--objective", "cpr", "--beta", "10", "--cpr-k3-share", "1"]),
        ("bpr", ["--objective", "bpr"]),
        ("bce", ["--objective", "bce"])]
FIT_FLAGS = ["--dim", "32", "--epochs", "20", "--holdout-fraction", "0.02"]


def run(args, **kw):
    return subprocess.run(args, check=True, stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                          text=True, **kw).stdout


def scrape(addr):
    text = urllib.request.urlopen("http://%s/metrics" % addr, timeout=10).read().decode()
    out = {"target": {}, "shares": {}}
    for line in text.splitlines():
        if line.startswith("#") or not line.strip():
            continue
        name, value = line.rsplit(" ", 1)
        if name.startswith("plumb_validation_target_group_share_ratio"):
            out["target"][int(name.split('"')[1])] = float(value)
        elif name.startswith("plumb_exposure_group_share_ratio"):
            out["shares"][int(name.split('"')[1])] = float(value)
        elif name in ("plumb_exposure_shift_ratio", "plumb_exposure_shift_distance_ratio",
                      "plumb_exposure_head_share_ratio", "plumb_exposure_window_lists",
                      "plumb_exposure_gini_ratio", "plumb_exposure_js_divergence"):
            out[name] = float(value)
    out["target"] = [out["target"][g] for g in sorted(out["target"])]
    out["shares"] = [out["shares"][g] for g in sorted(out["shares"])]
    return out


def shift(p, q):
    """core/metrics.h group_share_shift: difference of mean group index / (G - 1)."""
    mean = lambda v: sum(g * x for g, x in enumerate(v)) / sum(v)
    return (mean(p) - mean(q)) / (len(p) - 1)


def wait_health(query, serve):
    for _ in range(150):
        if subprocess.run([query, "health", "--server", serve], stdout=subprocess.DEVNULL,
                          stderr=subprocess.DEVNULL).returncode == 0:
            return
        time.sleep(0.2)
    raise RuntimeError("plumb-serve did not become healthy")


def measure(b, db, world_dir, users_file):
    """Serves db, sends 5 s of traffic, returns the gauges and the truth-test recall."""
    serve, metrics = "127.0.0.1:%d" % free_port(), "127.0.0.1:%d" % free_port()
    proc = subprocess.Popen([b["serve"], "--db", db, "--listen", serve, "--metrics", metrics],
                            stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    try:
        wait_health(b["query"], serve)
        run([b["load"], "--server", serve, "--users-file", users_file, "--duration", "5s",
             "--concurrency", "4", "--count", "20"])
        gauges = scrape(metrics)
    finally:
        proc.send_signal(signal.SIGTERM)
        proc.wait(timeout=30)
    ev = json.loads(run([b["plumb"], "eval", "--db", db, "--test", world_dir + "/test.csv",
                         "--k", "20", "--json"]))
    gauges["recall"] = list(ev["reports"].values())[0]["recall"]
    gauges["arp"] = list(ev["reports"].values())[0]["arp"]
    return gauges


def online(b, tmp, world_dir, users_file):
    """deploy/demo.sh's trainer run: stream the events, wait until idle, measure."""
    listen, tmetrics = "127.0.0.1:%d" % free_port(), "127.0.0.1:%d" % free_port()
    db = tmp + "/online"
    proc = subprocess.Popen([b["train"], "--db", db, "--listen", listen, "--metrics", tmetrics,
                             "--dim", "32", "--publish-every-events", "40000",
                             "--publish-interval", "5s", "--holdout-fraction", "0.02"],
                            stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    try:
        for _ in range(300):
            if subprocess.run([b["query"], "status", "--trainer", listen],
                              stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL).returncode == 0:
                break
            time.sleep(0.1)
        run([b["load"], "replay", "--events", world_dir + "/events.csv", "--trainer", listen])
        for _ in range(720):
            status = subprocess.run([b["query"], "status", "--trainer", listen],
                                    stdout=subprocess.PIPE, stderr=subprocess.DEVNULL,
                                    text=True).stdout
            versions = subprocess.run([b["query"], "versions", "--trainer", listen],
                                      stdout=subprocess.PIPE, stderr=subprocess.DEVNULL,
                                      text=True).stdout
            idle = any(l.split()[:2] == ["idle:", "yes"] for l in status.splitlines())
            active = any(l.startswith("*") for l in versions.splitlines())
            if idle and active:
                break
            time.sleep(0.5)
        else:
            raise RuntimeError("the trainer did not become idle with an active version")
    finally:
        proc.send_signal(signal.SIGTERM)
        proc.wait(timeout=60)
    return measure(b, db, world_dir, users_file)


def main():
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("build_dir")
    ap.add_argument("--worlds", default=",".join(WORLDS))
    ap.add_argument("--online", action="store_true")
    ap.add_argument("--out", default=None)
    args = ap.parse_args()
    bd = args.build_dir
    b = {"plumb": bd + "/cli/plumb", "serve": bd + "/server/plumb-serve",
         "train": bd + "/trainer/online/plumb-train", "query": bd + "/tools/plumb-query",
         "load": bd + "/tools/plumb-load"}
    results = []
    for name in args.worlds.split(","):
        tmp = tempfile.mkdtemp(prefix="plumb-shift-")
        try:
            world = tmp + "/world"
            run([b["plumb"], "synth", "--out", world] + WORLD_SIZE + WORLDS[name])
            users_file = tmp + "/users.txt"
            with open(world + "/events.csv") as f, open(users_file, "w") as out:
                next(f)
                out.write("\n".join(sorted({l.split(",")[0] for l in f})) + "\n")
            truth = json.loads(run([b["plumb"], "compare", "--json", "--dim", "32"] +
                                   WORLD_SIZE + WORLDS[name]))["reports"]["truth"]
            rows = []
            models = [("tuned", None)] + FITS + ([("online", None)] if args.online and
                                                  name == "demo" else [])
            for label, flags in models:
                if label == "online":
                    g = online(b, tmp, world, users_file)
                else:
                    db = "%s/%s" % (tmp, label.replace(" ", "_").replace("=", ""))
                    if label == "tuned":
                        out = run([b["plumb"], "tune", "--events", world + "/events.csv",
                                   "--db", db, "--publish"] + FIT_FLAGS)
                        label = "tuned b=%s" % [l for l in out.splitlines()
                                                if "chosen" in l][0].split()[0]
                    else:
                        run([b["plumb"], "fit", "--events", world + "/events.csv", "--db", db]
                            + flags + FIT_FLAGS)
                    g = measure(b, db, world, users_file)
                rows.append((label, g))
                print("%-7s %-12s shift %+.3f distance %.3f head %.3f | Recall@20 %.4f ARP %.1f"
                      % (name, label, g["plumb_exposure_shift_ratio"],
                         g["plumb_exposure_shift_distance_ratio"],
                         g["plumb_exposure_head_share_ratio"], g["recall"], g["arp"]),
                      flush=True)
                results.append({"world": name, "model": label, **g})
            target = rows[0][1]["target"]
            ts = shift(truth["group_shares"], target)
            print("%-7s %-12s shift %+.3f (offline, against the same target) | Recall@20 %.4f "
                  "ARP %.1f" % (name, "truth", ts, truth["recall"], truth["arp"]), flush=True)
            results.append({"world": name, "model": "truth", "plumb_exposure_shift_ratio": ts,
                            "recall": truth["recall"], "arp": truth["arp"], "target": target})
        finally:
            shutil.rmtree(tmp, ignore_errors=True)
        if args.out:  # after every world, so that an interrupted run keeps what it measured
            with open(args.out, "w") as f:
                json.dump(results, f, indent=1)


if __name__ == "__main__":
    main()
