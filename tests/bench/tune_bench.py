#!/usr/bin/python3
"""Tune benchmark: `forewarden tune` over SERIES x PERIODS invented weekly actuals with a grid of
seven smoothing constants (tests/bench/tune.yaml, tune_grid.yaml), against statsmodels fitting the
same grid per series (SimpleExpSmoothing, the same start, no optimisation) on a subset, scaled
to all series, in the same run. Before timing, the two are checked to give the same mean
absolute error on the subset for every constant.

  tune_bench.py --binary build/release/daemon/forewarden [--series 100000] [--periods 104]
                [--subset 200] [--work DIR]

Prints a Markdown table: seconds, candidate-actuals per second and the ratio to statsmodels.
"""
import argparse
import csv
import os
import re
import subprocess
import sys
import tempfile
import time
import warnings

HERE = os.path.dirname(os.path.abspath(__file__))
ALPHAS = [0.05, 0.1, 0.15, 0.2, 0.3, 0.4, 0.5]
START, WARMUP = 8, 26  # tune.yaml: start from the mean of the first 8 weeks, signals from the 27th forecast


def tune(binary, feed, work, threads=None):
    res = os.path.join(work, "results.csv")
    cmd = [binary, "tune", "--config", os.path.join(HERE, "tune.yaml"), "--input", feed,
           "--grid", os.path.join(HERE, "tune_grid.yaml"), "--results", res]
    if threads:
        cmd += ["--threads", str(threads)]
    t0 = time.perf_counter()
    p = subprocess.run(cmd, check=True, capture_output=True, text=True)
    wall = time.perf_counter() - t0
    m = re.search(r"limits derived in ([0-9.]+) s, evaluated in ([0-9.]+) s", p.stderr)
    with open(res) as f:
        rows = {float(r["alpha"]): r for r in csv.DictReader(f)}
    return wall, float(m.group(1)), float(m.group(2)), rows


def statsmodels_grid(series):
    """Every alpha of the grid fitted per series; returns (seconds, {alpha: pooled MAE})."""
    from statsmodels.tsa.holtwinters import SimpleExpSmoothing
    warnings.simplefilter("ignore")
    sums = {a: [0.0, 0] for a in ALPHAS}
    t0 = time.perf_counter()
    for y in series:
        level = sum(y[:START]) / START
        rest = y[START:]
        for a in ALPHAS:
            fit = SimpleExpSmoothing(rest, initialization_method="known", initial_level=level).fit(
                smoothing_level=a, optimized=False)
            err = (rest - fit.fittedvalues)[WARMUP:]
            sums[a][0] += float(abs(err).sum())
            sums[a][1] += len(err)
    return time.perf_counter() - t0, {a: s / n for a, (s, n) in sums.items()}


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--binary", required=True)
    ap.add_argument("--series", type=int, default=100000)
    ap.add_argument("--periods", type=int, default=104)
    ap.add_argument("--subset", type=int, default=200)
    ap.add_argument("--work")
    a = ap.parse_args()
    import numpy as np
    work = a.work or tempfile.mkdtemp(prefix="forewarden-tune-bench-")
    feed = os.path.join(work, "feed.csv")
    subprocess.run([a.binary, "simulate", "--series", str(a.series), "--periods", str(a.periods),
                    "--seed", "3", "--intermittent-share", "0", "--seasonal-share", "0",
                    "--level-min", "20", "--output", feed], check=True)
    # The subset: the first series of the feed, as their own file and as arrays.
    values = {}
    with open(feed) as f:
        next(f)
        for line in f:
            key, _, v = line.rstrip("\n").split(",")
            if key in values or len(values) < a.subset:
                values.setdefault(key, []).append(float(v))
    sub = os.path.join(work, "subset.csv")
    with open(feed) as f, open(sub, "w") as out:
        out.write(next(f))
        for line in f:
            if line.split(",", 1)[0] in values:
                out.write(line)
    series = [np.array(v) for v in values.values()]
    # Same figures first: pooled MAE on the subset, per alpha.
    _, _, _, rows = tune(a.binary, sub, work)
    sm_seconds, sm_mae = statsmodels_grid(series)
    for alpha in ALPHAS:
        ours = float(rows[alpha]["mae"])
        if abs(ours - sm_mae[alpha]) > 1e-9 * max(1.0, sm_mae[alpha]):
            print("MAE differs at alpha %g: tune %.12g, statsmodels %.12g" % (alpha, ours, sm_mae[alpha]))
            return 1
    # Timed: the whole history on every core, then one thread.
    wall, limits, evaluate, _ = tune(a.binary, feed, work)
    wall1, limits1, evaluate1, _ = tune(a.binary, feed, work, threads=1)
    work_units = a.series * a.periods * len(ALPHAS)
    sm_scaled = sm_seconds * a.series / a.subset
    print("tune over %d series x %d weeks x %d constants = %.1f M candidate-actuals "
          "(MAE equal to statsmodels' on %d series for every constant)\n"
          % (a.series, a.periods, len(ALPHAS), work_units / 1e6, a.subset))
    print("| contender | seconds | candidate-actuals/s | statsmodels' time / this |")
    print("|---|---|---|---|")
    print("| tune, 2 threads: evaluation | %.2f | %.1f M | %.0f |" % (evaluate, work_units / evaluate / 1e6, sm_scaled / evaluate))
    print("| tune, 2 threads: whole command (read, limits, evaluation, outputs) | %.2f | %.1f M | %.0f |" % (wall, work_units / wall / 1e6, sm_scaled / wall))
    print("| tune, 1 thread: evaluation | %.2f | %.1f M | %.0f |" % (evaluate1, work_units / evaluate1 / 1e6, sm_scaled / evaluate1))
    print("| tune, 1 thread: whole command | %.2f | %.1f M | %.0f |" % (wall1, work_units / wall1 / 1e6, sm_scaled / wall1))
    print("| statsmodels SimpleExpSmoothing per series and constant (%d series, scaled) | %.1f | %.2f M | 1 |"
          % (a.subset, sm_scaled, work_units / sm_scaled / 1e6))
    print("\nlimits derived (calibration of 3 rules x 7 constants): %.2f s of the whole command" % limits)
    ok = work_units / evaluate >= 10e6 and sm_scaled / wall >= 100
    print("target (>= 10 M candidate-actuals/s; >= 100 x statsmodels): %s" % ("met" if ok else "NOT met"))
    return 0


if __name__ == "__main__":
    sys.exit(main())
