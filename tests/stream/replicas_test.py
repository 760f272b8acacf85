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
6. Canary: `plumb-query canary-start` of an older version at 20 %: both replicas fetch it and
   serve it beside the active one. 40,000 Recommend calls to one replica and 10,000 to the
   other from Python (grpcio,
   distinct user ids, unknown ones answered by the fallback list): every call's version is
   the one the published bucket rule, computed here in Python, names; the candidate's share
   is within 1 percentage point of 20 %; both replicas agree on every user. Widening to 50 %
   keeps every user already in; promotion makes the candidate active everywhere; a second
   canary is aborted.
7. Metrics of both processes' replica sections are those docs/operators.md lists.
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
SOURCE = os.path.dirname(os.path.dirname(os.path.dirname(os.path.abspath(__file__))))
M64 = (1 << 64) - 1


def canary_bucket(subject, version):
    """core/canary_bucket.h's rule, written again from its comment."""
    h = 0xcbf29ce484222325
    for c in subject.encode():
        h = ((h ^ c) * 0x100000001b3) & M64
    x = h ^ ((version * 0x9e3779b97f4a7c15) & M64)
    x ^= x >> 30
    x = (x * 0xbf58476d1ce4e5b9) & M64
    x ^= x >> 27
    x = (x * 0x94d049bb133111eb) & M64
    x ^= x >> 31
    return x % 10000


