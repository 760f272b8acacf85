#!/usr/bin/env python3
"""plumb-train consuming a three-node NATS JetStream cluster, all real processes on loopback.

1. Three nats-server processes (JetStream on, separate store directories, routes between
   them, a client token) form a cluster.
2. plumb-train creates a file-backed stream with three replicas
   (--jetstream-create-replicas 3) and its durable pull consumer, and consumes the stream
   (--jetstream-token-file).
3. Hostile input: malformed, oversized and wrongly typed messages are terminated and
   counted by reason (plumb_jetstream_messages_terminated_total), an invalid event in a
   batch is counted as rejected, and nothing of them reaches the log but the one valid
   event of a mixed batch.
4. jetstream_tool publishes --events events (asynchronously, resending what is not
   acknowledged with the same Nats-Msg-Id) while the node plumb-train is connected to is
   killed (SIGKILL: the stream's leader) and restarted on the same store.
   Later plumb-train itself is killed (SIGKILL) and restarted: messages it stored but had
   not acked are redelivered and recognised by event id. Then every published event must be
   in plumb-train's log exactly once (jetstream_tool verify reads the store), and plumb-train
   stops on SIGTERM with exit 0.
5. Replacing the trainer's host (README "Beyond one machine"): the store copied when
   plumb-train was killed (a backup that lacks the later events) plus a new durable consumer
   replaying the stream ends with every event exactly once.

Also the benchmark's engine (bench/system/jetstream_ingest.sh) via --bench: no hostile
phase, no kill; prints events/s.
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
from stream_support import (TOKEN, Node, check_documented, fail, free_port,  # noqa: E402,F401
                            scrape, wait_for)

def find(tree, predicate):
    """The first dict in a JSON tree for which predicate holds, or None."""
    if isinstance(tree, dict):
        if predicate(tree):
            return tree
        tree = list(tree.values())
    if isinstance(tree, list):
        for t in tree:
            found = find(t, predicate)
            if found is not None:
                return found
    return None


def stream_leader(nodes):
    for n in nodes:
        s = find(n.jsz(), lambda d: d.get("name") == "PLUMB_EVENTS" and "cluster" in d)
        if s and s["cluster"].get("leader"):
            return s["cluster"]["leader"]
    return None


def consumer_state(nodes):
    """(pending, ack pending, redelivered) of plumb-train's consumer, from its leader."""
    for n in nodes:
        if n.proc is None or n.proc.poll() is not None:
            continue
        c = find(n.jsz(), lambda d: d.get("name") == "plumb-train" and "num_pending" in d)
        # A follower's view of the acks may lag: ask the consumer's leader.
        if c and (c.get("cluster") or {}).get("leader") == "n%d" % n.index:
            return c.get("num_pending", 0), c.get("num_ack_pending", 0), c.get("num_redelivered", 0)
    return None


