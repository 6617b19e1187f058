#!/usr/bin/python3
"""Export benchmark driver (called by export_bench.sh): how long does the forecast export of every
series take, and does it pause ingest?

In one run with N series (default 1,000,000), each holding 4 weeks of actuals:
  A. ingest of two more periods for every series (CSV batches of 5,000 rows, 2 connections) with
     nothing else running;
  B. `forewarden export --out FILE --horizon 13` alone (the real client, written to disk and
     renamed), then the same export with curl writing to /dev/null (the service's share);
  C. the ingest of the next two periods while `forewarden export` runs again, back to back, for
     the whole ingest;
reports the export's seconds and rows a second (target: 1,000,000 series x 13 periods in at most
10 s), its rows checked against N x 13, and the ingest rate during C against A.

usage: export_bench.py BINARY WORK_DIR [SERIES]"""
import os
import subprocess
import sys
import threading
import time

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
from read_bench import PERIODS, batches, post_all, start_service  # noqa: E402

HORIZON = 13


def export(binary, port, out):
    t0 = time.monotonic()
    subprocess.run([binary, "export", "--url", "http://127.0.0.1:%d" % port, "--out", out,
                    "--horizon", str(HORIZON)], check=True, capture_output=True)
    seconds = time.monotonic() - t0
    with open(out, "rb") as f:
        rows = sum(1 for _ in f) - 1
    return seconds, rows


def main():
    binary, work = sys.argv[1], sys.argv[2]
    n = int(sys.argv[3]) if len(sys.argv) > 3 else 1000000
    proc, port = start_service(binary, work, n)
    out = os.path.join(work, "forecasts.csv")
    try:
        for period in PERIODS[:4]:
            post_all(port, batches(n, period, lambda i: 10 + i % 7))
        rows = 2 * n
        a = sum(post_all(port, batches(n, p, lambda i: 10 + i % 7)) for p in PERIODS[4:6])
        alone, count = export(binary, port, out)
        if count != n * HORIZON:
            raise SystemExit("export wrote %d rows, expected %d" % (count, n * HORIZON))
        t0 = time.monotonic()
        subprocess.run(["curl", "-sS", "-o", "/dev/null", "--fail",
                        "http://127.0.0.1:%d/v1/forecasts?horizon=%d" % (port, HORIZON)], check=True)
        curl = time.monotonic() - t0
        stop = threading.Event()
        during = []

        def exporter():
            while not stop.is_set():
                during.append(export(binary, port, out)[0])

        t = threading.Thread(target=exporter)
        t.start()
        c = sum(post_all(port, batches(n, p, lambda i: 10 + i % 7)) for p in PERIODS[6:8])
        stop.set()
        t.join()
        size = os.path.getsize(out)
        print("series: %d, horizon %d: %d rows, %.0f MB of CSV" % (n, HORIZON, count, size / 1e6))
        print("| measure | figure |")
        print("|---|---|")
        print("| `forewarden export` to a file, no ingest | %.2f s (%.2f M rows/s) |" % (alone, count / alone / 1e6))
        print("| the same export read by curl into /dev/null | %.2f s |" % curl)
        print("| `forewarden export` while ingest runs (median of %d) | %.2f s |"
              % (len(during), sorted(during)[len(during) // 2]))
        print("| ingest alone | %.0f rows/s |" % (rows / a))
        print("| ingest while exports run back to back | %.0f rows/s (%.2f of alone) |" % (rows / c, a / c))
        ok = alone <= 10.0 and max(during) <= 10.0
        print("target (1,000,000 x 13 in at most 10 s, with ingest continuing): %s" % ("met" if ok else "NOT met"))
    finally:
        proc.terminate()
        proc.wait(timeout=600)
        if os.path.exists(out):
            os.remove(out)


if __name__ == "__main__":
    main()
