#!/usr/bin/python3
"""Long run at an accelerated clock: does plumb-train's store and memory level off?

Streams DAYS simulated days of synthetic events (our own generator below: a fixed population
of USERS members and ITEMS tools; each member draws from a personal pool of 40 tools that
moves every two simulated days, tool popularity Zipf-like) into a real plumb-train, a day at
a time, as fast as it acknowledges (fsync off), and after each day waits until the trainer
has trained on everything and a retention pass has run. It then records the store's size on
disk (all files), the event log (events, stored MB), what retention removed, the training
pairs, and the trainer's RSS (VmRSS) and peak (VmHWM). Two configurations run one after the
other on fresh stores:
  all-history  no retention, no training window (the behaviour before issue 19)
  bounded      retention_max_age = 2d, training_window = 2d
Finally, the ingest latency during a retention pass: a store with RETAIN_DAYS days of events
is reopened with a 1-day retention rule, whose first pass starts at once; plumb-load
publishes events at a fixed rate meanwhile (and again after the pass) and reports the batch
latency of PublishBatch calls.

The event_id de-duplication window runs on the real clock (receipt time), so it is scaled
down with the clock (--dedup-window, default 20s, about one simulated day); the store keeps
two versions (keep_versions = 2, keep_versions_for = 0) and publishes every 5 s.

Usage: bench/system/long_run.py BUILD_DIR [--days 7] [--events-per-day 200000]
       [--users 20000] [--items 5000] [--dedup-window 20s]
Not part of CI (about 10-20 minutes on 2 cores).
"""
import argparse
import json
import os
import random
import re
import shutil
import subprocess
import sys
import tempfile
import time

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), ".."))
from bench_support import dir_bytes, free_port, memory_mb  # noqa: E402

DAY_MS = 86_400_000




class World:
    """Members with pools of tools that move every two simulated days."""

    def __init__(self, users, items, seed=7):
        self.users, self.items = users, items
        self.rng = random.Random(seed)
        # Zipf-like popularity: weight 1 / (rank + 10)^0.9 over the catalogue.
        self.weights = [1.0 / (r + 10) ** 0.9 for r in range(items)]
        self.cum = []
        acc = 0.0
        for w in self.weights:
            acc += w
            self.cum.append(acc)

    def draw_item(self, rng):
        import bisect
        return bisect.bisect_left(self.cum, rng.random() * self.cum[-1])

    def pool(self, user, epoch):
        rng = random.Random(user * 1_000_003 + epoch * 7919)
        return [self.draw_item(rng) for _ in range(40)]

    def day_csv(self, path, day, start_ms, events):
        epoch = day // 2
        pools = {}
        rows = []
        for _ in range(events):
            u = self.rng.randrange(self.users)
            p = pools.get(u)
            if p is None:
                p = pools[u] = self.pool(u, epoch)
            i = p[min(int(self.rng.expovariate(0.15)), len(p) - 1)]
            ts = start_ms + day * DAY_MS + self.rng.randrange(DAY_MS)
            rows.append((ts, u, i))
        rows.sort()
        with open(path, "w") as f:
            f.write("user,item,ts\n")
            for ts, u, i in rows:
                f.write("m%d,t%d,%d\n" % (u, i, ts))


class Trainer:
    def __init__(self, build, db, flags, log, dedup_window="20s"):
        self.build, self.db = build, db
        self.address = "127.0.0.1:%d" % free_port()
        args = [build + "/trainer/online/plumb-train", "--db", db, "--listen", self.address,
                "--metrics", "", "--no-sync", "--dim", "32", "--publish-interval", "5s",
                "--publish-every-events", "1000000", "--idle-replay-passes", "0",
                "--no-refit", "--max-future-skew", "0", "--keep-versions", "2",
                "--keep-versions-for", "0", "--dedup-window", dedup_window] + flags
        self.log = open(log, "a")
        self.proc = subprocess.Popen(args, stdout=self.log, stderr=self.log)
        for _ in range(300):
            if self.status(quiet=True) is not None:
                return
            time.sleep(0.1)
        raise SystemExit("plumb-train did not start; see " + log)

    def status(self, quiet=False):
        r = subprocess.run([self.build + "/tools/plumb-query", "status", "--trainer",
                            self.address], capture_output=True, text=True)
        if r.returncode != 0:
            if not quiet:
                print(r.stderr, file=sys.stderr)
            return None
        out = {}
        for line in r.stdout.splitlines():
            key, _, value = line.partition(":")
            out[key.strip()] = value.strip()
        return out

    def stop(self):
        self.proc.terminate()
        self.proc.wait(timeout=120)
        self.log.close()


