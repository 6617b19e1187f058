#!/usr/bin/python3
"""Read benchmark driver (called by read_bench.sh): do planners' reads pause ingest?

In one run with N series (default 1,000,000) of which 1 % hold a rule:
  A. ingest of two periods for every series (CSV batches of 5,000 rows, 2 connections), no reader;
  B. the same ingest of the next two periods while one client asks
     GET /v1/series?status=alerting&sort=trigg&limit=100 every 100 ms;
  C. the same again while the client asks GET /v1/series?sort=trigg&limit=100 (every series
     sorted; not served by the alerting index) every 100 ms;
reports B/A (target >= 0.9), C/A, the GETs' latency p50/p99, and for the record the latency of
the full sort and of GET /metrics with no ingest.

usage: read_bench.py BINARY WORK_DIR [SERIES]"""
import http.client
import os
import shutil
import statistics
import subprocess
import sys
import threading
import time

BATCH = 5000
PERIODS = ["2026-W%02d" % w for w in range(1, 11)]


def batches(series, period, value):
    out = []
    for start in range(0, series, BATCH):
        lines = ["series,period,value"]
        for i in range(start, min(series, start + BATCH)):
            lines.append("s/%07d,%s,%s" % (i, period, value(i)))
        out.append("\n".join(lines) + "\n")
    return out


def post_all(port, bodies, clients=2):
    """POSTs every body over `clients` keep-alive connections; returns the seconds it took."""
    queue = list(bodies)
    lock = threading.Lock()
    failures = []

    def worker():
        conn = http.client.HTTPConnection("127.0.0.1", port, timeout=600)
        while True:
            with lock:
                if not queue:
                    return
                body = queue.pop()
            conn.request("POST", "/v1/actuals", body, {"Content-Type": "text/csv"})
            r = conn.getresponse()
            text = r.read()
            if r.status != 200:
                failures.append((r.status, text[:200]))

    t0 = time.monotonic()
    threads = [threading.Thread(target=worker) for _ in range(clients)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    if failures:
        raise SystemExit("ingest failed: %r" % failures[:3])
    return time.monotonic() - t0


def timed_get(conn, path):
    t0 = time.monotonic()
    conn.request("GET", path)
    r = conn.getresponse()
    r.read()
    assert r.status == 200, r.status
    return time.monotonic() - t0


def start_service(binary, work, n, policy_extra=""):
    """forewarden serve on a free loopback port in a fresh `work` folder, room for n series,
    one weekly policy with a Trigg rule; returns (process, port)."""
    shutil.rmtree(work, ignore_errors=True)
    os.makedirs(work)
    cfg = os.path.join(work, "settings.yaml")
    with open(cfg, "w") as f:
        f.write("server: {queue_depth: 256, max_rows_per_batch: 10000, max_series: %d}\n" % (n + 1) +
                "policies:\n  - {name: bench, match: '*', period: week, alpha: 0.2, signal_beta: 0.3,%s\n"
                "     rules: [{name: drift, signal: trigg, limit: 0.6, clear: 0.3, resolve_after: 50}]}\n"
                % policy_extra)
    proc = subprocess.Popen([binary, "serve", "--config", cfg, "--listen", "127.0.0.1:0", "--data",
                             os.path.join(work, "data")], stdout=subprocess.PIPE,
                            stderr=subprocess.DEVNULL, text=True)
    return proc, int(proc.stdout.readline().rsplit(":", 1)[1])


def main():
    binary, work = sys.argv[1], sys.argv[2]
    n = int(sys.argv[3]) if len(sys.argv) > 3 else 1000000
    proc, port = start_service(binary, work, n)
    try:
        # 1 % of the series step from 10 to 30 in week 3 and stay there: their rule holds; the
        # others stay at 10 (no error, so no signal).
        step = lambda i: i % 100 == 0  # noqa: E731
        for w, period in enumerate(PERIODS[:4]):
            post_all(port, batches(n, period, lambda i, w=w: 30 if step(i) and w >= 2 else 10))
        conn = http.client.HTTPConnection("127.0.0.1", port, timeout=600)
        conn.request("GET", "/v1/series?status=alerting&limit=1")
        r = conn.getresponse()
        import json
        alerting = json.loads(r.read())["total"]
        print("series: %d, holding a rule: %d (%.2f %%)" % (n, alerting, 100.0 * alerting / n))

        def ingest(periods):
            seconds = 0.0
            for p in periods:
                seconds += post_all(port, batches(n, p, lambda i: 30 if step(i) else 10))
            return seconds

        def with_reader(path, periods):
            stop = threading.Event()
            latencies = []

            def reader():
                rc = http.client.HTTPConnection("127.0.0.1", port, timeout=600)
                next_at = time.monotonic()
                while not stop.is_set():
                    latencies.append(timed_get(rc, path))
                    next_at += 0.1
                    stop.wait(max(0.0, next_at - time.monotonic()))

            t = threading.Thread(target=reader)
            t.start()
            seconds = ingest(periods)
            stop.set()
            t.join()
            return seconds, latencies

        def show(latencies):
            q = statistics.quantiles(latencies, n=100)
            return "%d requests, p50 %.1f ms, p99 %.1f ms" % (len(latencies), 1000 * statistics.median(latencies),
                                                           1000 * q[98])

        rows = 2 * n
        a = ingest(PERIODS[4:6])
        b, lb = with_reader("/v1/series?status=alerting&sort=trigg&limit=100", PERIODS[6:8])
        c, lc = with_reader("/v1/series?sort=trigg&limit=100", PERIODS[8:10])
        print("A ingest, no reader: %.0f rows/s" % (rows / a))
        print("B ingest, alerting list every 100 ms: %.0f rows/s; ratio B/A %.2f (target >= 0.9)" % (rows / b, a / b))
        print("  GET /v1/series?status=alerting&sort=trigg&limit=100 during B: " + show(lb))
        print("C ingest, full sort every 100 ms: %.0f rows/s; ratio C/A %.2f" % (rows / c, a / c))
        print("  GET /v1/series?sort=trigg&limit=100 during C: " + show(lc))
        alerting_idle = [timed_get(conn, "/v1/series?status=alerting&sort=trigg&limit=100") for _ in range(20)]
        print("  idle: GET /v1/series?status=alerting&sort=trigg&limit=100 median %.1f ms"
              % (1000 * statistics.median(alerting_idle)))
        full = [timed_get(conn, "/v1/series?sort=trigg&limit=100") for _ in range(5)]
        metrics = [timed_get(conn, "/metrics") for _ in range(5)]
        print("  idle: GET /v1/series?sort=trigg&limit=100 (every series) median %.0f ms; GET /metrics median %.0f ms"
              % (1000 * statistics.median(full), 1000 * statistics.median(metrics)))
    finally:
        proc.terminate()
        proc.wait(timeout=600)
        shutil.rmtree(work, ignore_errors=True)


if __name__ == "__main__":
    main()
