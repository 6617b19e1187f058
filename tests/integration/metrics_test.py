"""End-to-end tests of GET /metrics and the deployment files: promtool's lint on a real
exposition after a realistic ingest, the README's metrics table against what the service
exports, Debian's prometheus scraping the real service on loopback (own port and data folder),
promtool on the shipped scrape config and rules, and every query of the dashboard naming
metrics the service exports. Waits are for events with a deadline."""
import json
import os
import re
import shutil
import signal
import subprocess
import sys
import urllib.parse
import urllib.request

sys.path.insert(0, os.path.dirname(__file__))
import harness  # noqa: E402
from harness import Server, run, temp_dir  # noqa: E402
from alerts_test import free_port, wait_for, BASE, csv_rows  # noqa: E402

ROOT = os.path.join(os.path.dirname(__file__), "..", "..")
SETTINGS = """
server:
  synchronous: normal
policies:
  - name: lines
    match: 'north/*'
    period: week
    alpha: 0.2
    warmup: 4
    export_top_series: 3
    rules:
      - {name: shift, signal: cusum, limit: 3, clear: 2, resolve_after: 2}
      - {name: drift, signal: trigg, limit: 0.7}
  - name: rest
    match: '*'
    period: week
    method: ses
    alpha: 0.1
    rules:
      - {name: quiet, signal: stale, periods: 3}
"""


def feed(series=40, weeks=30):
    rows = []
    for i in range(series):
        values = BASE + [100 + (i % 7) * 10 + (50 if i % 5 == 0 and w > 20 else 0) for w in range(weeks - len(BASE))]
        rows.append(csv_rows("north/s%03d" % i, values))
        rows.append(csv_rows("south/s%03d" % i, values))
    return "series,period,value\n" + "".join(rows)


def scrape(srv):
    status, text, headers = srv.request("GET", "/metrics")
    assert status == 200, text
    assert headers["Content-Type"].startswith("text/plain; version=0.0.4"), headers
    return text


def names_in(text):
    names = set()
    for line in text.splitlines():
        if line.startswith("# TYPE "):
            names.add(line.split()[2])
    return names


def readme_metric_names():
    with open(os.path.join(ROOT, "README.md")) as f:
        text = f.read()
    section = text.split("#### Metrics", 1)[1].split("\n#### ", 1)[0]
    return set(re.findall(r"^\| `(forewarden_[a-z_]+)` \|", section, re.M))


def ingested_server():
    srv = Server(SETTINGS)
    status, body, _ = srv.post_csv(feed())
    assert status == 200 and body["alerts_opened"] > 0, body
    status, body, _ = srv.post_csv("series,period,value\nnorth/s001,2026-W05,x\n")
    assert status == 400, body  # a rejection to count
    srv.request("GET", "/v1/series/north%2Fs001")
    return srv


def test_exposition_is_clean_and_matches_the_readme():
    srv = ingested_server()
    try:
        text = scrape(srv)
    finally:
        srv.stop()
    lint = subprocess.run(["promtool", "check", "metrics"], input=text, capture_output=True, text=True)
    assert lint.returncode == 0 and not lint.stdout.strip() and not lint.stderr.strip(), (lint.stdout, lint.stderr)
    exported = names_in(text)
    listed = readme_metric_names()
    # only with a drop folder, an Alertmanager sink, or Kafka (kafka_test.py checks those)
    optional = {"forewarden_drop_folder_files_total", "forewarden_alertmanager_resent_total"}
    # exported with a kafka: section (and a changelog): kafka_test and kafka_share_test check them
    optional |= {n for n in listed if n.startswith(("forewarden_kafka_", "forewarden_changelog_"))}
    assert listed - exported <= optional, "in the README, not exported: %s" % (listed - exported - optional)
    assert exported <= listed, "exported, not in the README: %s" % (exported - listed)
    # Values that follow from the feed: 80 series x 30 weeks applied, one rejected batch of 1 row.
    assert 'forewarden_actuals_total{result="applied"} 2400' in text, text
    assert 'forewarden_actuals_total{result="rejected"} 1' in text
    assert 'forewarden_batches_total{result="rejected"} 1' in text
    assert re.search(r'forewarden_http_requests_total\{code="200",route="/v1/series/\{key\}"\} 1', text)
    assert 'forewarden_series{policy="lines",state="warming"} 0' in text
    # No series key in any label but the opted-in top series (3 per policy, two signals each).
    keyed = [l for l in text.splitlines() if 'series="' in l]
    assert keyed and all(l.startswith("forewarden_series_signal{") for l in keyed), keyed
    assert len(keyed) == 6, keyed
    assert 'forewarden_alerts{policy="lines",rule="shift"' in text


