#!/usr/bin/env python3
"""Fan-out of one 1,000,000 x 64 version to two remote replicas over NATS JetStream (not CI).

A three-node JetStream cluster on loopback (tests/stream/jetstream_cluster_test.py's Node),
a store made by `jetstream_tool make-version` (1,000,000 tools, 20,000 members, 2,000,000
random interactions; version 1: ten rows, active; version 2: every row at d = 64, values
uniform in [-0.5, 0.5)), plumb-train on it with --jetstream-versions (stream and bucket with
three replicas) and two `plumb-serve --replica-of` with their own directories, serving
version 1. Then `plumb-query activate --model-version 2`, and the time from that call until
each replica's plumb_model_version says 2 (polled every 50 ms): plumb-train reads the version
from its store, encodes and publishes it (plumb_version_ship_seconds), moves the pointer;
each replica fetches, verifies, writes (fsync), decodes and builds its snapshot (exact
scans: --approx-min-items 0; the approximate indexes would add their build, README "Large
catalogues"). Reports both times, the ship time, the bundle's size, and each replica's
resident memory after the swap (VmRSS) and its peak (VmHWM). Everything shares the machine.

Usage: bench/system/replica_fanout.py BUILD_DIR [--items 1000000] [--dim 64]
"""
import argparse
import os
import re
import shutil
import subprocess
import sys
import tempfile
import time

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "../../tests/stream"))
from jetstream_cluster_test import TOKEN, Node, fail, free_port, scrape, wait_for  # noqa: E402


def proc_status(pid, key):
    with open("/proc/%d/status" % pid) as f:
        for line in f:
            if line.startswith(key + ":"):
                return int(line.split()[1]) / 1024.0
    return float("nan")


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("build")
    ap.add_argument("--items", type=int, default=1000000)
    ap.add_argument("--users", type=int, default=20000)
    ap.add_argument("--dim", type=int, default=64)
    ap.add_argument("--interactions", type=int, default=2000000)
    ap.add_argument("--nats-server", default=shutil.which("nats-server") or "/usr/sbin/nats-server")
    args = ap.parse_args()
    b = args.build
    train, serve = os.path.join(b, "trainer/online/plumb-train"), os.path.join(b, "server/plumb-serve")
    query, tool = os.path.join(b, "tools/plumb-query"), os.path.join(b, "tests/stream/jetstream_tool")
    tmp = tempfile.mkdtemp(prefix="plumb-fanout-")
    procs, nodes = [], []
    try:
        t = time.time()
        r = subprocess.run([tool, "make-version", os.path.join(tmp, "db"), str(args.items),
                            str(args.users), str(args.dim), str(args.interactions)],
                           capture_output=True, text=True, check=True)
        small, big = map(int, re.search(r"versions (\d+) (\d+)", r.stdout).groups())
        print("store: %d items x %d, %d users, versions %d (10 rows) and %d, made in %.1f s" %
              (args.items, args.dim, args.users, small, big, time.time() - t))
        ports = [(free_port(), free_port(), free_port()) for _ in range(3)]
        nodes = [Node(args.nats_server, tmp, i, ports) for i in range(3)]
        for n in nodes:
            n.start()
        servers = ",".join("nats://127.0.0.1:%d" % n.port for n in nodes)
        token_file = os.path.join(tmp, "token")
        with open(token_file, "w") as f:
            f.write(TOKEN + "\n")
        logs = [os.path.join(tmp, x + ".log") for x in ("train", "serve-a", "serve-b")]
        train_addr, train_metrics = "127.0.0.1:%d" % free_port(), "127.0.0.1:%d" % free_port()
        procs.append(subprocess.Popen(
            [train, "--db", os.path.join(tmp, "db"), "--listen", train_addr, "--metrics",
             train_metrics, "--dim", str(args.dim), "--no-auto-activate", "--no-refit",
             "--jetstream-servers", servers, "--jetstream-token-file", token_file,
             "--no-jetstream-events", "--jetstream-versions", "--jetstream-create-replicas", "3"],
            stdout=open(logs[0], "w"), stderr=subprocess.STDOUT))
        wait_for("version %d shipped" % small,
                 lambda: scrape(train_metrics).get("plumb_version_pointer") == small, 120, logs)
        replicas = []
        for name in ("a", "b"):
            metrics = "127.0.0.1:%d" % free_port()
            p = subprocess.Popen(
                [serve, "--db", os.path.join(tmp, "replica-" + name), "--replica-of", servers,
                 "--replica-token-file", token_file, "--listen", "127.0.0.1:%d" % free_port(),
                 "--metrics", metrics, "--catchup-interval", "100ms", "--approx-min-items", "0"],
                stdout=open(os.path.join(tmp, "serve-%s.log" % name), "w"),
                stderr=subprocess.STDOUT)
            procs.append(p)
            replicas.append((name, p, metrics))
        for name, p, metrics in replicas:
            wait_for("replica %s to serve version %d" % (name, small),
                     lambda: scrape(metrics).get("plumb_model_version") == small, 60, logs)

        t0 = time.time()
        print("activation called at %s" % time.strftime("%H:%M:%S", time.localtime(t0)) +
              ".%03d" % int((t0 % 1) * 1000))
        subprocess.run([query, "activate", "--model-version", str(big), "--trainer", train_addr],
                       check=True, capture_output=True)
        served = {}
        while len(served) < len(replicas) and time.time() - t0 < 600:
            for name, p, metrics in replicas:
                if name not in served and scrape(metrics).get("plumb_model_version") == big:
                    served[name] = time.time() - t0
            time.sleep(0.05)
        if len(served) < len(replicas):
            fail("not every replica served version %d within 600 s" % big, logs)
        ship = scrape(train_metrics).get("plumb_version_ship_seconds")
        size = os.path.getsize(os.path.join(tmp, "replica-a", "versions", "%d.bundle" % big))
        print("plumb-train shipped version %d (%.0f MB bundle) in %.1f s" % (big, size / 1e6, ship))
        for name, p, metrics in replicas:
            print("replica %s: serving %.1f s after the activation; RSS %.0f MB, peak %.0f MB" %
                  (name, served[name], proc_status(p.pid, "VmRSS"), proc_status(p.pid, "VmHWM")))
        for name in ("a", "b"):
            log = open(os.path.join(tmp, "serve-%s.log" % name)).read()
            for line in log.splitlines():
                if ("received version %d" % big) in line or ("serving version %d" % big) in line:
                    print("  %s: %s" % (name, line))
        for line in open(logs[0]).read().splitlines():
            if ("shipped version %d" % big) in line or "activ" in line.lower():
                print("  train: " + line)
        print("plumb-train peak %.0f MB" % proc_status(procs[0].pid, "VmHWM"))
    finally:
        for p in procs:
            if p.poll() is None:
                p.terminate()
                try:
                    p.wait(30)
                except subprocess.TimeoutExpired:
                    p.kill()
        for n in nodes:
            n.stop()
        shutil.rmtree(tmp, ignore_errors=True)


if __name__ == "__main__":
    main()
