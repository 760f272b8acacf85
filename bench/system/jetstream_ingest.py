#!/usr/bin/env python3
"""Events through NATS JetStream into plumb-train's durable log, next to gRPC ingest, in one run.

A three-node JetStream cluster on loopback (tests/stream/jetstream_cluster_test.py's
set-up) holds a file-backed stream with three replicas. For each way in, a fresh plumb-train
(same flags, fsync on: --sync, the default) takes the same number of events into an empty
store, and the time from its start of intake until every event is durable in its log is
measured:

  jetstream-1    a backlog of N messages of one InteractionEvent each, drained by the
                 durable pull consumer
  jetstream-100  the same N events as batches of 100 (Plumb-Payload: batch)
  jetstream-live N single-event messages published while plumb-train consumes (publisher
                 and consumer share the machine)
  grpc-batch     plumb-load replay, PublishBatch of 1000 events per call (its default), one
                 call in flight; timed by plumb-load (first call to last acknowledgement)
  grpc-stream    plumb-load replay --stream (client-streaming Publish, 1000 per stream)

JetStream times run from the consumer's subscription to the moment the trainer's
plumb_events_accepted_total reaches N (polled every 20 ms).

Usage: bench/system/jetstream_ingest.py BUILD_DIR [--events N]   (default 200000; ~3 min)
Prints one line per way and the JetStream / gRPC ratios (target: >= 0.5).
"""
import argparse
import os
import re
import shutil
import signal
import subprocess
import sys
import tempfile
import time

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "../../tests/stream"))
import jetstream_cluster_test as cluster  # noqa: E402


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("bin")
    ap.add_argument("--events", type=int, default=200000)
    ap.add_argument("--nats-server", default="/usr/sbin/nats-server")
    args = ap.parse_args()
    n = args.events
    tool = os.path.join(args.bin, "tests/stream/jetstream_tool")
    train = os.path.join(args.bin, "trainer/online/plumb-train")
    load = os.path.join(args.bin, "tools/plumb-load")
    tmp = tempfile.mkdtemp(prefix="plumb-jsbench-")
    nodes, procs = [], []
    results = {}
    try:
        ports = [(cluster.free_port(), cluster.free_port(), cluster.free_port())
                 for _ in range(3)]
        nodes = [cluster.Node(args.nats_server, tmp, i, ports) for i in range(3)]
        for node in nodes:
            node.start()
        servers = ",".join(node.url() for node in nodes)
        token_file = os.path.join(tmp, "token")
        with open(token_file, "w") as f:
            f.write(cluster.TOKEN)
        plain = ",".join("nats://127.0.0.1:%d" % node.port for node in nodes)
        for stream, subject in (("S1", "bench.one"), ("S100", "bench.batch"),
                                ("SLIVE", "bench.live")):
            subprocess.run([tool, "create-stream", servers, stream, subject, "3"], check=True,
                           capture_output=True, timeout=90)

        def publish(subject, per_message, rate=0, wait=True):
            cmd = [tool, "publish", servers, subject, "ev", "0", str(n), str(per_message),
                   str(rate)]
            if not wait:
                return subprocess.Popen(cmd, stdout=subprocess.DEVNULL)
            r = subprocess.run(cmd, capture_output=True, text=True, timeout=600, check=True)
            return r.stdout.strip().splitlines()[-1]

        def trainer(name, extra):
            metrics = "127.0.0.1:%d" % cluster.free_port()
            listen = "127.0.0.1:%d" % cluster.free_port()
            cmd = [train, "--db", os.path.join(tmp, name), "--listen", listen,
                   "--metrics", metrics, "--no-refit", "--no-tune", "--replay-ratio", "0",
                   "--idle-replay-passes", "0", "--min-train-pairs", "1000000000",
                   "--dim", "8"] + extra
            p = subprocess.Popen(cmd, stdout=open(os.path.join(tmp, name + ".log"), "w"),
                                 stderr=subprocess.STDOUT)
            procs.append(p)
            return p, listen, metrics

        def until_stored(metrics, timeout=600):
            """Polls every 20 ms until the trainer's log took n events; returns the time."""
            deadline = time.time() + timeout
            while cluster.scrape(metrics).get("plumb_events_accepted_total", 0) < n:
                if time.time() > deadline:
                    cluster.fail("not all events stored within %d s" % timeout)
                time.sleep(0.02)
            return time.time()

        def stop(p):
            p.send_signal(signal.SIGTERM)
            p.wait(60)

        def drain(name, stream, subject):
            p, _, metrics = trainer(name, ["--jetstream-servers", plain,
                                           "--jetstream-token-file", token_file,
                                           "--jetstream-stream", stream,
                                           "--jetstream-subject", subject])
            cluster.wait_for("%s to subscribe" % name,
                             lambda: cluster.scrape(metrics).get("plumb_jetstream_connected")
                             == 1, 60)
            start = time.time()
            seconds = until_stored(metrics) - start
            stop(p)
            return seconds

        print("publishing the backlogs (%d events each) ..." % n, flush=True)
        print("  single events: " + publish("bench.one", 1), flush=True)
        print("  batches of 100: " + publish("bench.batch", 100), flush=True)
        results["jetstream-1"] = drain("js1", "S1", "bench.one")
        results["jetstream-100"] = drain("js100", "S100", "bench.batch")

        # Live: plumb-train subscribed first, then the publisher starts.
        p, _, metrics = trainer("jslive", ["--jetstream-servers", plain,
                                           "--jetstream-token-file", token_file,
                                           "--jetstream-stream", "SLIVE",
                                           "--jetstream-subject", "bench.live"])
        cluster.wait_for("jslive to subscribe",
                         lambda: cluster.scrape(metrics).get("plumb_jetstream_connected") == 1,
                         60)
        start = time.time()
        pub = publish("bench.live", 1, wait=False)
        results["jetstream-live"] = until_stored(metrics) - start
        pub.wait(60)
        stop(p)

        csv = os.path.join(tmp, "events.csv")
        with open(csv, "w") as f:
            f.write("user,item,ts,weight,event_id\n")
            for i in range(n):
                f.write("u%d,t%d,0,1,ev-%d\n" % (i % 5000, (i * 7919) % 1000, i))
        for name, extra in (("grpc-batch", []), ("grpc-stream", ["--stream"])):
            p, listen, metrics = trainer(name, [])
            cluster.wait_for(name + " to listen",
                             lambda: cluster.scrape(metrics).get("plumb_events_accepted_total")
                             is not None, 60)
            r = subprocess.run([load, "replay", "--events", csv, "--trainer", listen,
                                "--quiet"] + extra, check=True, capture_output=True, text=True,
                               timeout=600)
            # plumb-load's own clock: first call to last acknowledgement (the CSV parse and
            # the connection set-up are not counted against gRPC).
            results[name] = float(re.search(r" in ([0-9.]+) s ", r.stdout).group(1))
            stop(p)

        print("\n%-16s %10s %12s" % ("way in", "seconds", "events/s"))
        for name, seconds in results.items():
            print("%-16s %10.2f %12.0f" % (name, seconds, n / seconds))
        grpc = n / results["grpc-batch"]
        for name in ("jetstream-1", "jetstream-100", "jetstream-live"):
            print("%s / grpc-batch = %.2f" % (name, (n / results[name]) / grpc))
    finally:
        for p in procs:
            if p.poll() is None:
                p.kill()
                p.wait()
        for node in nodes:
            node.stop()
        shutil.rmtree(tmp, ignore_errors=True)


if __name__ == "__main__":
    main()