def test_exposition_size_does_not_follow_the_series_count():
    # Loose by design (figures live in tests/bench/metrics_bench.sh): ten times the series,
    # the same families and label sets, so nearly the same size, and far under 100 KB.
    sizes = []
    for n in (8, 80):
        srv = Server(SETTINGS)
        try:
            rows = "".join(csv_rows("north/s%03d" % i, BASE) + csv_rows("south/s%03d" % i, BASE) for i in range(n))
            status, body, _ = srv.post_csv("series,period,value\n" + rows)
            assert status == 200, body
            sizes.append(len(scrape(srv)))
        finally:
            srv.stop()
    assert sizes[1] < 100 * 1024, sizes
    assert abs(sizes[1] - sizes[0]) < 0.1 * sizes[0], sizes


def test_dashboard_queries_name_exported_metrics():
    srv = ingested_server()
    try:
        exported = names_in(scrape(srv))
    finally:
        srv.stop()
    with open(os.path.join(ROOT, "deploy", "grafana", "forewarden-dashboard.json")) as f:
        dash = json.load(f)
    exprs = [t["expr"] for p in dash["panels"] for t in p["targets"]]
    assert len(exprs) >= 15
    used = set()
    for e in exprs:
        for name in re.findall(r"forewarden_[a-z_]+", e):
            used.add(re.sub(r"_(bucket|sum|count)$", "", name) if name.endswith(("_bucket", "_sum", "_count")) and
                     re.sub(r"_(bucket|sum|count)$", "", name) in exported else name)
    missing = used - exported
    assert not missing, "the dashboard queries metrics the service does not export: %s" % missing


def test_deploy_prometheus_files_pass_promtool():
    d = temp_dir()
    for name in ("prometheus.yml", "forewarden-rules.yml"):
        shutil.copy(os.path.join(ROOT, "deploy", "prometheus", name), d)
    for args in (["check", "config", os.path.join(d, "prometheus.yml")],
                 ["check", "rules", os.path.join(d, "forewarden-rules.yml")]):
        r = subprocess.run(["promtool"] + args, capture_output=True, text=True)
        assert r.returncode == 0, (args, r.stdout, r.stderr)
        assert "SUCCESS" in r.stdout, r.stdout


def test_prometheus_scrapes_the_service():
    srv = ingested_server()
    port = free_port()
    d = temp_dir()
    shutil.copy(os.path.join(ROOT, "deploy", "prometheus", "forewarden-rules.yml"), d)
    with open(os.path.join(d, "prometheus.yml"), "w") as f:
        f.write("""global:
  scrape_interval: 1s
  evaluation_interval: 1s
rule_files:
  - forewarden-rules.yml
scrape_configs:
  - job_name: forewarden
    static_configs:
      - targets: ["127.0.0.1:%d"]
""" % srv.port)
    prom = subprocess.Popen(["prometheus", "--config.file=" + os.path.join(d, "prometheus.yml"),
                             "--storage.tsdb.path=" + os.path.join(d, "tsdb"),
                             "--web.listen-address=127.0.0.1:%d" % port],
                            stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    base = "http://127.0.0.1:%d" % port

    def query(q):
        try:
            with urllib.request.urlopen(base + "/api/v1/query?query=" + urllib.parse.quote(q), timeout=5) as r:
                body = json.load(r)
            return body["data"]["result"]
        except OSError:
            return None

    try:
        result = wait_for("the applied actuals in Prometheus",
                          lambda: query('forewarden_actuals_total{result="applied"}'))
        assert result[0]["value"][1] == "2400", result
        assert result[0]["metric"]["job"] == "forewarden", result
        up = query('up{job="forewarden"}')
        assert up and up[0]["value"][1] == "1", up
        alerts = wait_for("the unresolved alerts", lambda: query('sum(forewarden_alerts)'))
        assert float(alerts[0]["value"][1]) > 0, alerts
        with urllib.request.urlopen(base + "/api/v1/rules", timeout=5) as r:
            rules = json.load(r)["data"]["groups"]
        names = [rule["name"] for g in rules for rule in g["rules"]]
        assert "ForewardenStoreFailed" in names and "ForewardenFeedStale" in names, names
        wait_for("every rule evaluated without error", lambda: all(
            rule.get("health") == "ok" for g in json.load(urllib.request.urlopen(base + "/api/v1/rules", timeout=5))["data"]["groups"]
            for rule in g["rules"]))
    finally:
        prom.send_signal(signal.SIGTERM)
        prom.wait(timeout=harness.DEADLINE)
        srv.stop()


if __name__ == "__main__":
    sys.exit(run([test_exposition_is_clean_and_matches_the_readme, test_exposition_size_does_not_follow_the_series_count,
                  test_dashboard_queries_name_exported_metrics,
                  test_deploy_prometheus_files_pass_promtool, test_prometheus_scrapes_the_service]))