def check_metrics_documented(metrics, logs):
    """The plumb_jetstream_* families of a live scrape are exactly those docs/operators.md
    lists under "plumb-train with a JetStream source", and promtool's linter passes."""
    served, promtool = check_documented(metrics, "plumb_jetstream_",
                                        "plumb-train with a JetStream source", logs,
                                        what="JetStream metrics")
    print("metrics: %d plumb_jetstream_ families, as documented%s" %
          (served, ", promtool clean" if promtool else ""))


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--bin", required=True)
    ap.add_argument("--nats-server", default="/usr/sbin/nats-server")
    ap.add_argument("--events", type=int, default=40000)
    ap.add_argument("--events-per-message", type=int, default=1)
    ap.add_argument("--rate", type=float, default=10000,
                    help="messages published per second at most (0: no limit)")
    ap.add_argument("--bench", action="store_true")
    ap.add_argument("--keep", action="store_true")
    args = ap.parse_args()
    tool = os.path.join(args.bin, "tests/stream/jetstream_tool")
    train = os.path.join(args.bin, "trainer/online/plumb-train")
    tmp = tempfile.mkdtemp(prefix="plumb-nats-")
    nodes, trainer = [], None
    train_log = os.path.join(tmp, "train.log")
    try:
        ports = [(free_port(), free_port(), free_port()) for _ in range(3)]
        nodes = [Node(args.nats_server, tmp, i, ports) for i in range(3)]
        for n in nodes:
            n.start()
        logs = [n.log for n in nodes] + [train_log]
        servers = ",".join(n.url() for n in nodes)
        if args.bench:
            r = subprocess.run([tool, "create-stream", servers, "PLUMB_EVENTS", "plumb.events",
                                "3"], capture_output=True, text=True, timeout=90)
            if r.returncode != 0:
                fail("create-stream: " + r.stdout + r.stderr, logs)
        token_file = os.path.join(tmp, "nats.token")
        with open(token_file, "w") as f:
            f.write(TOKEN + "\n")
        metrics = "127.0.0.1:%d" % free_port()
        plain = ",".join("nats://127.0.0.1:%d" % n.port for n in nodes)
        train_cmd = [train, "--db", os.path.join(tmp, "db"),
                     "--listen", "127.0.0.1:%d" % free_port(), "--metrics", metrics,
                     "--jetstream-servers", plain, "--jetstream-token-file", token_file,
                     "--jetstream-max-message-bytes", "16000", "--max-batch-events", "100",
                     "--jetstream-ack-wait", "2s", "--jetstream-create-replicas", "3",
                     "--no-refit", "--no-tune", "--replay-ratio", "0",
                     "--idle-replay-passes", "0", "--min-train-pairs", "1000000000",
                     "--dim", "8"]

        def start_trainer(cmd=None):
            p = subprocess.Popen(cmd or train_cmd, stdout=open(train_log, "a"),
                                 stderr=subprocess.STDOUT)
            wait_for("plumb-train to subscribe",
                     lambda: scrape(metrics).get("plumb_jetstream_connected") == 1, 90, logs)
            return p

        trainer = start_trainer()

        if not args.bench:
            r = subprocess.run([tool, "hostile", servers, "plumb.events", "16000", "100"],
                               capture_output=True, text=True, timeout=60)
            if r.returncode != 0:
                fail("hostile: " + r.stdout + r.stderr, logs)
            expected = {line.split()[0]: int(line.split()[1]) for line in r.stdout.split("\n")
                        if line.strip()}
            key = 'plumb_jetstream_messages_terminated_total{reason="%s"}'

            def hostile_done():
                m = scrape(metrics)
                return (all(m.get(key % k, 0) >= v for k, v in expected.items())
                        and m.get("plumb_jetstream_messages_acked_total", 0) >= 1)
            wait_for("the hostile messages to be terminated", hostile_done, 30, logs)
            time.sleep(1)  # anything counted twice would show now
            m = scrape(metrics)
            for k, v in expected.items():
                if m.get(key % k) != v:
                    fail("terminated %s: %s, expected %d" % (k, m.get(key % k), v), logs)
            if m.get('plumb_events_rejected_total{reason="bad_weight"}') != 1:
                fail("the mixed batch's invalid event was not counted as rejected", logs)
            if m.get("plumb_events_accepted_total", 0) != 1:
                # The poller copies the committer's totals once a second.
                time.sleep(1.5)
                m = scrape(metrics)
                if m.get("plumb_events_accepted_total", 0) != 1:
                    fail("hostile phase stored %s events, expected exactly the one valid"
                         % m.get("plumb_events_accepted_total"), logs)
            check_metrics_documented(metrics, logs)
            print("hostile: " + ", ".join("%s %d" % kv for kv in sorted(expected.items())) +
                  " terminated and counted; 1 valid event of a mixed batch stored, its "
                  "invalid one rejected")

        # ---- many events while a node dies -------------------------------------------
        pub_log = os.path.join(tmp, "publish.log")
        start = time.time()
        publisher = subprocess.Popen(
            [tool, "publish", servers, "plumb.events", "ev", "0", str(args.events),
             str(args.events_per_message), str(args.rate)],
            stdout=open(pub_log, "w"), stderr=subprocess.STDOUT)

        def published():
            with open(pub_log) as f:
                progress = re.findall(r"^progress (\d+)$", f.read(), re.M)
            return int(progress[-1]) if progress else 0
        logs.append(pub_log)
        killed = None
        if not args.bench:
            messages = args.events // args.events_per_message
            wait_for("a third of the messages to be published",
                     lambda: published() >= messages // 3 or publisher.poll() is not None,
                     120, logs)
            if publisher.poll() is not None:
                fail("the publisher finished before a node was killed: lower --rate", logs)
            # The stream's leader: its loss stops publishing until the others elect one.
            leader = stream_leader(nodes)
            victim = next((n for n in nodes if "n%d" % n.index == leader), nodes[0])
            connected = victim.has_client("plumb-train")
            stored = scrape(metrics).get("plumb_events_accepted_total", 0)
            victim.kill()
            killed = victim.index
            print("killed n%d (the stream's leader%s) with %d messages published, %d events "
                  "stored" % (victim.index, ", plumb-train's server" if connected else "",
                              published(), stored))
            time.sleep(3)
            victim.start()
            print("restarted n%d with %d messages published" % (victim.index, published()))
            # plumb-train itself dies between a write and its acks: what it stored but had
            # not acked comes back and must be recognised by event id.
            wait_for("two thirds of the events to be stored",
                     lambda: scrape(metrics).get("plumb_events_accepted_total", 0)
                     >= 2 * args.events // 3 or publisher.poll() is not None, 180, logs)
            trainer.send_signal(signal.SIGKILL)
            trainer.wait()
            # The store as a crash left it is also the "backup" of the host-replacement
            # recipe below: everything acknowledged after this point is missing from it.
            backup = os.path.join(tmp, "backup")
            shutil.copytree(os.path.join(tmp, "db"), backup)
            print("killed plumb-train (SIGKILL) mid-stream; copied its store as a backup; "
                  "restarting it")
            trainer = start_trainer()
        try:
            publisher.wait(timeout=200)
        except subprocess.TimeoutExpired:
            publisher.kill()
            fail("the publisher did not finish", logs)
        with open(pub_log) as f:
            pub_out = f.read()
        if publisher.returncode != 0:
            fail("publish: " + pub_out, logs)
        print("publisher: " + pub_out.strip().splitlines()[-1])
        verify = [tool, "verify", os.path.join(tmp, "db"), "ev", str(args.events),
                  str(args.events_per_message)]

        def all_stored():
            if args.bench:
                return scrape(metrics).get("plumb_events_accepted_total", 0) >= args.events
            return subprocess.run(verify, capture_output=True, timeout=60).returncode == 0
        wait_for("plumb-train to store every event", all_stored, 180, logs)
        elapsed = time.time() - start
        m = scrape(metrics)
        print("stored %d events in %.2f s from the first publish: %.0f events/s "
              "(this run of plumb-train: acked messages %d, redelivered %d, duplicates %d)"
              % (args.events, elapsed, args.events / elapsed,
                 m.get("plumb_jetstream_messages_acked_total", 0),
                 m.get("plumb_jetstream_redelivered_messages_total", 0),
                 m.get("plumb_events_duplicate_total", 0)))
        if not args.bench:
            # Every message acked by the consumer (what the killed plumb-train held unacked
            # comes back after the ack wait), then the log is checked again.
            wait_for("the consumer to have nothing pending or unacked",
                     lambda: consumer_state(nodes) is not None
                     and consumer_state(nodes)[:2] == (0, 0), 60,
                     logs + [lambda: "consumer state (pending, ack pending, redelivered): %s"
                             % (consumer_state(nodes),)])
            print("consumer: pending 0, ack pending 0")

        trainer.send_signal(signal.SIGTERM)
        if trainer.wait(60) != 0:
            fail("plumb-train exited %d on SIGTERM" % trainer.returncode, logs)
        trainer = None
        r = subprocess.run(verify, capture_output=True, text=True, timeout=120)
        print("verify: " + (r.stdout + r.stderr).strip())
        if r.returncode != 0:
            fail("events lost or stored twice", logs)
        other = int(re.search(r"other (\d+)", r.stdout).group(1))
        if other != (0 if args.bench else 1):
            fail("the log holds %d events not published by the test" % other, logs)
        if args.bench:
            return

        # ---- replacing the trainer's host: a store backup plus a replay of the stream -----
        # A new durable consumer (a new name) delivers the whole stream; what the backup
        # already holds comes back as duplicates (the stream's age must stay within
        # dedup_window), what it lacks is stored.
        verify_backup = [tool, "verify", backup, "ev", str(args.events),
                         str(args.events_per_message)]
        r = subprocess.run(verify_backup, capture_output=True, text=True, timeout=120)
        lacking = int(re.search(r"missing (\d+)", r.stdout).group(1))
        if lacking == 0:
            fail("the backup lacks nothing: the recipe would prove nothing", logs)
        cmd = list(train_cmd)
        cmd[cmd.index("--db") + 1] = backup
        trainer = start_trainer(cmd + ["--jetstream-consumer", "plumb-train-replaced"])
        wait_for("the replacement to hold every event",
                 lambda: subprocess.run(verify_backup, capture_output=True,
                                        timeout=60).returncode == 0, 120, logs)
        trainer.send_signal(signal.SIGTERM)
        if trainer.wait(60) != 0:
            fail("the replacement plumb-train exited %d on SIGTERM" % trainer.returncode, logs)
        trainer = None
        r = subprocess.run(verify_backup, capture_output=True, text=True, timeout=120)
        print("replacement from a backup lacking %d events, replaying the stream: %s"
              % (lacking, r.stdout.strip()))
        if r.returncode != 0 or int(re.search(r"other (\d+)", r.stdout).group(1)) != 1:
            fail("host replacement: events lost or stored twice", logs)
        print("PASS (node n%d and plumb-train killed and restarted mid-stream; host replaced "
              "from a backup)" % killed)
    finally:
        if trainer is not None and trainer.poll() is None:
            trainer.kill()
            trainer.wait()
        for n in nodes:
            n.stop()
        if not args.keep:
            shutil.rmtree(tmp, ignore_errors=True)


if __name__ == "__main__":
    main()
