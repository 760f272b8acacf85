#!/usr/bin/env python3
"""Loads plumb-serve's and plumb-train's status pages in headless chromium (Debian's
chromium + chromedriver through python3-selenium) and checks them against /status.json and
the Prometheus scrape of the same process:

- every line plot has one point per measured value of its /status.json series, with the
  same values (exact doubles, via data-value), and its table the same rows;
- the group-share bars are as many as the JSON's shares and equal them and the
  plumb_exposure_group_share_ratio / plumb_interaction_group_share_ratio /
  plumb_validation_target_group_share_ratio gauges; the headline cards equal the exposure
  gauges (lift, Gini, coverage, JS divergence, shift) and the version gauges;
- the trainer's cards equal plumb_trainer_active_version, plumb_events_accepted_total and
  the log sequence of /status.json; the version table and timeline list the JSON's versions;
- hostile item ids show as text (no <script> element, no alert, no injected attribute);
- the browser console has no errors; a PNG of each page is saved.

The pages and the JSON are fetched at slightly different moments while the history grows
once a second: a comparison is retried until JSON fetched before and after the page agree.
"""
import argparse
import json
import math
import re
import sys
import time
import urllib.request

from selenium import webdriver
from selenium.webdriver.chrome.options import Options
from selenium.webdriver.chrome.service import Service
from selenium.webdriver.common.by import By

failures = []


def check(cond, what):
    if not cond:
        failures.append(what)
        print("FAIL:", what)
    return cond


def fetch(url):
    with urllib.request.urlopen(url, timeout=10) as r:
        return r.read().decode("utf-8")


def status_json(addr):
    j = json.loads(fetch("http://%s/status.json" % addr))
    j.pop("now_ms", None)
    return j


def scrape(addr):
    """{(name, frozenset(labels)): value} from the Prometheus text exposition."""
    out = {}
    for line in fetch("http://%s/metrics" % addr).splitlines():
        if not line or line.startswith("#"):
            continue
        m = re.match(r'^([a-zA-Z_:][\w:]*)(\{([^}]*)\})?\s+(\S+)', line)
        labels = frozenset(re.findall(r'(\w+)="([^"]*)"', m.group(3) or ""))
        out[(m.group(1), labels)] = float(m.group(4))
    return out


def same(a, b):
    if a is None or (isinstance(a, float) and math.isnan(a)):
        return b is None or (isinstance(b, float) and math.isnan(b))
    return b is not None and not (isinstance(b, float) and math.isnan(b)) and float(a) == float(b)


def near(a, b, tol=1e-9):
    return a is not None and b is not None and abs(float(a) - float(b)) <= tol * max(1.0, abs(b))


def value_of(el):
    v = el.get_attribute("data-value")
    return None if v in (None, "NaN") else float(v)


def driver():
    opts = Options()
    for a in ["--headless=new", "--no-sandbox", "--disable-gpu", "--disable-dev-shm-usage",
              "--hide-scrollbars", "--window-size=1280,1000"]:
        opts.add_argument(a)
    opts.binary_location = "/usr/bin/chromium"
    opts.set_capability("goog:loggingPrefs", {"browser": "ALL"})
    return webdriver.Chrome(service=Service("/usr/bin/chromedriver"), options=opts)


def load_stable(d, addr):
    """Loads the page between two equal JSON fetches; returns that JSON."""
    for _ in range(20):
        before = status_json(addr)
        d.get("http://%s/" % addr)
        after = status_json(addr)
        if before == after:
            return after
        time.sleep(0.3)
    raise SystemExit("FAIL: %s's status never held still for one page load" % addr)


def check_line_plots(d, j, page):
    series = j["history"]["series"]
    points = d.find_elements(By.CSS_SELECTOR, "svg[data-plot] circle.point")
    check(len(points) > 0, "%s: no plot points" % page)
    drawn_keys = set()
    for key in {p.get_attribute("data-key") for p in points}:
        drawn_keys.add(key)
    for plot in d.find_elements(By.CSS_SELECTOR, "figure.plot svg[data-plot]"):
        pid = plot.get_attribute("data-plot")
        if pid in ("group-shares", "versions"):
            continue
        keys = {c.get_attribute("data-key") for c in
                d.find_elements(By.CSS_SELECTOR, 'table[data-table="%s"] td[data-key]' % pid)}
        for key in keys:
            check(key in series, "%s: plot %s draws %s, which /status.json lacks" % (page, pid, key))
            if key not in series:
                continue
            want = [v for v in series[key] if v is not None]
            got = [value_of(c) for c in plot.find_elements(
                By.CSS_SELECTOR, 'circle.point[data-key="%s"]' % key)]
            check(len(got) == len(want),
                  "%s: plot %s series %s has %d points, /status.json %d" % (page, pid, key, len(got), len(want)))
            check(all(same(a, b) for a, b in zip(got, want)),
                  "%s: plot %s series %s values differ from /status.json" % (page, pid, key))
            cells = [value_of(c) for c in d.find_elements(
                By.CSS_SELECTOR, 'table[data-table="%s"] td[data-key="%s"]' % (pid, key))]
            check(len(cells) == len(series[key]) and all(same(a, b) for a, b in zip(cells, series[key])),
                  "%s: table of %s, series %s, differs from /status.json" % (page, pid, key))
    return len(points)


