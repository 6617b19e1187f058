#!/usr/bin/python3
"""Ingest benchmark driver (called by ingest_bench.sh). In one run, on the same machine:

1. durable ingest over HTTP: `forewarden serve` (synchronous=FULL) fed CSV batches of 5,000
   rows from 2 client connections, against a raw SQLite batched insert of the same rows
   (forewarden_bench_sqlite, same batch size and durability): ratio, target >= 0.4;
2. acknowledgement latency p50/p99 with the load paced at half of the throughput measured in 1;
3. resident memory per series after N series (default 1,000,000), beyond the process before
   ingest and SQLite's page cache, target <= 300 bytes; restart time with them, target <= 3 s.

usage: ingest_bench.py BUILD_DIR WORK_DIR SERIES_FOR_THROUGHPUT WEEKS SERIES_FOR_MEMORY
"""
import http.client
import os
import shutil
import statistics
import subprocess
import sys
import threading
import time

BATCH = 5000
PAGE_CACHE = 64 << 20  # server.cache_bytes (the default): subtracted from resident memory


def run(cmd, **kw):
    return subprocess.run(cmd, check=True, capture_output=True, text=True, **kw)


def batches_of(path):
    with open(path) as f:
        header = f.readline()
        rows = f.readlines()
    return header, [header + "".join(rows[i:i + BATCH]) for i in range(0, len(rows), BATCH)], len(rows)


class Service:
    def __init__(self, binary, work, name):
        self.binary, self.dir = binary, os.path.join(work, name)
        shutil.rmtree(self.dir, ignore_errors=True)
        os.makedirs(self.dir)
        self.config = os.path.join(self.dir, "settings.yaml")
        with open(self.config, "w") as f:
            f.write("server: {synchronous: full, queue_depth: 256, max_rows_per_batch: 10000,"
                    " cache_bytes: %d}\n" % PAGE_CACHE +
                    "policies:\n  - {name: bench, match: '*', period: week, alpha: 0.2, warmup: 4,\n"
                    "     rules: [{name: drift, signal: trigg, limit: 0.6, clear: 0.4, persistence: 2}]}\n")
        self.start()

    def start(self):
        t0 = time.monotonic()
        self.proc = subprocess.Popen([self.binary, "serve", "--config", self.config, "--listen",
                                      "127.0.0.1:0", "--data", os.path.join(self.dir, "data")],
                                     stdout=subprocess.PIPE, stderr=subprocess.DEVNULL, text=True)
        line = self.proc.stdout.readline()
        self.start_seconds = time.monotonic() - t0
        self.port = int(line.rsplit(":", 1)[1])

    def rss_bytes(self):
        with open("/proc/%d/status" % self.proc.pid) as f:
            for line in f:
                if line.startswith("VmRSS:"):
                    return int(line.split()[1]) * 1024
        return 0

    def stop(self):
        self.proc.terminate()
        self.proc.wait()


def post(conn, body):
    t0 = time.monotonic()
    conn.request("POST", "/v1/actuals", body, {"Content-Type": "text/csv"})
    r = conn.getresponse()
    data = r.read()
    if r.status != 200:
        raise SystemExit("HTTP %d: %s" % (r.status, data[:300]))
    return time.monotonic() - t0


