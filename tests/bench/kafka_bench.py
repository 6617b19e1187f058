#!/usr/bin/python3
"""Kafka ingest benchmark driver (called by kafka_bench.sh). In one run, on the same machine,
the same invented rows (`forewarden simulate`, seed 5) into a fresh `forewarden serve`
(synchronous=FULL, the same policy), timed from the first row to the last committed:

1. over HTTP: CSV batches of 5,000 rows from 2 client connections (as ingest_bench.py);
2. through Kafka: the rows produced beforehand, one message a row keyed by series, to a
   12-partition topic of librdkafka's mock cluster (tests/kafka/kafka_mock.cpp, 3 brokers in one
   process on loopback), then consumed by the service (kafka.batch_rows 5,000), until every
   partition's offset is stored.

3. through Kafka with a changelog (kafka.changelog_topic: the instance shares its series and
   writes every series changed after each commit), the same rows;
4. the restore: that instance stops (SIGTERM hands its partitions back) and a fresh instance
   with an empty store joins the group and restores every partition from the changelog, timed
   by its forewarden_changelog_restore_seconds_total; and the changelog's size per series (the
   newest record of each series, as a compacted topic keeps it).

Reports rows per second of each and their ratios. The mock cluster shares the 2 cores with the
service (a real cluster would not), so the Kafka figures are floors. It does not compact either:
the restore reads a copy of the changelog as compaction leaves it (the newest record of each key,
to a topic of its own), one record a series.

usage: kafka_bench.py BUILD_DIR WORK_DIR SERIES WEEKS
"""
import http.client
import os
import re
import shutil
import sqlite3
import subprocess
import sys
import time
import urllib.request

BATCH = 5000
POLICY = ("policies:\n  - {name: bench, match: '*', period: week, alpha: 0.2, warmup: 4,\n"
          "     rules: [{name: drift, signal: trigg, limit: 0.6, clear: 0.4, persistence: 2}]}\n")


def serve(binary, work, name, extra=""):
    d = os.path.join(work, name)
    shutil.rmtree(d, ignore_errors=True)
    os.makedirs(d)
    cfg = os.path.join(d, "settings.yaml")
    with open(cfg, "w") as f:
        f.write("server: {synchronous: full, queue_depth: 256, max_rows_per_batch: 10000}\n"
                "alerts: {sinks: []}\n" + POLICY + extra)
    log = open(os.path.join(d, "serve.log"), "w")
    proc = subprocess.Popen([binary, "serve", "--config", cfg, "--listen", "127.0.0.1:0", "--data",
                             os.path.join(d, "data")], stdout=subprocess.PIPE, stderr=log,
                            text=True)
    port = int(proc.stdout.readline().rsplit(":", 1)[1])
    return proc, port, os.path.join(d, "data")


def http_rows_per_second(binary, work, header, rows):
    proc, port, _ = serve(binary, work, "http")
    batches = [header + "".join(rows[i:i + BATCH]) for i in range(0, len(rows), BATCH)]
    # one connection: the rows are written week by week and a series' weeks must stay in order
    conn = http.client.HTTPConnection("127.0.0.1", port, timeout=600)

    def client():
        for body in batches:
            conn.request("POST", "/v1/actuals", body, {"Content-Type": "text/csv"})
            r = conn.getresponse()
            data = r.read()
            if r.status != 200:
                raise SystemExit("HTTP %d: %s" % (r.status, data[:300]))

    t0 = time.monotonic()
    client()
    seconds = time.monotonic() - t0
    proc.terminate()
    proc.wait()
    return len(rows) / seconds, seconds


def metric(port, name):
    with urllib.request.urlopen("http://127.0.0.1:%d/metrics" % port, timeout=60) as r:
        text = r.read().decode()
    m = re.search(r"^%s(?:\{\})? ([0-9.e+]+)$" % re.escape(name), text, re.M)
    return float(m.group(1)) if m else 0.0


