#!/usr/bin/python3
"""False alerts by method and by age, and steps caught, under calibrated budgets: the table
issue-style targets are measured against ("every row's false alerts at most 1.5 times its budget;
at least 90 % of 3-sigma steps caught within 4 periods").

For each method (ses, holt, damped, seasonal-add, seasonal-mul, sba) it invents SERIES series of
the in-control process monitors/calibrate.h simulates for that method (seeded numpy), gives half
of them one step of 3 sigma (up or down) at a random period at least 40 periods past the
warm-up, replays them with one policy of that method whose two rules (Trigg's signal and a
4-period cumulative signal) each have a budget of one false alert per 2,000 periods (together
1 per 1,000 series-periods), and scores `replay --alerts`:
  * false alerts (opened before the series' step, or on a series without one) per 1,000
    series-periods watched, separately for the first 26 periods after the warm-up ("young") and
    for the periods after that ("older"), against the budget;
  * the share of steps caught within 4 periods (and within 13).

  age_bench.py --binary build/release/daemon/forewarden [--series 4000] [--periods 240] [--seed 5]

Deterministic for a seed. The in-control processes and the steps are invented; the budgets are
the service's own calibration (check-config shows the limits)."""
import argparse
import collections
import csv
import datetime
import os
import subprocess
import sys
import tempfile

import numpy as np

M = 13            # season length of the seasonal policies (weeks)
START = {"ses": 8, "holt": 8, "damped": 8, "seasonal-add": 2 * M, "seasonal-mul": 2 * M, "sba": 1}
WARMUP = 13
YOUNG = 26        # periods after the warm-up that count as young
BUDGET_EVERY = 2000
MONDAY = datetime.date(2020, 1, 6)


def policy(method):
    extra = {"ses": "", "holt": "    trend_beta: 0.05\n", "damped": "    trend_beta: 0.05\n    damping: 0.9\n",
             "seasonal-add": "    trend_beta: 0.05\n    season_gamma: 0.1\n    season_length: %d\n" % M,
             "seasonal-mul": "    trend_beta: 0.05\n    season_gamma: 0.1\n    season_length: %d\n" % M,
             "sba": ""}[method]
    start = "" if method == "sba" else "    start: {mean_of_first: %d}\n" % START[method]
    rules = "      - {name: drift, signal: trigg, false_alert_every: %d, clear_fraction: 0.6, resolve_after: 3}\n" % BUDGET_EVERY
    if method != "sba":
        rules += ("      - {name: shift, signal: cusum, periods: 4, false_alert_every: %d, clear_fraction: 0.6, "
                  "resolve_after: 3}\n" % BUDGET_EVERY)
    return ("policies:\n  - name: p\n    match: '*'\n    period: week\n    method: %s\n    alpha: 0.1\n%s%s"
            "    signal_beta: 0.1\n    warmup: %d\n    rules:\n%s" % (method, extra, start, WARMUP, rules))


def series_values(method, rng, periods, step_at, sign):
    z = rng.standard_normal(periods)
    j = np.arange(periods)
    if method == "sba":
        demand = rng.random(periods) < 1 / 3
        size = np.maximum(1.0, 5 + 2 * z)
        if step_at is not None:
            size[step_at:] = np.maximum(1.0, size[step_at:] + sign * 3 * 2)  # 3 sigma of the size
        return np.where(demand, np.round(size), 0.0)
    noise = 10 * z
    step = np.zeros(periods)
    if step_at is not None:
        step[step_at:] = sign * 30  # 3 sigma
    if method == "seasonal-add":
        return 100 + 15 * np.sin(2 * np.pi * j / M) + noise + step
    if method == "seasonal-mul":
        return (100 + noise + step) * (1 + 0.15 * np.sin(2 * np.pi * j / M))
    return 100 + noise + step


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--binary", required=True)
    ap.add_argument("--series", type=int, default=4000)
    ap.add_argument("--periods", type=int, default=240)
    ap.add_argument("--seed", type=int, default=5)
    a = ap.parse_args()
    work = tempfile.mkdtemp(prefix="forewarden-age-")
    budget = 1000.0 * 2 / BUDGET_EVERY
    print("| method | age | series-periods watched | false alerts per 1,000 | budget | times the budget | 3-sigma steps caught within 4 / within 13 |")
    print("|---|---|---|---|---|---|---|")
    for method in ["ses", "holt", "damped", "seasonal-add", "seasonal-mul", "sba"]:
        rng = np.random.default_rng(a.seed)
        cfg = os.path.join(work, method + ".yaml")
        with open(cfg, "w") as f:
            f.write(policy(method))
        first_watched = START[method] + WARMUP  # index of the first period rules watch (ses family)
        steps = {}
        feed = os.path.join(work, method + ".csv")
        with open(feed, "w") as f:
            f.write("series,period,value\n")
            for s in range(a.series):
                step_at = None
                sign = 1
                if s % 2 == 1:
                    step_at = int(rng.integers(first_watched + 40, a.periods - 14))
                    sign = 1 if rng.random() < 0.5 else -1
                    steps[s] = step_at
                for t, v in enumerate(series_values(method, rng, a.periods, step_at, sign)):
                    f.write("s%05d,%s,%r\n" % (s, (MONDAY + datetime.timedelta(weeks=t)).isoformat(), float(v)))
        episodes = os.path.join(work, method + ".alerts.csv")
        out = os.path.join(work, method + ".out.csv")
        subprocess.run([a.binary, "replay", "--config", cfg, "--input", feed, "--output", out,
                        "--alerts", episodes], check=True, capture_output=True)
        # the first watched period of each series: its first row with a Trigg's signal
        first = {}
        with open(out) as f:
            for i, r in enumerate(csv.DictReader(f)):
                key = r["series"]
                if key not in first and r["trigg_signal"] != "":
                    first[key] = (datetime.date.fromisoformat(r["period"]) - MONDAY).days // 7
        opened = collections.defaultdict(list)
        with open(episodes) as f:
            for r in csv.DictReader(f):
                opened[r["series"]].append((datetime.date.fromisoformat(r["opened"]) - MONDAY).days // 7)
        watched = {"young": 0, "older": 0}
        false = {"young": 0, "older": 0}
        caught4 = caught13 = 0
        for s in range(a.series):
            key = "s%05d" % s
            if key not in first:
                continue
            w0 = first[key]
            end = steps.get(s, a.periods)
            young_end = min(end, w0 + YOUNG)
            watched["young"] += max(0, young_end - w0)
            watched["older"] += max(0, end - max(w0, young_end))
            for t in opened.get(key, []):
                if t < end:
                    false["young" if t < w0 + YOUNG else "older"] += 1
            if s in steps:
                after = [t - end for t in opened.get(key, []) if end <= t <= end + 13]
                caught4 += 1 if after and min(after) <= 4 else 0
                caught13 += 1 if after else 0
        for age in ("young", "older"):
            rate = 1000.0 * false[age] / max(1, watched[age])
            print("| %s | %s | %d | %.2f | %.2f | %.1f | %s |" % (
                method, "first %d periods after warm-up" % YOUNG if age == "young" else "later",
                watched[age], rate, budget, rate / budget,
                "%.0f %% / %.0f %%" % (100.0 * caught4 / max(1, len(steps)), 100.0 * caught13 / max(1, len(steps)))
                if age == "older" else ""))
    return 0


if __name__ == "__main__":
    sys.exit(main())
