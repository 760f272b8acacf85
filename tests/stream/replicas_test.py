#!/usr/bin/env python3
"""Remote serving replicas over NATS JetStream, all real processes on loopback.

1. Three nats-server processes form a cluster (stream_support.py's Node). plumb-train
   (--jetstream-versions, --no-jetstream-events) creates the version stream and the pointer
   bucket with three replicas and ships every activated version.
2. Two `plumb-serve --replica-of` with separate local directories follow the activations
   made while events stream into plumb-train, under two plumb-load runs (one per replica):
   zero failed calls, both swap several times, and both serve the trainer's active version
   within a bounded time once the stream of versions stops.
3. Rollback: `plumb-query activate` of the first version (which the replicas no longer keep
   locally: they keep 5) moves the pointer; both fetch it again and serve it.
4. Hostile: jetstream_tool publishes versions with a damaged chunk, a missing chunk and no
   trailer, and points the pointer at each; both replicas refuse each one (counted in
   plumb_replica_versions_refused_total{reason="damaged"}) and keep serving the good version.
5. NATS down (all three nodes stopped): both replicas keep serving (plumb-load, zero
   failures); one is restarted and serves its last version from its local directory. A
   version activated meanwhile reaches both once NATS is back.
6. Metrics of both processes' replica sections are those docs/operators.md lists.
"""
import argparse
import json
import os
import re
import shutil
import signal
import subprocess
import sys
import tempfile
import time
import urllib.request

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import stream_support  # noqa: E402
from stream_support import TOKEN, Node, fail, free_port, metric, wait_for  # noqa: E402

SERVE_WITHIN = 20  # seconds a replica may take to serve the pointer's version