def number(text):
    m = re.search(r"[0-9]+(\.[0-9]+)?", text or "")
    return float(m.group(0)) if m else 0.0


def replay(build, trainer, csv):
    t0 = time.time()
    r = subprocess.run([build + "/tools/plumb-load", "replay", "--events", csv, "--trainer",
                        trainer.address, "--events-per-call", "2000", "--quiet"],
                       capture_output=True, text=True)
    if r.returncode != 0:
        raise SystemExit("replay failed: " + r.stdout + r.stderr)
    return time.time() - t0


def wait_trained(trainer, timeout=900):
    t0 = time.time()
    while time.time() - t0 < timeout:
        s = trainer.status(quiet=True)
        if s:
            last = number(s.get("last sequence"))
            trained = number(s.get("trained sequence"))
            if last > 0 and trained >= last:
                return time.time() - t0
        time.sleep(0.5)
    raise SystemExit("the trainer did not catch up within %d s" % timeout)


def run_config(args, name, flags, tmp, start_ms, world_seed=7):
    db = os.path.join(tmp, "db-" + name)
    log = os.path.join(tmp, "train-" + name + ".log")
    world = World(args.users, args.items, world_seed)
    trainer = Trainer(args.build, db, flags, log, args.dedup_window)
    rows = []
    for day in range(args.days):
        csv = os.path.join(tmp, "day.csv")
        world.day_csv(csv, day, start_ms, args.events_per_day)
        ingest_s = replay(args.build, trainer, csv)
        train_s = wait_trained(trainer)
        # The cursor becomes durable with the next publish (every 5 s); a retention pass
        # (every 1 s) can then remove what was trained on.
        time.sleep(8.0)
        s = trainer.status()
        rss, hwm = memory_mb(trainer.proc.pid)
        log_mb = number(s["event log"].split(",")[1]) if "event log" in s else 0.0
        row = {
            "day": day + 1,
            "events_total": int(number(s.get("last sequence"))),
            "log_events": int(number(s.get("event log"))),
            "log_mb": log_mb,
            "removed": int(number(s.get("retention"))),
            "store_mb": dir_bytes(db) / 1e6,
            "sst_mb": dir_bytes(db, ".sst") / 1e6,
            "wal_mb": dir_bytes(db, ".log") / 1e6,
            "train_pairs": int(number(s.get("refits", "").split(" of ")[-1])),
            "rss_mb": rss, "hwm_mb": hwm, "ingest_s": ingest_s, "train_s": train_s,
        }
        rows.append(row)
        print("%-11s day %d: %9d events in all, log %8d events (%6.1f MB stored), removed %8d; "
              "store %7.1f MB on disk (tables %6.1f, write-ahead log %6.1f); training pairs %8d; trainer RSS %6.1f MB (peak %6.1f); "
              "replay %.1f s, training caught up %.1f s later" % (
                  name, row["day"], row["events_total"], row["log_events"], row["log_mb"],
                  row["removed"], row["store_mb"], row["sst_mb"], row["wal_mb"], row["train_pairs"], row["rss_mb"],
                  row["hwm_mb"], ingest_s, train_s), flush=True)
        os.remove(csv)
    trainer.stop()
    return rows, db


