"""What the real-process tests of tests/stream/ share: loopback ports, failing with the tail
of the logs, waiting, scraping a metrics endpoint, checking the documented metric families.
Used by jetstream_cluster_test.py, replicas_test.py and nats_tls_test.py (standard library only).
"""
import os
import json
import re
import shutil
import signal
import socket
import subprocess
import sys
import time
import urllib.request


TOKEN = "loopback-test-token"


class Node:
    """One nats-server on loopback with JetStream and the client token TOKEN: node `index` of
    the cluster whose (client, route, monitoring) ports are `ports` (a single entry: no
    cluster). tls: None, or a dict of PEM files "cert", "key", "ca" and "verify" (ask every
    client for a certificate that "ca" signed); then clients must use TLS. After changing
    tls, write_conf() and restart."""

    def __init__(self, server, tmp, index, ports, tls=None):
        self.server, self.index, self.ports, self.tls = server, index, ports, tls
        self.port, self.cluster_port, self.http_port = ports[index]
        self.dir = os.path.join(tmp, "n%d" % index)
        os.makedirs(self.dir, exist_ok=True)
        self.conf = os.path.join(self.dir, "nats.conf")
        self.log = os.path.join(self.dir, "nats.log")
        self.write_conf()
        self.proc = None

    def write_conf(self):
        text = """server_name: n%d
listen: 127.0.0.1:%d
http: 127.0.0.1:%d
authorization { token: "%s" }
jetstream { store_dir: "%s", max_memory_store: 64MB, max_file_store: 2GB }
""" % (self.index, self.port, self.http_port, TOKEN, os.path.join(self.dir, "js"))
        if len(self.ports) > 1:
            routes = ", ".join("nats-route://127.0.0.1:%d" % p[1]
                               for i, p in enumerate(self.ports) if i != self.index)
            text += "cluster { name: plumb-test, listen: 127.0.0.1:%d, routes: [%s] }\n" % (
                self.cluster_port, routes)
        if self.tls:
            text += ('tls { cert_file: "%s", key_file: "%s", ca_file: "%s", verify: %s, '
                     'timeout: 5 }\n' % (self.tls["cert"], self.tls["key"], self.tls["ca"],
                                         "true" if self.tls.get("verify") else "false"))
        with open(self.conf, "w") as f:
            f.write(text)

    def start(self):
        self.proc = subprocess.Popen([self.server, "-c", self.conf],
                                     stdout=open(self.log, "a"), stderr=subprocess.STDOUT)

    def kill(self):
        self.proc.send_signal(signal.SIGKILL)
        self.proc.wait()

    def stop(self):
        if self.proc and self.proc.poll() is None:
            self.proc.terminate()
            try:
                self.proc.wait(10)
            except subprocess.TimeoutExpired:
                self.proc.kill()
                self.proc.wait()

    def url(self, scheme="nats"):
        return "%s://%s@127.0.0.1:%d" % (scheme, TOKEN, self.port)

    def has_client(self, name):
        try:
            with urllib.request.urlopen("http://127.0.0.1:%d/connz" % self.http_port,
                                        timeout=2) as r:
                conns = json.load(r).get("connections") or []
            return any(c.get("name") == name for c in conns)
        except OSError:
            return False

    def jsz(self):
        try:
            with urllib.request.urlopen(
                    "http://127.0.0.1:%d/jsz?streams=true&consumers=true" % self.http_port,
                    timeout=2) as r:
                return json.load(r)
        except OSError:
            return {}


_handed_out = set()


def free_port():
    """A loopback port free now and never handed out before by this test: a port is picked
    long before its process binds it, and the kernel may offer a released port again (a
    trainer once got a nats route port this way and failed with 'address in use')."""
    while True:
        with socket.socket() as s:
            s.bind(("127.0.0.1", 0))
            port = s.getsockname()[1]
        if port not in _handed_out:
            _handed_out.add(port)
            return port


def fail(msg, logs=()):
    print("FAIL: " + msg)
    for path in logs:
        if callable(path):
            print(path())
        elif os.path.exists(path):
            print("--- " + path)
            with open(path, errors="replace") as f:
                print("".join(f.readlines()[-15:]))
    sys.exit(1)


def scrape(addr):
    try:
        with urllib.request.urlopen("http://%s/metrics" % addr, timeout=2) as r:
            text = r.read().decode()
    except OSError:
        return {}
    values = {}
    for line in text.splitlines():
        if line.startswith("#") or not line.strip():
            continue
        name, _, value = line.rpartition(" ")
        values[name] = float(value)
    return values


def check_documented(metrics_addr, prefix, section, logs, what=None):
    """The families starting with `prefix` of a live scrape are exactly those
    docs/operators.md lists under the heading `section`, and promtool's linter passes (when
    installed). Fails with "<what> exported ..., documented ..." (what: "<section>:").
    Returns (families served, whether promtool ran)."""
    with urllib.request.urlopen("http://%s/metrics" % metrics_addr, timeout=2) as r:
        text = r.read().decode()
    served = set(re.findall(r"^# TYPE (%s[a-z0-9_]*) " % prefix, text, re.M))
    doc = open(os.path.join(os.path.dirname(__file__), "../../docs/operators.md")).read()
    part = doc.split("### " + section, 1)[1].split("\n## ", 1)[0].split("\n### ", 1)[0]
    documented = set(re.findall(r"^\| `(plumb_[a-z0-9_]+)", part, re.M))
    if served != documented:
        fail("%s exported %s, documented %s" % (what or section + ":", sorted(served),
                                                sorted(documented)), logs)
    promtool = shutil.which("promtool")
    if promtool:
        r = subprocess.run([promtool, "check", "metrics"], input=text, capture_output=True,
                           text=True)
        if r.stdout.strip() or r.stderr.strip():
            fail("promtool check metrics: " + r.stdout + r.stderr, logs)
    return len(served), bool(promtool)


def metric(addr, name):
    """One sample of a live scrape (None when absent or the endpoint does not answer)."""
    return scrape(addr).get(name)


def wait_for(what, predicate, timeout, logs=()):
    deadline = time.time() + timeout
    while time.time() < deadline:
        if predicate():
            return
        time.sleep(0.2)
    fail("timed out waiting for " + what, logs)