def card(d, key):
    els = d.find_elements(By.CSS_SELECTOR, '.card[data-key="%s"]' % key)
    return value_of(els[0]) if els else None


def console_errors(d, page):
    errors = [e for e in d.get_log("browser") if e.get("level") == "SEVERE"]
    check(not errors, "%s: browser console errors: %s" % (page, errors))


def screenshot(d, path):
    """The whole page, 1280 CSS pixels wide, as a PNG."""
    height = d.execute_script("return document.documentElement.scrollHeight")
    d.execute_cdp_cmd("Emulation.setDeviceMetricsOverride",
                      {"width": 1280, "height": min(int(height), 8000), "deviceScaleFactor": 1,
                       "mobile": False})
    d.save_screenshot(path)
    d.execute_cdp_cmd("Emulation.clearDeviceMetricsOverride", {})


def check_serve(d, addr, shots):
    j = load_stable(d, addr)
    prom = scrape(addr)
    e = j["exposure"]
    n = check_line_plots(d, j, "plumb-serve")
    # Bars: as many as the JSON's shares, equal to them and to the gauges.
    bars = d.find_elements(By.CSS_SELECTOR, 'svg[data-plot="group-shares"] rect.bar')
    lists = [e["served_group_shares"], e["interaction_group_shares"], e["target_group_shares"]]
    lists = [l for l in lists if l]
    check(len(bars) == sum(len(l) for l in lists),
          "plumb-serve: %d bars, /status.json has %d shares" % (len(bars), sum(len(l) for l in lists)))
    gauges = ["plumb_exposure_group_share_ratio", "plumb_interaction_group_share_ratio",
              "plumb_validation_target_group_share_ratio"]
    for s, shares in enumerate(lists):
        got = [value_of(b) for b in bars if b.get_attribute("data-series") == str(s)]
        check(got == shares, "plumb-serve: bars of series %d %s != /status.json %s" % (s, got, shares))
        for g, share in enumerate(shares):
            metric = prom.get((gauges[s], frozenset({("group", str(g + 1))})))
            check(near(metric, share), "plumb-serve: %s{group=%d} = %s, page %s" % (gauges[s], g + 1, metric, share))
    for key, gauge in [("lift", "plumb_exposure_popularity_lift_ratio"),
                       ("gini", "plumb_exposure_gini_ratio"),
                       ("coverage", "plumb_exposure_coverage_ratio"),
                       ("drift_js", "plumb_exposure_js_divergence"),
                       ("shift", "plumb_exposure_shift_ratio"),
                       ("window_lists", "plumb_exposure_window_lists")]:
        check(same(card(d, key), e[key]), "plumb-serve: card %s %s != /status.json %s" % (key, card(d, key), e[key]))
        check(near(prom.get((gauge, frozenset())), e[key]),
              "plumb-serve: %s = %s, page %s" % (gauge, prom.get((gauge, frozenset())), e[key]))
    check(card(d, "version") == j["model"]["version"] == prom.get(("plumb_model_version", frozenset())),
          "plumb-serve: version card, JSON and plumb_model_version disagree")
    # Most-served items: the JSON's rows, in order, ids shown as the text they are.
    rows = d.find_elements(By.CSS_SELECTOR, "#top-items tbody tr")
    check(len(rows) == len(j["top_items"]) > 0, "plumb-serve: %d top-item rows, JSON %d" % (len(rows), len(j["top_items"])))
    for row, item in zip(rows, j["top_items"]):
        cells = row.find_elements(By.TAG_NAME, "td")
        check(cells[1].text == item["id"], "plumb-serve: top item shown as %r, id %r" % (cells[1].text, item["id"]))
        check(value_of(cells[2]) == item["served_slots"] and value_of(cells[4]) == item["training_degree"],
              "plumb-serve: top item %r numbers differ" % item["id"])
    hostile = {"<script>alert(1)</script>", 't" onmouseover="alert(2)'}
    shown = hostile & {i["id"] for i in j["top_items"]}
    check(shown == hostile, "plumb-serve: hostile ids among the most served: %s (expected both)" % shown)
    check(not d.find_elements(By.TAG_NAME, "script"), "plumb-serve: the page holds a <script> element")
    check(not d.find_elements(By.CSS_SELECTOR, "[onmouseover]"), "plumb-serve: an id became an attribute")
    check("user" not in " ".join(r.text for r in rows).lower() and not re.search(r"\bm\d+\b", d.find_element(By.TAG_NAME, "main").text),
          "plumb-serve: a user id reached the page")
    console_errors(d, "plumb-serve")
    screenshot(d, shots + "/status-serve.png")
    print("ok: plumb-serve page: %d plot points, %d bars, %d top items (hostile ids shown as text), "
          "cards = /status.json = gauges" % (n, len(bars), len(rows)))


