#!/usr/bin/env python3
"""plumb's NATS connections over TLS, all real processes on loopback.

A throwaway CA, a server certificate (subject alternative names 127.0.0.1 and localhost), a
client certificate and a second, unrelated CA are made with openssl in the test's temporary
directory. One nats-server with JetStream requires TLS from every client.

1. TLS, server not verifying clients: plumb-train (--jetstream-tls-ca) consumes events that
   jetstream_tool publishes over TLS into its log (every one exactly once) and ships its
   activated version; `plumb-serve --replica-of tls://...` (--replica-tls-ca) fetches it and
   answers Recommend with it.
2. The wrong CA: a plumb-serve replica and a plumb-train trusting the unrelated CA keep
   running and retrying, as documented (docs/operators.md: plumb_replica_connected,
   plumb_jetstream_connected, plumb_version_ship_failures_total), and their logs say that
   the server's certificate is not signed by a CA they trust. A CA file that does not exist
   is a configuration error: both exit 2 at once, naming it.
3. The server restarted with verify on (client certificates required): the running
   plumb-train and replica without a client certificate fail to reconnect and say that the
   server wants a client certificate (not a silent "reconnecting"); the replica keeps
   serving. A new replica without a certificate says the same at its first connect.
   plumb-train restarted with --jetstream-tls-cert/-key consumes more events and ships a new
   version; a new replica with --replica-tls-cert/-key fetches and serves it.
"""
import argparse
import os
import shutil
import signal
import subprocess
import sys
import tempfile
import time

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
from stream_support import TOKEN, Node, fail, free_port, metric, wait_for  # noqa: E402

# What the logs must say (replica/nats_access.cc, ExplainNatsFailure).
WRONG_CA = "TLS handshake failed: the server's certificate is not signed by a CA this client trusts"
NO_CLIENT_CERT = ("the server closed the connection while connecting, as a NATS server that "
                  "verifies TLS clients does when the client's certificate is missing")


def make_tls_files(tmp):
    """PEM files of a test CA, a server and a client certificate it signed, and an unrelated
    CA, all EC P-256 and valid for a day."""
    d = os.path.join(tmp, "tls")
    os.makedirs(d)
    p = lambda name: os.path.join(d, name)  # noqa: E731

    def run(*cmd):
        r = subprocess.run(["openssl"] + list(cmd), capture_output=True, text=True)
        if r.returncode != 0:
            fail("openssl %s: %s" % (cmd[0], r.stderr))

    key = ["-newkey", "ec", "-pkeyopt", "ec_paramgen_curve:prime256v1", "-nodes"]
    for ca in ("ca", "other-ca"):
        run("req", "-x509", *key, "-keyout", p(ca + "-key.pem"), "-out", p(ca + ".pem"),
            "-days", "1", "-subj", "/CN=plumb test %s" % ca,
            "-addext", "basicConstraints=critical,CA:TRUE",
            "-addext", "keyUsage=critical,keyCertSign,cRLSign")
    for name, ext in (("server", "subjectAltName=IP:127.0.0.1,DNS:localhost\n"
                                 "extendedKeyUsage=serverAuth\n"),
                      ("client", "extendedKeyUsage=clientAuth\n")):
        run("req", *key, "-keyout", p(name + "-key.pem"), "-out", p(name + ".csr"),
            "-subj", "/CN=plumb test " + name)
        with open(p(name + ".ext"), "w") as f:
            f.write(ext)
        run("x509", "-req", "-in", p(name + ".csr"), "-CA", p("ca.pem"), "-CAkey",
            p("ca-key.pem"), "-CAcreateserial", "-out", p(name + ".pem"), "-days", "1",
            "-extfile", p(name + ".ext"))
    return p


