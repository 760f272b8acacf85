#!/usr/bin/python3
"""Memory of plumb-train and plumb-serve at a given scale (not CI).

Makes a synthetic world with plumb's own generator (`plumb synth --users U --items I
--interactions N`: invented members and tools, popularity-biased exposure), streams its
events into a fresh plumb-train (fsync off, dim D, no background refit, a publish every
minute, one version kept), waits until it has trained on everything and published it
(status: idle), restarts it (the state is rebuilt from the store), then starts a plumb-serve
on the same store and waits until it serves. Reports each process's resident memory (VmRSS)
and peak (VmHWM), the store's size on disk and the time each step took.

Usage: bench/system/memory_at_scale.py BUILD_DIR [--users 1000000] [--items 100000]
       [--interactions 5000000] [--dim 64]
"""
import argparse
import os
import shutil
import subprocess
import sys
import tempfile
import time

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), ".."))
from bench_support import dir_bytes, free_port, memory_mb  # noqa: E402




def query(build, *args):
    return subprocess.run([build + "/tools/plumb-query"] + list(args), capture_output=True,
                          text=True)


def status_field(text, key):
    for line in text.splitlines():
        if line.startswith(key + ":"):
            return line.split(":", 1)[1].split()[0]
    return "0"


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("build")
    ap.add_argument("--users", type=int, default=1_000_000)
    ap.add_argument("--items", type=int, default=100_000)
    ap.add_argument("--interactions", type=int, default=5_000_000)
    ap.add_argument("--dim", type=int, default=64)
    ap.add_argument("--dir", default=None, help="work directory (default: a new one in /tmp)")
    a = ap.parse_args()
    build = os.path.abspath(a.build)
    tmp = a.dir or tempfile.mkdtemp(prefix="plumb-memory-")
    procs = []
    try:
        t0 = time.time()
        subprocess.run([build + "/cli/plumb", "synth", "--users", str(a.users), "--items",
                        str(a.items), "--interactions", str(a.interactions), "--out",
                        tmp + "/world"], check=True, stdout=subprocess.DEVNULL)
        events = sum(1 for _ in open(tmp + "/world/events.csv")) - 1
        print("synth: %d events for %d users x %d items in %.0f s" %
              (events, a.users, a.items, time.time() - t0), flush=True)

        train_addr = "127.0.0.1:%d" % free_port()
        log = open(tmp + "/train.log", "w")
        # Publishes every minute while it trains (keeping one version); done when its status
        # says idle: the whole log trained on and published.
        trainer = subprocess.Popen(
            [build + "/trainer/online/plumb-train", "--db", tmp + "/db", "--listen", train_addr,
             "--metrics", "", "--no-sync", "--dim", str(a.dim), "--no-refit",
             "--idle-replay-passes", "0", "--publish-every-events", "1000000000",
             "--publish-interval", "60s", "--keep-versions", "1", "--keep-versions-for", "0",
             "--max-future-skew", "0"], stdout=log, stderr=log)
        procs.append(trainer)
        for _ in range(600):
            if query(build, "status", "--trainer", train_addr).returncode == 0:
                break
            time.sleep(0.1)
        t0 = time.time()
        subprocess.run([build + "/tools/plumb-load", "replay", "--events",
                        tmp + "/world/events.csv", "--trainer", train_addr,
                        "--events-per-call", "5000", "--quiet"], check=True,
                       stdout=subprocess.DEVNULL)
        replay_s = time.time() - t0
        peak_during = 0.0
        while True:
            st = query(build, "status", "--trainer", train_addr).stdout
            peak_during = max(peak_during, memory_mb(trainer.pid)[0])
            if status_field(st, "idle") == "yes" and \
                    int(status_field(st, "trained sequence")) >= events:
                break
            if trainer.poll() is not None:
                sys.exit("plumb-train exited; see " + tmp + "/train.log")
            time.sleep(2)
        idle_s = time.time() - t0
        train_rss, train_hwm = memory_mb(trainer.pid)
        print("plumb-train: replay %.0f s (%.0f events/s); trained on everything and published "
              "%.0f s after the start; RSS %.0f MB, peak %.0f MB" % (
                  replay_s, events / replay_s, idle_s, train_rss, train_hwm), flush=True)

        # A restart rebuilds the training state from the store (what a deploy costs).
        trainer.terminate()
        trainer.wait(timeout=600)
        procs.remove(trainer)
        t0 = time.time()
        trainer = subprocess.Popen(
            [build + "/trainer/online/plumb-train", "--db", tmp + "/db", "--listen", train_addr,
             "--metrics", "", "--no-sync", "--dim", str(a.dim), "--no-refit",
             "--idle-replay-passes", "0", "--publish-interval", "60s", "--keep-versions", "1",
             "--keep-versions-for", "0", "--max-future-skew", "0"], stdout=log, stderr=log)
        procs.append(trainer)
        while query(build, "status", "--trainer", train_addr).returncode != 0:
            if trainer.poll() is not None:
                sys.exit("plumb-train exited; see " + tmp + "/train.log")
            time.sleep(0.2)
        restart_rss, restart_hwm = memory_mb(trainer.pid)
        print("plumb-train restarted: serving again after %.1f s; RSS %.0f MB, peak %.0f MB" %
              (time.time() - t0, restart_rss, restart_hwm), flush=True)

        serve_addr = "127.0.0.1:%d" % free_port()
        slog = open(tmp + "/serve.log", "w")
        t0 = time.time()
        server = subprocess.Popen([build + "/server/plumb-serve", "--db", tmp + "/db",
                                   "--listen", serve_addr, "--metrics", "", "--scratch-dir",
                                   tmp + "/scratch"], stdout=slog, stderr=slog)
        procs.append(server)
        while query(build, "health", "--server", serve_addr).returncode != 0:
            if server.poll() is not None:
                sys.exit("plumb-serve exited; see " + tmp + "/serve.log")
            time.sleep(0.5)
        serve_s = time.time() - t0
        r = query(build, "recommend", "--server", serve_addr, "--user", "m1", "--count", "20")
        serve_rss, serve_hwm = memory_mb(server.pid)
        print("plumb-serve: serving after %.1f s; RSS %.0f MB, peak %.0f MB (a Recommend: %s)"
              % (serve_s, serve_rss, serve_hwm, "ok" if r.returncode == 0 else r.stderr.strip()))
        print("store on disk: %.0f MB (one version kept)" % dir_bytes(tmp + "/db") / 1e6)
    finally:
        for p in procs:
            p.terminate()
        for p in procs:
            p.wait(timeout=600)
        if not a.dir:
            shutil.rmtree(tmp, ignore_errors=True)


if __name__ == "__main__":
    main()