def publish_latency(args, trainer, seconds, tmp, tag):
    users = os.path.join(tmp, "users.txt")
    items = os.path.join(tmp, "items.txt")
    with open(users, "w") as f:
        f.write("\n".join("m%d" % u for u in range(args.users)) + "\n")
    with open(items, "w") as f:
        f.write("\n".join("t%d" % i for i in range(args.items)) + "\n")
    r = subprocess.run([args.build + "/tools/plumb-load", "--server", trainer.address, "--rpc",
                        "health", "--concurrency", "1", "--rate", "20", "--duration",
                        "%ds" % seconds, "--warmup", "0", "--trainer", trainer.address,
                        "--publish-rate", "5000", "--publish-events-per-call", "100",
                        "--users-file", users, "--items-file", items, "--event-ids",
                        "--json"],
                       capture_output=True, text=True)
    if r.returncode != 0:
        raise SystemExit("plumb-load failed: " + r.stdout + r.stderr)
    return json.loads(r.stdout)["publish"]


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("build")
    ap.add_argument("--days", type=int, default=7)
    ap.add_argument("--events-per-day", type=int, default=200_000)
    ap.add_argument("--users", type=int, default=20_000)
    ap.add_argument("--items", type=int, default=5_000)
    ap.add_argument("--keep", action="store_true", help="keep the stores")
    ap.add_argument("--configs", default="all-history,bounded",
                    help="which runs, comma-separated (the pass latency needs all-history)")
    ap.add_argument("--dedup-window", default="20s",
                    help="plumb-train's dedup_window, in real time: at the accelerated clock a "
                         "simulated day takes 10-20 s, so 20s stands for about a day")
    args = ap.parse_args()
    args.build = os.path.abspath(args.build)
    tmp = tempfile.mkdtemp(prefix="plumb-long-run-")
    now_ms = int(time.time() * 1000)
    start_ms = now_ms - (args.days + 1) * DAY_MS
    try:
        results = {}
        if "all-history" in args.configs:
            results["all-history"], _ = run_config(args, "all-history", [], tmp, start_ms)
        if "bounded" in args.configs:
            results["bounded"], _ = run_config(
                args, "bounded", ["--retention-max-age", "2d", "--retention-interval", "1s",
                                  "--training-window", "2d"], tmp, start_ms)
        if "all-history" not in args.configs:
            return

        # Ingest latency during a retention pass: the all-history store (DAYS days of events)
        # reopened with a 1-day rule; the first pass starts as the trainer starts.
        db = os.path.join(tmp, "db-all-history")
        log = os.path.join(tmp, "train-pass.log")
        trainer = Trainer(args.build, db, ["--retention-max-age", "1d",
                                           "--retention-interval", "10m"], log,
                          args.dedup_window)
        during = publish_latency(args, trainer, 8, tmp, "during")
        for _ in range(3600):  # the pass logs one line when it ends
            if any("retention removed" in l for l in open(log)):
                break
            time.sleep(1)
        after = publish_latency(args, trainer, 8, tmp, "after")
        trainer.stop()
        passes = [l for l in open(log) if "retention removed" in l]
        print("retention pass on the all-history store: %s" %
              (passes[0].split("] ")[-1].strip() if passes else "(no pass logged)"))
        for tag, p in (("during the pass", during), ("after it", after)):
            lat = p["batch_latency_us"]
            print("PublishBatch of 100 events at 5,000 events/s %s: %d batches, %d errors, "
                  "p50 %.2f ms, p99 %.2f ms, max %.2f ms" % (
                      tag, p["batches"], p["errors"], lat["p50_us"] / 1e3, lat["p99_us"] / 1e3,
                      lat["max_us"] / 1e3))
        results["publish_during_pass"], results["publish_after_pass"] = during, after
        with open(os.path.join(tmp, "long_run.json"), "w") as f:
            json.dump(results, f, indent=1)
        print("results: " + os.path.join(tmp, "long_run.json"))
    finally:
        if not args.keep:
            for entry in os.listdir(tmp):
                if entry.startswith("db-"):
                    shutil.rmtree(os.path.join(tmp, entry), ignore_errors=True)


if __name__ == "__main__":
    main()