def check_train(d, addr, shots):
    j = load_stable(d, addr)
    prom = scrape(addr)
    t = j["trainer"]
    n = check_line_plots(d, j, "plumb-train")
    check(card(d, "active_version") == t["active_version"] == prom.get(("plumb_trainer_active_version", frozenset())),
          "plumb-train: active version card, JSON and plumb_trainer_active_version disagree")
    check(card(d, "events_accepted") == t["events_accepted"] == prom.get(("plumb_events_accepted_total", frozenset())),
          "plumb-train: accepted card %s, JSON %s, counter %s" % (card(d, "events_accepted"), t["events_accepted"], prom.get(("plumb_events_accepted_total", frozenset()))))
    check(card(d, "log_sequence") == t["log_sequence"], "plumb-train: log sequence card != JSON")
    check(card(d, "lag_events") == t["lag_events"] == prom.get(("plumb_trainer_lag_events", frozenset())),
          "plumb-train: lag card, JSON and plumb_trainer_lag_events disagree")
    rejected = prom.get(("plumb_events_rejected_total", frozenset({("reason", "future_timestamp")})))
    check(t["events_rejected"]["future_timestamp"] == rejected == 1,
          "plumb-train: future_timestamp rejections JSON %s, counter %s (1 sent)" % (t["events_rejected"]["future_timestamp"], rejected))
    check(d.find_elements(By.CSS_SELECTOR, 'circle.point[data-key="rejected_rate_future_timestamp"]'),
          "plumb-train: the rejection reason that occurred has no line")
    rows = d.find_elements(By.CSS_SELECTOR, "#versions tbody tr")
    marks = d.find_elements(By.CSS_SELECTOR, 'svg[data-plot="versions"] g.version')
    want = [v["version"] for v in j["versions"]]
    check([int(r.get_attribute("data-version")) for r in rows] == want and len(want) > 0,
          "plumb-train: version table %s != JSON %s" % ([r.get_attribute("data-version") for r in rows], want))
    check(sorted(int(m.get_attribute("data-version")) for m in marks) == sorted(want),
          "plumb-train: timeline marks differ from the JSON's versions")
    active = [m.get_attribute("data-version") for m in marks if m.get_attribute("data-active") == "1"]
    check(active == [str(t["active_version"])], "plumb-train: timeline marks %s active" % active)
    commands = d.find_element(By.ID, "commands").text
    check("plumb-query activate --model-version" in commands and j["trainer_address"] in commands,
          "plumb-train: no promote/rollback command shown")
    check(not d.find_elements(By.TAG_NAME, "form") and not d.find_elements(By.TAG_NAME, "button"),
          "plumb-train: the read-only page has a form or button")
    console_errors(d, "plumb-train")
    screenshot(d, shots + "/status-train.png")
    print("ok: plumb-train page: %d plot points, %d versions, cards = /status.json = metrics" % (n, len(rows)))


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--serve", required=True)
    ap.add_argument("--train", required=True)
    ap.add_argument("--screenshots", required=True)
    a = ap.parse_args()
    d = driver()
    try:
        check_serve(d, a.serve, a.screenshots)
        check_train(d, a.train, a.screenshots)
    finally:
        d.quit()
    if failures:
        sys.exit(1)
    print("ok: screenshots in", a.screenshots)


if __name__ == "__main__":
    main()
