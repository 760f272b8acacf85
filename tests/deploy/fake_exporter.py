#!/usr/bin/env python3
"""A stand-in for a plumb process's /metrics endpoint, for testing the scrape script.

Serves a fixed Prometheus text exposition at /metrics on a loopback port (404 elsewhere).
Python standard library only.

    fake_exporter.py METRICS_FILE [--port-file FILE]

binds 127.0.0.1 on a free port, writes the port number to FILE (atomically) or prints it,
and serves until SIGTERM or SIGINT. scrape_selftest.py imports serve() instead and runs it
in a thread.
"""

import argparse
import http.server
import os
import signal
import sys
import threading

CONTENT_TYPE = "text/plain; version=0.0.4; charset=utf-8"  # Prometheus text format 0.0.4


class FakeExporter:
    """One HTTP server on 127.0.0.1:<free port> answering /metrics with `text`."""

    def __init__(self, text):
        body = text.encode("utf-8")

        class Handler(http.server.BaseHTTPRequestHandler):
            def do_GET(self):  # noqa: N802 (name fixed by http.server)
                if self.path.split("?", 1)[0] != "/metrics":
                    self.send_error(404, "only /metrics is served")
                    return
                self.send_response(200)
                self.send_header("Content-Type", CONTENT_TYPE)
                self.send_header("Content-Length", str(len(body)))
                self.end_headers()
                self.wfile.write(body)

            def log_message(self, *args):
                pass  # scrapes every second would drown the test output

        self._server = http.server.ThreadingHTTPServer(("127.0.0.1", 0), Handler)
        self._server.daemon_threads = True
        self._thread = None

    @property
    def address(self):
        host, port = self._server.server_address[:2]
        return "%s:%d" % (host, port)

    def start(self):
        self._thread = threading.Thread(target=self._server.serve_forever, daemon=True)
        self._thread.start()
        return self

    def stop(self):
        self._server.shutdown()
        self._server.server_close()


def serve(text):
    """Starts a FakeExporter for `text` in a background thread and returns it."""
    return FakeExporter(text).start()


def main():
    parser = argparse.ArgumentParser(description=__doc__.split("\n", 1)[0])
    parser.add_argument("metrics_file")
    parser.add_argument("--port-file", help="write the bound port here instead of stdout")
    args = parser.parse_args()
    with open(args.metrics_file, encoding="utf-8") as f:
        exporter = FakeExporter(f.read())
    port = exporter.address.rsplit(":", 1)[1]
    if args.port_file:
        tmp = args.port_file + ".tmp"
        with open(tmp, "w") as f:
            f.write(port + "\n")
        os.replace(tmp, args.port_file)
    else:
        print(port, flush=True)
    signal.signal(signal.SIGTERM, lambda *_: sys.exit(0))
    try:
        exporter._server.serve_forever()
    except (KeyboardInterrupt, SystemExit):
        pass
    finally:
        exporter._server.server_close()


if __name__ == "__main__":
    main()