def kafka_rows_per_second(binary, mock, work, rows, changelog=False):
    cluster = subprocess.Popen([mock, "--brokers", "3", "--topic", "actuals:12", "--topic", "changelog:12",
                                "--topic", "compacted:12"],
                               stdin=subprocess.PIPE, stdout=subprocess.PIPE, stderr=subprocess.DEVNULL, text=True)
    try:
        bootstrap = cluster.stdout.readline().split()[1]
        path = os.path.join(work, "messages.txt")
        with open(path, "w") as f:
            for r in rows:
                f.write(r.split(",", 1)[0] + "\t" + r)
        cluster.stdin.write("produce actuals %s\n" % path)
        cluster.stdin.flush()
        answer = cluster.stdout.readline()
        assert answer.startswith("ok"), answer
        extra = ("kafka: {brokers: '%s', topics: [actuals], group: bench, batch_rows: %d, batch_ms: 100%s}\n"
                 % (bootstrap, BATCH, ", changelog_topic: changelog, partitioner: crc32" if changelog else ""))
        proc, port, data = serve(binary, work, "shared" if changelog else "kafka", extra)
        # timed from the first rows committed (the group's join is not ingest) to the last
        first = 0.0
        while True:
            done = metric(port, "forewarden_kafka_rows_total")
            now = time.monotonic()
            if done > 0 and not first:
                first, first_rows = now, done
            if done >= len(rows):
                break
            if proc.poll() is not None:
                raise SystemExit("the service stopped")
            time.sleep(0.02)  # polling for progress
        seconds = now - first
        db = sqlite3.connect(os.path.join(data, "forewarden.db"))
        stored = sum(n for (n,) in db.execute("SELECT next_offset FROM source_offsets"))
        db.close()
        assert stored == len(rows), (stored, len(rows))
        restore = None
        if changelog:
            written = metric(port, "forewarden_changelog_bytes_total")
            records = metric(port, "forewarden_changelog_records_total")
            proc.terminate()  # hands its partitions back; what it wrote is in the changelog
            proc.wait()
            # the changelog as a compacted topic keeps it: the newest record of each key
            out = os.path.join(work, "changelog.txt")
            cluster.stdin.write("consume changelog %s\n" % out)
            cluster.stdin.flush()
            assert cluster.stdout.readline().startswith("ok")
            newest = {}
            with open(out, encoding="utf-8", errors="surrogateescape") as f:
                for line in f:
                    part, _, key, value = line.rstrip("\n").split("\t", 3)
                    newest[(part, key)] = value  # escaped as the mock program writes it
            series = sum(1 for (_, k) in newest if not k.startswith("\x01"))
            unescape = lambda v: re.sub(r"\\(.)", lambda m: "\n" if m.group(1) == "n" else m.group(1), v)
            compacted = sum(len(k) + len(unescape(v)) for (_, k), v in newest.items())
            # what one more retained actual adds to a series record ([period,value] pairs)
            import json
            pairs = [json.loads(unescape(v))["actuals"] for (_, k), v in newest.items()
                     if not k.startswith("\x01")]
            per_actual = (sum(len(json.dumps(a, separators=(",", ":"))) for a in pairs)
                          / max(1, sum(len(a) for a in pairs)))
            # what compaction would leave, to a topic of its own: the restore below reads that
            kept = os.path.join(work, "compacted.txt")
            with open(kept, "w", encoding="utf-8", errors="surrogateescape") as f:
                for (part, key), value in newest.items():
                    f.write("%s\t%s\t%s\n" % (part, key, value))
            cluster.stdin.write("produce-to compacted %s\n" % kept)
            cluster.stdin.flush()
            assert cluster.stdout.readline().startswith("ok")
            extra = extra.replace("changelog_topic: changelog", "changelog_topic: compacted")
            # a fresh instance restores every partition
            proc, port, data = serve(binary, work, "restore", extra)
            while metric(port, "forewarden_changelog_restores_total") < 12:
                if proc.poll() is not None:
                    raise SystemExit("the service stopped")
                time.sleep(0.05)  # polling for progress
            restore = {"seconds": metric(port, "forewarden_changelog_restore_seconds_total"),
                       "series": metric(port, "forewarden_changelog_restored_series_total"),
                       "read": metric(port, "forewarden_changelog_restore_bytes_total"),
                       "written": written, "records": records, "kept_series": series,
                       "compacted": compacted, "per_actual": per_actual,
                       "retained": sum(len(a) for a in pairs) / max(1, len(pairs))}
        proc.terminate()
        proc.wait()
        return (len(rows) - first_rows) / seconds, seconds, first_rows, restore
    finally:
        cluster.stdin.write("quit\n")
        cluster.stdin.flush()
        cluster.wait(timeout=60)


def main():
    build, work, series, weeks = sys.argv[1], sys.argv[2], int(sys.argv[3]), int(sys.argv[4])
    binary = os.path.join(build, "daemon", "forewarden")
    mock = os.path.join(build, "tests", "forewarden_kafka_mock")
    feed = os.path.join(work, "feed.csv")
    subprocess.run([binary, "simulate", "--series", str(series), "--periods", str(weeks), "--seed", "5",
                    "--output", feed], check=True, capture_output=True)
    with open(feed) as f:
        header = f.readline()
        rows = f.readlines()
    http_rate, http_s = http_rows_per_second(binary, work, header, rows)
    kafka_rate, kafka_s, start_s, _ = kafka_rows_per_second(binary, mock, work, rows)
    shared_rate, shared_s, shared_start, restore = kafka_rows_per_second(binary, mock, work, rows, True)
    print("| path | rows | seconds | rows per second |")
    print("|---|---|---|---|")
    print("| HTTP, CSV batches of %d rows, 1 connection | %d | %.2f | %.0f |" % (BATCH, len(rows), http_s, http_rate))
    print("| Kafka, 1 message a row, 12 partitions, mock cluster | %d | %.2f | %.0f |" % (len(rows) - start_s, kafka_s, kafka_rate))
    print("| Kafka with a changelog (sharing series) | %d | %.2f | %.0f |" % (len(rows) - shared_start, shared_s, shared_rate))
    print("\nKafka / HTTP: %.2f (Kafka timed from its first committed batch, %d rows, to the last)"
          % (kafka_rate / http_rate, start_s))
    print("Kafka with a changelog / Kafka: %.2f" % (shared_rate / kafka_rate))
    r = restore
    print("\nchangelog written: %d records, %.1f MB before compression (%.0f bytes a record)"
          % (r["records"], r["written"] / 1e6, r["written"] / max(1, r["records"])))
    print("changelog compacted (newest record per key): %d series, %.0f bytes a series with %.1f "
          "retained actuals; %.1f bytes a retained actual"
          % (r["kept_series"], r["compacted"] / max(1, r["kept_series"]), r["retained"], r["per_actual"]))
    print("restore of 12 partitions by a fresh instance from the compacted changelog: %d series "
          "in %.2f s, %.1f MB read; %.2f s per 100,000 series"
          % (r["series"], r["seconds"], r["read"] / 1e6, r["seconds"] / max(1, r["series"]) * 1e5))


if __name__ == "__main__":
    main()