def log_lines(path, text):
    """The lines of a log that contain text."""
    try:
        with open(path, errors="replace") as f:
            return [line for line in f if text in line]
    except OSError:
        return []


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--bin", required=True)
    ap.add_argument("--nats-server", default="/usr/sbin/nats-server")
    ap.add_argument("--keep", action="store_true")
    args = ap.parse_args()
    b = args.bin
    train, serve = os.path.join(b, "trainer/online/plumb-train"), os.path.join(b, "server/plumb-serve")
    query, tool = os.path.join(b, "tools/plumb-query"), os.path.join(b, "tests/stream/jetstream_tool")
    tmp = tempfile.mkdtemp(prefix="plumb-nats-tls-")
    procs, node = {}, None
    started = time.time()
    try:
        pem = make_tls_files(tmp)
        ports = [(free_port(), free_port(), free_port())]
        node = Node(args.nats_server, tmp, 0, ports,
                    tls={"cert": pem("server.pem"), "key": pem("server-key.pem"),
                         "ca": pem("ca.pem"), "verify": False})
        node.start()
        url = "tls://127.0.0.1:%d" % node.port
        token_file = os.path.join(tmp, "nats.token")
        with open(token_file, "w") as f:
            f.write(TOKEN + "\n")
        client_cert = {"cert": pem("client.pem"), "key": pem("client-key.pem")}
        logs = [node.log]

        def log(name):
            return os.path.join(tmp, name + ".log")

        def start(name, cmd):
            procs[name] = subprocess.Popen(cmd, stdout=open(log(name), "a"),
                                           stderr=subprocess.STDOUT)
            if log(name) not in logs:
                logs.append(log(name))

        def start_trainer(name, db, ca, cert=None, consumer="plumb-train"):
            t = {"listen": "127.0.0.1:%d" % free_port(), "metrics": "127.0.0.1:%d" % free_port(),
                 "log": log(name)}
            cmd = [train, "--db", db, "--listen", t["listen"], "--metrics", t["metrics"],
                   "--dim", "8", "--publish-interval", "1s", "--gate-tolerance", "1",
                   "--no-refit", "--no-tune", "--no-sync",
                   "--jetstream-servers", url, "--jetstream-token-file", token_file,
                   "--jetstream-consumer", consumer, "--jetstream-create-replicas", "1",
                   "--jetstream-versions", "--jetstream-tls-ca", ca]
            if cert:
                cmd += ["--jetstream-tls-cert", cert["cert"], "--jetstream-tls-key", cert["key"]]
            start(name, cmd)
            return t

        def start_replica(name, ca, cert=None):
            r = {"listen": "127.0.0.1:%d" % free_port(), "metrics": "127.0.0.1:%d" % free_port(),
                 "db": os.path.join(tmp, name), "log": log(name)}
            cmd = [serve, "--db", r["db"], "--listen", r["listen"], "--metrics", r["metrics"],
                   "--replica-of", url, "--replica-token-file", token_file,
                   "--replica-tls-ca", ca, "--catchup-interval", "100ms"]
            if cert:
                cmd += ["--replica-tls-cert", cert["cert"], "--replica-tls-key", cert["key"]]
            start(name, cmd)
            return r

        def publish(first, count, cert=None):
            env = dict(os.environ, JETSTREAM_TOOL_TLS_CA=pem("ca.pem"))
            if cert:
                env.update(JETSTREAM_TOOL_TLS_CERT=cert["cert"], JETSTREAM_TOOL_TLS_KEY=cert["key"])
            r = subprocess.run([tool, "publish", node.url("tls"), "plumb.events", "ev", str(first),
                                str(count), "1", "0"], capture_output=True, text=True,
                               timeout=60, env=env)
            if r.returncode != 0:
                fail("publish over TLS: " + r.stdout + r.stderr, logs)

        def all_stored(db, count):
            r = subprocess.run([tool, "verify", db, "ev", str(count), "1"], capture_output=True,
                               text=True, timeout=60)
            return r.returncode == 0 and " other 0" in " " + r.stdout

        def serves(replica, trainer):
            pointer = metric(trainer["metrics"], "plumb_version_pointer")
            return pointer and metric(replica["metrics"], "plumb_model_version") == pointer

        def recommend(replica):
            r = subprocess.run([query, "recommend", "--server", replica["listen"], "--user", "u1",
                                "--count", "5"], capture_output=True, text=True, timeout=30)
            if r.returncode != 0:
                fail("Recommend from %s: %s" % (replica["listen"], r.stdout + r.stderr), logs)
            return r.stdout

        def says(name, text, what, within=20):
            wait_for("%s's log to say %s" % (name, what),
                     lambda: log_lines(log(name), text), within, logs)
            return log_lines(log(name), text)[0].strip()

        def still_running(name):
            if procs[name].poll() is not None:
                fail("%s exited %d; documented: it keeps running and retrying" %
                     (name, procs[name].returncode), logs)

        def stop(name):
            procs[name].send_signal(signal.SIGTERM)
            if procs[name].wait(30) != 0:
                fail("%s exited %d on SIGTERM" % (name, procs[name].returncode), logs)

        # ---- 1. TLS: events in, a version out, served by a replica ------------------------
        train_db = os.path.join(tmp, "train-db")
        trainer = start_trainer("train", train_db, pem("ca.pem"))
        wait_for("plumb-train to consume over TLS",
                 lambda: metric(trainer["metrics"], "plumb_jetstream_connected") == 1, 60, logs)
        publish(0, 3000)
        wait_for("3000 events in plumb-train's log, each once", lambda: all_stored(train_db, 3000),
                 60, logs)
        wait_for("a version shipped over TLS",
                 lambda: (metric(trainer["metrics"], "plumb_version_pointer") or 0) > 0, 60, logs)
        replica = start_replica("serve", pem("ca.pem"))
        wait_for("the replica to serve the shipped version over TLS",
                 lambda: serves(replica, trainer), 30, logs)
        first = int(metric(replica["metrics"], "plumb_model_version"))
        if "version %d" % first not in recommend(replica):
            fail("Recommend does not name version %d" % first, logs)
        print("TLS: 3000 events consumed into the log (each once), version %d shipped and "
              "served by a replica (%.1f s)" % (first, time.time() - started))

        # ---- 2. the wrong CA -------------------------------------------------------------------
        wrong_replica = start_replica("serve-wrong-ca", pem("other-ca.pem"))
        wrong_trainer = start_trainer("train-wrong-ca", os.path.join(tmp, "wrong-db"),
                                      pem("other-ca.pem"), consumer="plumb-train-wrong-ca")
        line = says("serve-wrong-ca", WRONG_CA, "the CA is wrong")
        print("replica with the wrong CA: " + line[line.index("[warning]"):])
        for source in ("JetStream: cannot connect", "versions: cannot connect"):
            line = says("train-wrong-ca", source, "what " + source.split(":")[0] + " met")
            if WRONG_CA not in line:
                fail("plumb-train with the wrong CA logged: " + line, logs)
        print("plumb-train with the wrong CA: " + line[line.index("[warning]"):])
        wait_for("ship failures counted",
                 lambda: (metric(wrong_trainer["metrics"],
                                 "plumb_version_ship_failures_total") or 0) >= 2, 20, logs)
        if metric(wrong_trainer["metrics"], "plumb_jetstream_connected") != 0:
            fail("plumb_jetstream_connected is not 0 with the wrong CA", logs)
        if metric(wrong_replica["metrics"], "plumb_replica_connected") != 0:
            fail("plumb_replica_connected is not 0 with the wrong CA", logs)
        still_running("serve-wrong-ca")
        still_running("train-wrong-ca")
        stop("serve-wrong-ca")
        stop("train-wrong-ca")
        # A CA file that is not there is a configuration error: both exit 2 at once, saying so.
        missing = os.path.join(tmp, "tls", "missing-ca.pem")
        for cmd in ([serve, "--db", os.path.join(tmp, "unused-replica"), "--listen",
                     "127.0.0.1:%d" % free_port(), "--metrics", "", "--replica-of", url,
                     "--replica-tls-ca", missing],
                    [train, "--db", os.path.join(tmp, "unused-db"), "--listen",
                     "127.0.0.1:%d" % free_port(), "--metrics", "", "--jetstream-servers", url,
                     "--jetstream-tls-ca", missing]):
            r = subprocess.run(cmd, capture_output=True, text=True, timeout=60)
            if r.returncode != 2 or "cannot read the TLS file " + missing not in r.stdout + r.stderr:
                fail("%s with a missing CA file: exit %d, %s" % (os.path.basename(cmd[0]),
                                                                 r.returncode, r.stdout + r.stderr),
                     logs)
        print("a missing CA file: plumb-serve and plumb-train exit 2 naming it")

        # ---- 3. client certificates required ---------------------------------------------------
        node.tls["verify"] = True
        node.write_conf()
        node.stop()
        node.start()
        # The processes connected without a client certificate cannot reconnect: they say why.
        line = says("train", "JetStream: cannot reconnect to NATS: " + NO_CLIENT_CERT,
                    "the server wants a client certificate", 30)
        print("plumb-train after the server began verifying clients: " +
              line[line.index("[warning]"):])
        says("serve", "cannot reconnect to NATS: " + NO_CLIENT_CERT,
             "the server wants a client certificate", 30)
        if metric(trainer["metrics"], "plumb_jetstream_connected") != 0:
            fail("plumb_jetstream_connected is not 0 without a client certificate", logs)
        if "version %d" % first not in recommend(replica):
            fail("the replica stopped serving version %d when NATS refused it" % first, logs)
        no_cert = start_replica("serve-no-cert", pem("ca.pem"))
        line = says("serve-no-cert", "replica: cannot connect: " + NO_CLIENT_CERT,
                    "the server wants a client certificate")
        print("new replica without a client certificate: " + line[line.index("[warning]"):])
        if metric(no_cert["metrics"], "plumb_replica_connected") != 0:
            fail("plumb_replica_connected is not 0 without a client certificate", logs)
        still_running("serve-no-cert")
        for name in ("serve-no-cert", "serve", "train"):
            stop(name)

        # With certificates: more events consumed, a new version shipped and served.
        trainer = start_trainer("train-cert", train_db, pem("ca.pem"), client_cert)
        wait_for("plumb-train to consume with its client certificate",
                 lambda: metric(trainer["metrics"], "plumb_jetstream_connected") == 1, 60, logs)
        publish(3000, 2000, client_cert)
        wait_for("5000 events in plumb-train's log, each once", lambda: all_stored(train_db, 5000),
                 60, logs)
        wait_for("a new version shipped with a client certificate",
                 lambda: (metric(trainer["metrics"], "plumb_version_pointer") or 0) > first, 60,
                 logs)
        replica = start_replica("serve-cert", pem("ca.pem"), client_cert)
        wait_for("a replica with a client certificate to serve the new version",
                 lambda: serves(replica, trainer), 30, logs)
        served = int(metric(replica["metrics"], "plumb_model_version"))
        if "version %d" % served not in recommend(replica):
            fail("Recommend does not name version %d" % served, logs)
        print("client certificates: 2000 more events consumed (5000 in the log, each once), "
              "version %d shipped and served by a new replica" % served)
        for name in ("serve-cert", "train-cert"):
            stop(name)
        print("PASS (%.1f s)" % (time.time() - started))
    finally:
        for p in procs.values():
            if p.poll() is None:
                p.kill()
                p.wait()
        if node is not None:
            node.stop()
        if args.keep:
            print("kept " + tmp)
        else:
            shutil.rmtree(tmp, ignore_errors=True)


if __name__ == "__main__":
    main()