def push(port, batches, pace=None):
    """Sends batches over 2 connections (batch i on connection i % 2, so each connection keeps
    its own series in order). With pace (seconds between batches overall), open loop."""
    latencies = [[], []]
    t_start = time.monotonic()

    def worker(k):
        conn = http.client.HTTPConnection("127.0.0.1", port, timeout=300)
        for i in range(k, len(batches), 2):
            if pace:
                due = t_start + i * pace
                delay = due - time.monotonic()
                if delay > 0:
                    time.sleep(delay)  # pacing the offered load, not synchronising
            latencies[k].append(post(conn, batches[i]))
        conn.close()

    threads = [threading.Thread(target=worker, args=(k,)) for k in range(2)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    return time.monotonic() - t_start, latencies[0] + latencies[1]


def pct(values, p):
    v = sorted(values)
    return v[min(len(v) - 1, int(round(p / 100.0 * (len(v) - 1))))]


def main(build, work, series, weeks, memory_series):
    binary = os.path.join(build, "daemon", "forewarden")
    sqlite_bench = os.path.join(build, "tests", "bench", "forewarden_bench_sqlite")
    os.makedirs(work, exist_ok=True)
    feed = os.path.join(work, "ingest-feed.csv")
    run([binary, "simulate", "--series", str(series), "--periods", str(2 * weeks), "--seed", "3",
         "--output", feed])
    header, batches, nrows = batches_of(feed)
    first, second = batches[:len(batches) // 2], batches[len(batches) // 2:]
    rows_first = sum(b.count("\n") - 1 for b in first)

    # 1. raw SQLite baseline on the first half's rows
    half_feed = os.path.join(work, "ingest-first-half.csv")
    with open(half_feed, "w") as f:
        f.write(header + "".join(b.split("\n", 1)[1] for b in first))
    db = os.path.join(work, "baseline.db")
    for p in (db, db + "-wal", db + "-shm"):
        if os.path.exists(p):
            os.remove(p)
    out = run([sqlite_bench, half_feed, db, str(BATCH)]).stdout.split()
    base_rate = int(out[0]) / float(out[1])

    svc = Service(binary, work, "throughput")
    seconds, _ = push(svc.port, first)
    rate = rows_first / seconds

    # 2. latency at half the measured throughput, on the second half of the periods
    pace = (BATCH / (rate / 2.0))
    seconds2, lat = push(svc.port, second, pace=pace)
    svc.stop()

    # 3. memory per series and restart time
    mem_feed = os.path.join(work, "ingest-memory.csv")
    run([binary, "simulate", "--series", str(memory_series), "--periods", "2", "--seed", "4",
         "--output", mem_feed])
    _, mem_batches, mem_rows = batches_of(mem_feed)
    svc = Service(binary, work, "memory")
    rss0 = svc.rss_bytes()
    push(svc.port, mem_batches)
    rss1 = svc.rss_bytes()
    svc.stop()
    svc.start()
    restart = svc.start_seconds
    rss2 = svc.rss_bytes()
    svc.stop()
    page_cache = PAGE_CACHE  # SQLite's page cache fills up to cache_bytes with a database this big
    per_series = (rss1 - rss0 - page_cache) / memory_series
    per_series_restart = (rss2 - rss0 - page_cache) / memory_series

    print("| measurement | value | target |")
    print("|---|---|---|")
    print("| raw SQLite batched insert (WAL, FULL, %d rows/txn) | %.0f rows/s | baseline |" % (BATCH, base_rate))
    print("| forewarden serve, HTTP CSV batches of %d, 2 connections, FULL | %.0f rows/s | |" % (BATCH, rate))
    print("| ratio serve / raw SQLite | %.2f | >= 0.4 |" % (rate / base_rate))
    print("| ack latency at %.0f rows/s offered (half of the above): p50 / p99 | %.1f / %.1f ms | |" %
          (rate / 2, 1000 * pct(lat, 50), 1000 * pct(lat, 99)))
    print("| resident memory per series, %d series (beyond start-up RSS and the %d MB page cache) | %.0f B (after a restart: %.0f B) | <= 300 B |" %
          (memory_series, PAGE_CACHE >> 20, per_series, per_series_restart))
    print("| restart with %d series, spawn to listening | %.2f s | <= 3 s |" % (memory_series, restart))
    print()
    print("throughput feed: %d series x %d weeks (%d rows), latency phase %d rows in %.1f s" %
          (series, weeks, rows_first, nrows - rows_first, seconds2))


if __name__ == "__main__":
    main(sys.argv[1], sys.argv[2], int(sys.argv[3]), int(sys.argv[4]), int(sys.argv[5]))
