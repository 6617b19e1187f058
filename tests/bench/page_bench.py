#!/usr/bin/python3
"""Planner page benchmark driver (called by page_bench.sh): is the attention list fast at a
million series, is a series view's data fast, and do they pause ingest?

N series (default 1,000,000); 1 % of them (every hundredth) have 104 weeks of history and step
up in their last 4 weeks, so their rule holds and each has an open alert; the others have 8
weeks. Measured in one run:
  L. GET /v1/attention?limit=50 (the page's home view: one pass over every series, the alert
     book, and 50 rows from the store with their last 26 periods), idle: p50 / p99;
  S. GET /v1/series/{key} and GET /v1/series/{key}/history of a 104-period series (what the
     series view asks), idle: p50 / p99 of the pair;
  A. ingest of two periods for every series (CSV batches of 5,000 rows, 2 connections), no reader;
  B. the same ingest of the next two periods while one client asks for the attention list every
     250 ms; reports B/A (target >= 0.9) and the list's latency during B.
Targets (issue 11): L <= 100 ms, S <= 20 ms.

usage: page_bench.py BINARY WORK_DIR [SERIES]"""
import http.client
import json
import os
import shutil
import statistics
import sys
import threading
import time

sys.path.insert(0, os.path.dirname(__file__))
from read_bench import post_all, start_service, timed_get  # noqa: E402

BATCH = 5000


def week(w):
    """Week w (0-based) from 2025-01-06 as a date."""
    import datetime
    return (datetime.date(2025, 1, 6) + datetime.timedelta(weeks=w)).isoformat()


def noise(i, w):
    return ((i * 7 + w * 13) % 5) - 2


def bodies(rows):
    out = []
    for start in range(0, len(rows), BATCH):
        out.append("series,period,value\n" + "".join(rows[start:start + BATCH]))
    return out


def main():
    binary, work = sys.argv[1], sys.argv[2]
    n = int(sys.argv[3]) if len(sys.argv) > 3 else 1000000
    proc, port = start_service(binary, work, n, " warmup: 4, start: {mean_of_first: 4}, history: 104,")
    try:
        deep = [i for i in range(0, n, 100)]
        t0 = time.monotonic()
        # the deep 1 %: weeks 0..99 steady, 100..103 stepped up
        for w in range(104):
            rows = ["s/%07d,%s,%d\n" % (i, week(w), (30 if w >= 100 else 10) + noise(i, w)) for i in deep]
            post_all(port, bodies(rows))
        # everyone else: weeks 96..103 steady
        for w in range(96, 104):
            rows = ["s/%07d,%s,%d\n" % (i, week(w), 10 + noise(i, w)) for i in range(n) if i % 100]
            post_all(port, bodies(rows))
        print("loaded %d series (%d with 104 weeks) in %.0f s" % (n, len(deep), time.monotonic() - t0))
        conn = http.client.HTTPConnection("127.0.0.1", port, timeout=600)
        conn.request("GET", "/v1/attention?limit=1&recent=0")
        r = conn.getresponse()
        page = json.loads(r.read())
        c = page["counts"][0]
        print("attention: %d rows; %d open alerts, %d series holding a rule (%.2f %%), %d near a limit"
              % (page["total"], c["open"], c["alerting"], 100.0 * c["alerting"] / n, c["near"]))

        def show(latencies):
            q = statistics.quantiles(latencies, n=100)
            return "%d requests, p50 %.1f ms, p99 %.1f ms" % (len(latencies), 1000 * statistics.median(latencies),
                                                           1000 * q[98])

        listing = [timed_get(conn, "/v1/attention?limit=50") for _ in range(30)]
        print("L idle: GET /v1/attention?limit=50: " + show(listing) + " (target p50 <= 100 ms)")
        key = "s%%2F%07d" % deep[len(deep) // 2]
        view = [timed_get(conn, "/v1/series/" + key) + timed_get(conn, "/v1/series/" + key + "/history")
                for _ in range(30)]
        print("S idle: GET /v1/series/{key} + /history (104 periods): " + show(view) + " (target p50 <= 20 ms)")

        def ingest(weeks):
            seconds = 0.0
            for w in weeks:
                seconds += post_all(port, bodies(["s/%07d,%s,%d\n" % (i, week(w), (30 if i % 100 == 0 else 10) + noise(i, w))
                                                  for i in range(n)]))
            return seconds

        a = ingest([104, 105])
        stop = threading.Event()
        during = []

        def reader():
            rc = http.client.HTTPConnection("127.0.0.1", port, timeout=600)
            next_at = time.monotonic()
            while not stop.is_set():
                during.append(timed_get(rc, "/v1/attention?limit=50"))
                next_at += 0.25
                stop.wait(max(0.0, next_at - time.monotonic()))

        t = threading.Thread(target=reader)
        t.start()
        b = ingest([106, 107])
        stop.set()
        t.join()
        rows = 2 * n
        print("A ingest, no reader: %.0f rows/s" % (rows / a))
        print("B ingest, attention list every 250 ms: %.0f rows/s; ratio B/A %.2f (target >= 0.9)" % (rows / b, a / b))
        print("  GET /v1/attention?limit=50 during B: " + show(during))
    finally:
        proc.terminate()
        proc.wait(timeout=600)
        shutil.rmtree(work, ignore_errors=True)


if __name__ == "__main__":
    main()