class Caller:
    """Recommend over grpcio with the message classes protoc generates at test time."""

    def __init__(self, tmp, addr):
        gen = os.path.join(tmp, "gen")
        if not os.path.isdir(gen):
            os.makedirs(gen)
            subprocess.run(["protoc", "-I", os.path.join(SOURCE, "proto"), "--python_out=" + gen,
                            "plumb/v1/ranker.proto"], check=True)
        if gen not in sys.path:
            sys.path.insert(0, gen)
        import grpc
        from plumb.v1 import ranker_pb2
        self.pb = ranker_pb2
        self.channel = grpc.insecure_channel(addr)
        self.call = self.channel.unary_unary(
            "/plumb.v1.Ranker/Recommend",
            request_serializer=ranker_pb2.RecommendRequest.SerializeToString,
            response_deserializer=ranker_pb2.RecommendResponse.FromString)

    def versions(self, users):
        out = {}
        for u in users:
            r = self.call(self.pb.RecommendRequest(
                user_id=u, count=10, unknown_user=self.pb.UNKNOWN_USER_MOST_INTERACTED),
                timeout=10)
            out[u] = r.model_version
        return out


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

        # ---- numbering past what the stream holds -------------------------------------------
        # The hostile versions above carry numbers this trainer never gave: its numbering moves
        # past them, so a number never names two versions on a replica's disk.
        # (A refit may publish a version between two of them; then it takes the next number
        # past those already there, and the one after it is 900004 all the same.)
        wait_for("plumb-train to move its numbering past the stream's",
                 lambda: "beyond this store's numbering" in open(log("train")).read(), 30, logs)
        subprocess.run([query, "retrain", "--trainer", train_addr], check=True,
                       capture_output=True)

        def newest_version():
            r = subprocess.run([query, "versions", "--trainer", train_addr], capture_output=True,
                               text=True)
            numbers = [int(w[-1]) for w in (l.replace("*", " ").split()[:1] for l in
                                            r.stdout.splitlines()) if w and w[-1].isdigit()]
            return max(numbers) if numbers else 0

        wait_for("the rebuild to be published as version 900004 or later",
                 lambda: newest_version() >= 900004, 90, logs)
        print("hostile numbers: the trainer's next version is %d" % newest_version())

        # ---- canary --------------------------------------------------------------------------
        candidate = active - 1
        canary_key = 'plumb_canary_version{arm="candidate"}'

        def canary_on_both(version, share):
            return all(metric(replicas[n]["metrics"], canary_key) == version and
                       metric(replicas[n]["metrics"], "plumb_canary_share_ratio") == share
                       for n in replicas)

        subprocess.run([query, "canary-start", "--model-version", str(candidate), "--share", "20",
                        "--trainer", train_addr], check=True, capture_output=True)
        start = time.time()
        wait_for("both replicas to serve canary version %d" % candidate,
                 lambda: canary_on_both(candidate, 0.2), SERVE_WITHIN, logs)
        print("canary of version %d at 20 %%: served by both replicas after %.1f s" %
              (candidate, time.time() - start))
        # The candidate's number depends on how many versions this run activated, so its
        # subset is a fresh draw each run: 40,000 users to replica a put the share within
        # 1 point at 5 standard deviations (sd 0.2 points at 20 %); replica b gets 10,000.
        known = open(os.path.join(tmp, "users.txt")).read().split()
        subjects = known + ["visitor-%d" % k for k in range(40000 - len(known))]
        start = time.time()
        answered = {"a": Caller(tmp, replicas["a"]["listen"]).versions(subjects),
                    "b": Caller(tmp, replicas["b"]["listen"]).versions(subjects[:10000])}
        took = time.time() - start
        differ = [u for u in subjects[:10000] if answered["a"][u] != answered["b"][u]]
        if differ:
            fail("the replicas disagree on %d users, e.g. %s" % (len(differ), differ[:3]), logs)
        wrong = [u for u in subjects if answered["a"][u] !=
                 (candidate if canary_bucket(u, candidate) < 2000 else active)]
        if wrong:
            fail("%d of %d users got another version than the bucket rule names, e.g. %s" %
                 (len(wrong), len(subjects), wrong[:3]), logs)
        share = sum(1 for u in subjects if answered["a"][u] == candidate) / len(subjects)
        if abs(share - 0.20) > 0.01:
            fail("the candidate served %.2f %% of %d users, not 20 +- 1 %%" %
                 (100 * share, len(subjects)), logs)
        print("%d calls to replica a, 10000 to b (%.1f s): candidate share %.2f %%, every user "
              "as the bucket rule (Python) says, both replicas agree" %
              (len(subjects), took, 100 * share))
        arm_lists = metric(replicas["a"]["metrics"],
                           'plumb_canary_served_lists{arm="candidate"}')
        if not arm_lists:
            fail("replica a counts no lists for the candidate arm", logs)
        subprocess.run([query, "canary-widen", "--share", "50", "--trainer", train_addr],
                       check=True, capture_output=True)
        wait_for("both replicas to widen the canary to 50 %",
                 lambda: canary_on_both(candidate, 0.5), SERVE_WITHIN, logs)
        sample = subjects[::5]
        widened = Caller(tmp, replicas["b"]["listen"]).versions(sample)
        left = [u for u in sample if answered["a"][u] == candidate and widened[u] != candidate]
        if left:
            fail("%d users left the canary when it widened, e.g. %s" % (len(left), left[:3]),
                 logs)
        print("widened to 50 %%: %.1f %% of %d sampled users on the candidate, none left it" %
              (100 * sum(1 for u in sample if widened[u] == candidate) / len(sample),
               len(sample)))
        subprocess.run([query, "canary-promote", "--trainer", train_addr], check=True,
                       capture_output=True)
        took = both_serve(candidate, what="(canary promoted)")
        wait_for("both replicas to end the canary",
                 lambda: all(metric(replicas[n]["metrics"], "plumb_canary_share_ratio") == 0
                             for n in replicas), SERVE_WITHIN, logs)
        print("promoted: both replicas serve version %d to everyone after %.1f s" %
              (candidate, took))
        subprocess.run([query, "canary-start", "--model-version", str(active), "--share", "100",
                        "--trainer", train_addr], check=True, capture_output=True)
        wait_for("both replicas to serve the second canary",
                 lambda: canary_on_both(active, 1.0), SERVE_WITHIN, logs)
        subprocess.run([query, "canary-abort", "--trainer", train_addr], check=True,
                       capture_output=True)
        wait_for("both replicas to end the aborted canary",
                 lambda: all(metric(replicas[n]["metrics"], "plumb_canary_share_ratio") == 0
                             for n in replicas), SERVE_WITHIN, logs)
        if serving("a") != candidate or serving("b") != candidate:
            fail("an aborted canary changed the active version", logs)
        print("second canary (version %d at 100 %%) aborted: both back on version %d" %
              (active, candidate))
        subprocess.run([query, "activate", "--model-version", str(active), "--trainer",
                        train_addr], check=True, capture_output=True)
        both_serve(active, what="(after the canaries)")

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
