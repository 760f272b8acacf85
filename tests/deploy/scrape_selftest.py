#!/usr/bin/env python3
"""Self-test of prometheus_scrape_test.sh against fake exporters (stdlib only).

    scrape_selftest.py CASE

Starts two fake exporters (fake_exporter.py) serving testdata/serve.prom and
testdata/train.prom, or a damaged copy of one, runs the scrape script against them with a
real Prometheus, and checks the outcome:

  plausible      passes, and every value it reports equals the one the exporter served
                 (so the numbers really travelled exporter -> Prometheus -> HTTP API);
  gini-high      a Gini of 1.3 is rejected;
  shares-off     group shares summing to 0.8 are rejected;
  missing        a trainer without plumb_events_accepted_total is rejected (after a short
                 wait);
  train-down     an unreachable trainer target is reported as not up.

Exit status 0 when the script behaved as expected.
"""

import os
import re
import socket
import subprocess
import sys

HERE = os.path.dirname(os.path.abspath(__file__))
sys.path.insert(0, HERE)
import fake_exporter  # noqa: E402  (after the path tweak)

SCRIPT = os.path.join(HERE, "prometheus_scrape_test.sh")


def read(name):
    with open(os.path.join(HERE, "testdata", name), encoding="utf-8") as f:
        return f.read()


def replace_once(text, old, new):
    if text.count(old) != 1:
        raise SystemExit("selftest: expected exactly one %r in the test data" % old)
    return text.replace(old, new)


def closed_port():
    """A loopback port with nothing listening (bound, then released)."""
    s = socket.socket()
    s.bind(("127.0.0.1", 0))
    port = s.getsockname()[1]
    s.close()
    return "127.0.0.1:%d" % port


def served_values(text):
    """The samples of an exposition as {'name{labels}': float}, labels as the script prints."""
    values = {}
    for line in text.splitlines():
        if not line or line.startswith("#"):
            continue
        series, value = line.rsplit(" ", 1)
        values[series] = float(value)
    return values


def run_script(serve_addr, train_addr, timeout):
    env = dict(os.environ, PLUMB_SCRAPE_TIMEOUT=str(timeout), PYTHON3=sys.executable)
    result = subprocess.run(["bash", SCRIPT, serve_addr, train_addr], env=env,
                            capture_output=True, text=True, timeout=timeout + 30)
    sys.stdout.write(result.stdout)
    sys.stderr.write(result.stderr)
    return result


def expect_failure(result, pattern):
    if result.returncode == 0:
        raise SystemExit("selftest: the script passed, expected it to fail with %r" % pattern)
    if not re.search(pattern, result.stderr):
        raise SystemExit("selftest: the script failed, but without %r in its message" % pattern)
    print("selftest: failed as expected (%s)" % pattern)


def main():
    if len(sys.argv) != 2:
        raise SystemExit(__doc__)
    case = sys.argv[1]
    serve_text, train_text = read("serve.prom"), read("train.prom")
    exporters = []
    try:
        if case == "plausible":
            serve = fake_exporter.serve(serve_text)
            train = fake_exporter.serve(train_text)
            exporters += [serve, train]
            result = run_script(serve.address, train.address, 60)
            if result.returncode != 0:
                raise SystemExit("selftest: the script failed on plausible metrics")
            reported = dict(line.split(" ", 2)[1:] for line in result.stdout.splitlines()
                            if line.startswith("ok "))
            expected = served_values(serve_text)
            expected.update(served_values(train_text))
            checked = ["plumb_exposure_gini_ratio", "plumb_exposure_popularity_lift_ratio",
                       "plumb_events_accepted_total"] + [
                       'plumb_exposure_group_share_ratio{group="%d"}' % g for g in range(1, 5)]
            for series in checked:
                if series not in reported:
                    raise SystemExit("selftest: the script did not report %s" % series)
                if float(reported[series]) != expected[series]:
                    raise SystemExit("selftest: %s reported %s, the exporter served %r"
                                     % (series, reported[series], expected[series]))
            if len(reported) != len(checked):
                raise SystemExit("selftest: unexpected reports %s" % sorted(reported))
            print("selftest: %d values match what the exporters served" % len(checked))
        elif case == "gini-high":
            serve = fake_exporter.serve(replace_once(
                serve_text, "plumb_exposure_gini_ratio 0.640625", "plumb_exposure_gini_ratio 1.3"))
            train = fake_exporter.serve(train_text)
            exporters += [serve, train]
            expect_failure(run_script(serve.address, train.address, 20),
                           r"plumb_exposure_gini_ratio = 1\.3, outside \[0, 1\]")
        elif case == "shares-off":
            serve = fake_exporter.serve(replace_once(
                serve_text, 'plumb_exposure_group_share_ratio{group="4"} 0.5',
                'plumb_exposure_group_share_ratio{group="4"} 0.3'))
            train = fake_exporter.serve(train_text)
            exporters += [serve, train]
            expect_failure(run_script(serve.address, train.address, 20),
                           r"plumb_exposure_group_share_ratio sums to 0\.8")
        elif case == "missing":
            serve = fake_exporter.serve(serve_text)
            train = fake_exporter.serve(replace_once(
                train_text, "plumb_events_accepted_total 1234\n", ""))
            exporters += [serve, train]
            expect_failure(run_script(serve.address, train.address, 10),
                           r"timed out waiting for samples of plumb_events_accepted_total")
        elif case == "train-down":
            serve = fake_exporter.serve(serve_text)
            exporters.append(serve)
            expect_failure(run_script(serve.address, closed_port(), 10),
                           r"(?s)timed out waiting for both targets.*target plumb-train: health down")
        else:
            raise SystemExit("selftest: unknown case %r" % case)
    finally:
        for exporter in exporters:
            exporter.stop()


if __name__ == "__main__":
    main()
