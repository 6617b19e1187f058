#!/usr/bin/python3
"""Metrics benchmark: size of the /metrics exposition and the time of a scrape as the number of
series grows, against a baseline measured in the same run (GET /readyz, which also goes
through the HTTP server but does no work).

  tests/bench/metrics_bench.sh [SERIES...]       (default 10000 100000 1000000; Release build)

For each series count: a fresh service on the demo settings (four policies, calibrated rules),
every series gets 4 weekly actuals, then 21 scrapes and 21 /readyz requests; the median and the
largest time of each, and the exposition size, are reported. A scrape is one pass over the
series on the engine thread, so its time grows with the series; its size does not."""
import http.client
import os
import shutil
import statistics
import subprocess
import sys
import time

sys.path.insert(0, os.path.dirname(__file__))
from ingest_bench import batches_of, push, run  # noqa: E402


def timed(port, path, n):
    conn = http.client.HTTPConnection("127.0.0.1", port, timeout=300)
    times, size = [], 0
    for _ in range(n):
        t0 = time.monotonic()
        conn.request("GET", path)
        r = conn.getresponse()
        body = r.read()
        times.append(time.monotonic() - t0)
        assert r.status == 200, (path, r.status, body[:200])
        size = len(body)
    conn.close()
    return times, size


def main(build, work, counts):
    binary = os.path.join(build, "daemon", "forewarden")
    root = os.path.join(os.path.dirname(__file__), "..", "..")
    print("| series | exposition bytes | scrape median / max | /readyz median | scrape / readyz |")
    print("|---|---|---|---|---|")
    for n in counts:
        d = os.path.join(work, "metrics-%d" % n)
        shutil.rmtree(d, ignore_errors=True)
        os.makedirs(d)
        feed = os.path.join(d, "feed.csv")
        run([binary, "simulate", "--series", str(n), "--periods", "4", "--seed", "9", "--output", feed])
        proc = subprocess.Popen([binary, "serve", "--config", os.path.join(root, "config", "demo.yaml"),
                                 "--listen", "127.0.0.1:0", "--data", os.path.join(d, "data")],
                                stdout=subprocess.PIPE, stderr=subprocess.DEVNULL, text=True)
        port = int(proc.stdout.readline().rsplit(":", 1)[1])
        try:
            _, batches, _ = batches_of(feed)
            push(port, batches)
            scrapes, size = timed(port, "/metrics", 21)
            ready, _ = timed(port, "/readyz", 21)
        finally:
            proc.terminate()
            proc.wait()
        s_med, r_med = statistics.median(scrapes), statistics.median(ready)
        print("| %d | %d | %.1f / %.1f ms | %.2f ms | %.0f |" % (n, size, 1000 * s_med, 1000 * max(scrapes),
                                                                 1000 * r_med, s_med / r_med))
        shutil.rmtree(d, ignore_errors=True)


if __name__ == "__main__":
    main(sys.argv[1], sys.argv[2], [int(a) for a in sys.argv[3:]] or [10000, 100000, 1000000])