def check_documented(metrics_addr, prefix, section, logs):
    served, _ = stream_support.check_documented(metrics_addr, prefix, section, logs)
    print("metrics: %s: %d families, as documented" % (section, served))


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--bin", required=True)
    ap.add_argument("--nats-server", default="/usr/sbin/nats-server")
    ap.add_argument("--keep", action="store_true")
    args = ap.parse_args()
    b = args.bin
    plumb, train = os.path.join(b, "cli/plumb"), os.path.join(b, "trainer/online/plumb-train")
    serve, query = os.path.join(b, "server/plumb-serve"), os.path.join(b, "tools/plumb-query")
    load, tool = os.path.join(b, "tools/plumb-load"), os.path.join(b, "tests/stream/jetstream_tool")
    tmp = tempfile.mkdtemp(prefix="plumb-replicas-")
    procs, nodes = {}, []
    log = lambda name: os.path.join(tmp, name + ".log")  # noqa: E731
    try:
        # ---- world, cluster, trainer -------------------------------------------------
        subprocess.run([plumb, "synth", "--out", os.path.join(tmp, "world"), "--users", "2000",
                        "--items", "800", "--interactions", "40000", "--seed", "11"],
                       check=True, capture_output=True)
        lines = open(os.path.join(tmp, "world/events.csv")).read().splitlines()
        with open(os.path.join(tmp, "first.csv"), "w") as f:
            f.write("\n".join(lines[:15001]) + "\n")
        with open(os.path.join(tmp, "rest.csv"), "w") as f:
            f.write("\n".join(lines[:1] + lines[15001:]) + "\n")
        with open(os.path.join(tmp, "users.txt"), "w") as f:
            f.write("\n".join(sorted({l.split(",")[0] for l in lines[1:15001]})) + "\n")

        ports = [(free_port(), free_port(), free_port()) for _ in range(3)]
        nodes = [Node(args.nats_server, tmp, i, ports) for i in range(3)]
        for n in nodes:
            n.start()
        logs = [n.log for n in nodes] + [log("train"), log("serve-a"), log("serve-b")]
        servers = ",".join("nats://127.0.0.1:%d" % n.port for n in nodes)
        tool_servers = ",".join(n.url() for n in nodes)
        token_file = os.path.join(tmp, "nats.token")
        with open(token_file, "w") as f:
            f.write(TOKEN + "\n")

        train_addr = "127.0.0.1:%d" % free_port()
        train_metrics = "127.0.0.1:%d" % free_port()
        procs["train"] = subprocess.Popen(
            [train, "--db", os.path.join(tmp, "train-db"), "--listen", train_addr,
             "--metrics", train_metrics, "--dim", "16", "--publish-interval", "1s",
             "--publish-every-events", "1000000", "--no-sync",
             "--jetstream-servers", servers, "--jetstream-token-file", token_file,
             "--no-jetstream-events", "--jetstream-versions", "--jetstream-create-replicas", "3",
             "--jetstream-keep-versions", "50"],
            stdout=open(log("train"), "a"), stderr=subprocess.STDOUT)

        def trainer_status():
            r = subprocess.run([query, "status", "--trainer", train_addr], capture_output=True,
                               text=True)
            m = re.search(r"^active version:\s+(\d+)", r.stdout, re.M)
            return int(m.group(1)) if r.returncode == 0 and m else None

        wait_for("plumb-train to answer", lambda: trainer_status() is not None, 90, logs)
        r = subprocess.run([load, "replay", "--events", os.path.join(tmp, "first.csv"),
                            "--trainer", train_addr, "--quiet"], capture_output=True, text=True)
        if r.returncode != 0:
            fail("first replay: " + r.stdout + r.stderr, logs)
        wait_for("a first version shipped",
                 lambda: (metric(train_metrics, "plumb_version_pointer") or 0) > 0, 90, logs)
        first_version = int(metric(train_metrics, "plumb_version_pointer"))
        print("first version %d shipped" % first_version)

        # ---- two replicas --------------------------------------------------------------
        replicas = {}
        for name in ("a", "b"):
            replicas[name] = {"listen": "127.0.0.1:%d" % free_port(),
                              "metrics": "127.0.0.1:%d" % free_port(),
                              "db": os.path.join(tmp, "replica-" + name)}

        def start_replica(name):
            rep = replicas[name]
            procs["serve-" + name] = subprocess.Popen(
                [serve, "--db", rep["db"], "--replica-of", servers,
                 "--replica-token-file", token_file, "--listen", rep["listen"],
                 "--metrics", rep["metrics"], "--catchup-interval", "100ms"],
                stdout=open(log("serve-" + name), "a"), stderr=subprocess.STDOUT)

        def serving(name):
            return metric(replicas[name]["metrics"], "plumb_model_version")

        def both_serve(version, within=SERVE_WITHIN, what=""):
            start = time.time()
            wait_for("both replicas to serve version %d %s" % (version, what),
                     lambda: all(serving(n) == version for n in replicas), within, logs)
            return time.time() - start

        for name in replicas:
            start_replica(name)
        both_serve(first_version, 60, "(first start)")

        # ---- activations under load ------------------------------------------------------
        swaps_before = {n: metric(replicas[n]["metrics"], "plumb_snapshot_swaps_total")
                        for n in replicas}
        replay = subprocess.Popen([load, "replay", "--events", os.path.join(tmp, "rest.csv"),
                                   "--trainer", train_addr, "--rate", "2500", "--quiet"],
                                  stdout=open(log("replay"), "a"), stderr=subprocess.STDOUT)
        loads = {n: subprocess.Popen([load, "--server", replicas[n]["listen"], "--users-file",
                                      os.path.join(tmp, "users.txt"), "--duration", "12s",
                                      "--concurrency", "2", "--count", "20", "--json"],
                                     stdout=subprocess.PIPE, stderr=open(log("load-" + n), "a"),
                                     text=True)
                 for n in replicas}
        for n, p in loads.items():
            out, _ = p.communicate(timeout=90)
            if p.returncode != 0:
                fail("plumb-load against replica %s exited %d" % (n, p.returncode), logs)
            report = json.loads(out)
            swaps = metric(replicas[n]["metrics"], "plumb_snapshot_swaps_total") - swaps_before[n]
            print("replica %s: %d calls, %d errors, %d versions swapped in under load" %
                  (n, report["requests"], report["errors"], swaps))
            if report["errors"] != 0:
                fail("replica %s: failed calls under load: %s" % (n, report.get("errors_by_code")),
                     logs)
            if swaps < 3:
                fail("replica %s swapped in only %d versions under load" % (n, swaps), logs)
        replay.wait(timeout=120)
        # No new events: the last candidate is published within a few seconds; then the
        # pointer stays.
        subprocess.run([query, "auto-activate", "off", "--trainer", train_addr], check=True,
                       capture_output=True)
        time.sleep(2)
        active = trainer_status()
        wait_for("the pointer to name the trainer's active version %d" % active,
                 lambda: metric(train_metrics, "plumb_version_pointer") == active, 30, logs)
        took = both_serve(active, what="(newest)")
        print("newest version %d served by both %.1f s after the pointer was checked" %
              (active, took))
        if active - first_version < 4:
            fail("only %d activations during the run" % (active - first_version), logs)

        # ---- rollback to a version the replicas no longer keep ---------------------------
        on_disk = sorted(os.listdir(os.path.join(replicas["a"]["db"], "versions")))
        if "%d.bundle" % first_version in on_disk:
            fail("replica a still keeps version %d locally: %s" % (first_version, on_disk), logs)
        received = {n: metric(replicas[n]["metrics"], "plumb_replica_versions_received_total")
                    for n in replicas}
        subprocess.run([query, "activate", "--model-version", str(first_version), "--trainer",
                        train_addr], check=True, capture_output=True)
        took = both_serve(first_version, what="(rollback)")
        for n in replicas:
            if metric(replicas[n]["metrics"],
                      "plumb_replica_versions_received_total") != received[n] + 1:
                fail("replica %s did not fetch the rolled-back version again" % n, logs)
        print("rollback to version %d: both replicas fetched it and serve it after %.1f s" %
              (first_version, took))

        # ---- hostile versions ------------------------------------------------------------
        damaged = 'plumb_replica_versions_refused_total{reason="damaged"}'
        for k, damage in enumerate(("chunk-crc", "truncated", "no-trailer")):
            bad = 900001 + k
            before = {n: metric(replicas[n]["metrics"], damaged) for n in replicas}
            r = subprocess.run([tool, "bad-version", tool_servers, "PLUMB_VERSIONS",
                                "plumb.versions", "PLUMB_POINTER", str(bad), damage],
                               capture_output=True, text=True, timeout=60)
            if r.returncode != 0:
                fail("bad-version: " + r.stdout + r.stderr, logs)
            wait_for("both replicas to refuse version %d (%s)" % (bad, damage),
                     lambda: all(metric(replicas[n]["metrics"], damaged) == before[n] + 1
                                 for n in replicas), 30, logs)
            for n in replicas:
                if serving(n) != first_version:
                    fail("replica %s serves %s after refusing %s" % (n, serving(n), damage), logs)
                if os.path.exists(os.path.join(replicas[n]["db"], "versions", "%d.bundle" % bad)):
                    fail("replica %s kept the damaged version %d" % (n, bad), logs)
            print("%s: refused and counted by both; version %d still served" %
                  (damage, first_version))
        # The pointer back on a good version.
        subprocess.run([query, "activate", "--model-version", str(active), "--trainer",
                        train_addr], check=True, capture_output=True)
        both_serve(active, what="(after the hostile versions)")

        # ---- NATS down ----------------------------------------------------------------------
        for n in nodes:
            n.stop()
        time.sleep(1)
        p = subprocess.run([load, "--server", replicas["a"]["listen"], "--users-file",
                            os.path.join(tmp, "users.txt"), "--duration", "3s",
                            "--concurrency", "2", "--count", "20", "--json"],
                           capture_output=True, text=True, timeout=60)
        report_a = json.loads(p.stdout)
        if p.returncode != 0 or report_a["errors"] != 0:
            fail("replica a with NATS down: %s" % p.stdout, logs)
        procs["serve-b"].send_signal(signal.SIGTERM)
        if procs["serve-b"].wait(30) != 0:
            fail("replica b did not stop cleanly", logs)
        start_replica("b")
        wait_for("replica b to serve from its local directory with NATS down",
                 lambda: serving("b") == active, 60, logs)
        p = subprocess.run([load, "--server", replicas["b"]["listen"], "--users-file",
                            os.path.join(tmp, "users.txt"), "--duration", "2s",
                            "--concurrency", "2", "--count", "20", "--json"],
                           capture_output=True, text=True, timeout=60)
        report = json.loads(p.stdout)
        if p.returncode != 0 or report["errors"] != 0:
            fail("restarted replica b with NATS down: %s" % p.stdout, logs)
        print("NATS down: %d calls to replica a and %d to restarted replica b, no error" %
              (report_a["requests"], report["requests"]))
        middle = (first_version + active) // 2
        subprocess.run([query, "activate", "--model-version", str(middle), "--trainer",
                        train_addr], check=True, capture_output=True)
        time.sleep(2)
        if serving("a") != active or serving("b") != active:
            fail("a replica moved while NATS was down", logs)
        for n in nodes:
            n.start()
        took = both_serve(middle, 60, "(NATS back)")
        print("NATS back: both replicas serve version %d %.1f s after the restart" %
              (middle, took))

        # ---- metrics documented, clean stop ---------------------------------------------------
        check_documented(replicas["a"]["metrics"], "plumb_replica_",
                         "plumb-serve as a remote replica", logs)
        check_documented(train_metrics, "plumb_version", "plumb-train shipping versions", logs)
        for name in ("serve-a", "serve-b", "train"):
            procs[name].send_signal(signal.SIGTERM)
            if procs[name].wait(30) != 0:
                fail("%s exited %d on SIGTERM" % (name, procs[name].returncode), logs)
        print("PASS")
    finally:
        for p in procs.values():
            if p.poll() is None:
                p.kill()
                p.wait()
        for n in nodes:
            n.stop()
        if args.keep:
            print("kept " + tmp)
        else:
            shutil.rmtree(tmp, ignore_errors=True)


if __name__ == "__main__":
    main()
