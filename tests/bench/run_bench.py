#!/usr/bin/python3
"""Replay benchmark driver (called by replay_bench.sh). Times every contender in the same run
on the same files, with /usr/bin/time for elapsed seconds and peak resident memory, and prints
figures as ratios against the baselines, since these machines are noisy.

usage: run_bench.py BUILD_DIR WORK_DIR SERIES PERIODS
"""
import csv
import math
import os
import statistics
import subprocess
import sys

HERE = os.path.dirname(os.path.abspath(__file__))
PY = "/usr/bin/python3"


def timed(cmd, stdout=subprocess.DEVNULL):
    """Runs cmd; returns (seconds, peak RSS in MB, stderr text)."""
    r = subprocess.run(["/usr/bin/time", "-f", "@@ %e %M"] + cmd, stdout=stdout,
                       stderr=subprocess.PIPE, text=True, check=True)
    line = [l for l in r.stderr.splitlines() if l.startswith("@@ ")][-1]
    _, sec, rss = line.split()
    return float(sec), int(rss) / 1024.0, r.stderr


def fresh(path):
    """Removes an old output and flushes dirty pages, so every write starts from the same state."""
    if os.path.exists(path):
        os.remove(path)
    subprocess.run(["sync"], check=True)


def compare_sample(ours, theirs, rows=200000):
    """Checks that the NumPy baseline computes the same numbers (first `rows` rows)."""
    with open(ours) as a, open(theirs) as b:
        ra, rb = csv.reader(a), csv.reader(b)
        assert next(ra) == next(rb), "headers differ"
        for i, (x, y) in enumerate(zip(ra, rb)):
            if i >= rows:
                break
            for j, (u, v) in enumerate(zip(x, y)):
                if u == v:
                    continue
                try:
                    fu, fv = float(u), float(v)
                except ValueError:
                    raise SystemExit("row %d column %d: %r vs %r" % (i + 2, j, u, v))
                if abs(fu - fv) > 1e-9 * max(1.0, abs(fv)):
                    raise SystemExit("row %d column %d: %r vs %r" % (i + 2, j, u, v))
    return rows


def main(build, work, series, periods):
    binary = os.path.join(build, "daemon", "forewarden")
    split = os.path.join(build, "tests", "bench", "forewarden_bench_csv")
    cfg = os.path.join(HERE, "bench.yaml")
    feed = os.path.join(work, "feed.csv")
    out = os.path.join(work, "replay.csv")
    actuals = series * periods
    print("feed: %d series x %d weeks = %d actuals, %.0f MB" %
          (series, periods, actuals, os.path.getsize(feed) / 1e6))

    a_sec, a_rss, _ = timed([split, feed])
    runs = []
    for _ in range(5):
        fresh(out)
        runs.append(timed([binary, "replay", "--config", cfg, "--input", feed, "--output", out]))
    r_sec = statistics.median(r[0] for r in runs)
    r_rss = max(r[1] for r in runs)
    out_mb = os.path.getsize(out) / 1e6
    n_sec, _, _ = timed([binary, "replay", "--config", cfg, "--input", feed, "--output", "/dev/null"])

    # memory grows with series, not rows: half the periods, then half the series
    half_p = os.path.join(work, "feed-half-periods.csv")
    half_s = os.path.join(work, "feed-half-series.csv")
    subprocess.run([binary, "simulate", "--series", str(series), "--periods", str(periods // 2),
                    "--seed", "1", "--output", half_p], check=True)
    subprocess.run([binary, "simulate", "--series", str(series // 2), "--periods", str(periods),
                    "--seed", "1", "--output", half_s], check=True)
    _, rss_hp, _ = timed([binary, "replay", "--config", cfg, "--input", half_p, "--output", "/dev/null"])
    _, rss_hs, _ = timed([binary, "replay", "--config", cfg, "--input", half_s, "--output", "/dev/null"])

    np_out = os.path.join(work, "numpy.csv")
    fresh(np_out)
    b_sec, b_rss, _ = timed([PY, os.path.join(HERE, "numpy_replay.py"), feed, np_out])
    checked = compare_sample(out, np_out)

    sm_series = 300
    r = subprocess.run([PY, os.path.join(HERE, "statsmodels_ses.py"), feed, str(sm_series)],
                       capture_output=True, text=True, check=True)
    sm_actuals, sm_sec = r.stdout.split()
    sm_rate = int(sm_actuals) / float(sm_sec)

    rate = actuals / r_sec
    print()
    print("| contender | seconds | actuals/s | peak RSS MB | seconds / replay's |")
    print("|---|---|---|---|---|")
    print("| forewarden replay, with output (%.0f MB), median of 5 | %.2f | %.2f M | %.0f | 1.00 |" %
          (out_mb, r_sec, rate / 1e6, r_rss))
    print("| forewarden replay, output to /dev/null | %.2f | %.2f M | | %.2f |" %
          (n_sec, actuals / n_sec / 1e6, n_sec / r_sec))
    print("| (a) read and split the CSV only | %.2f | %.2f M | %.0f | %.3f |" %
          (a_sec, actuals / a_sec / 1e6, a_rss, a_sec / r_sec))
    print("| (b) NumPy/pandas, same columns | %.2f | %.2f M | %.0f | %.1f |" %
          (b_sec, actuals / b_sec / 1e6, b_rss, b_sec / r_sec))
    print("| (c) statsmodels SimpleExpSmoothing per series, forecasts only (%d series, scaled) | %.1f | %.3f M | | %.1f |" %
          (sm_series, actuals / sm_rate, sm_rate / 1e6, rate / sm_rate))
    print()
    print("memory: peak RSS %.0f MB for %d series x %d periods, %.0f MB for x %d periods, "
          "%.0f MB for %d series x %d periods" %
          (r_rss, series, periods, rss_hp, periods // 2, rss_hs, series // 2, periods))
    print("NumPy baseline agrees with replay on the first %d rows (relative 1e-9)" % checked)
    print("targets: >= 2 M actuals/s with output: %s; >= 10x NumPy: %s; within 3x of (a): %s" %
          ("met" if rate >= 2e6 else "NOT met", "met" if b_sec / r_sec >= 10 else "NOT met",
           "met" if r_sec / a_sec <= 3 else "NOT met"))


if __name__ == "__main__":
    main(sys.argv[1], sys.argv[2], int(sys.argv[3]), int(sys.argv[4]))
