#!/usr/bin/python3
"""Scores the demo's alerts against the demo's truth file, per policy: the alerts the service
would raise on the demo feed (`forewarden replay --alerts`, the service's own step and rules),
each counted as true (opened within 13 periods from its series' injected change) or false
(opened before the change, or on a series without one), the changes missed (no alert within
13 periods), the median delay of the caught ones, and the false alerts the settings' budgets
lead one to expect (each calibrated rule's periods watched before a change / false_alert_every).

  demo_score.py --binary build/release/daemon/forewarden [--config config/demo.yaml]
                [--series 2000] [--periods 156] [--seed 20261201] [--markdown]

The feed is the one deploy/demo.sh invents (same seed and size). Series are matched to policies
with the key globs that `check-config` prints (the demo's policies have no label conditions).
Deterministic for a seed."""
import argparse
import collections
import csv
import datetime
import fnmatch
import os
import re
import statistics
import subprocess
import sys
import tempfile

WINDOW = 13


def week(text):
    return (datetime.date.fromisoformat(text) - datetime.date(1970, 1, 5)).days // 7


def policies_of(binary, config):
    """[(name, key glob, warm periods, [(rule, every)])] from check-config's summary."""
    out = subprocess.run([binary, "check-config", config], check=True, capture_output=True,
                         text=True).stdout
    pols = []
    for line in out.splitlines():
        m = re.match(r"  (\S+): match ([^ ,]+)(.*)$", line)
        if m:
            rest = m.group(3)
            if re.search(r" \S+=\S+", rest.split(",")[0]):
                raise SystemExit("policy %s matches on labels; this script matches keys only" % m.group(1))
            warm = int(re.search(r"warmup (\d+)", rest).group(1))
            start = re.search(r"start (mean of first|fitted on first) (\d+)", rest)
            warm += int(start.group(2)) if start else 1
            pols.append([m.group(1), m.group(2), warm, []])
            continue
        m = re.match(r"      limit derived for one false alert per (\S+) periods", line)
        if m and pols:
            pols[-1][3].append(float(m.group(1)))
    return pols


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--binary", required=True)
    ap.add_argument("--config", default=os.path.join(os.path.dirname(__file__), "../../config/demo.yaml"))
    ap.add_argument("--series", type=int, default=2000)
    ap.add_argument("--periods", type=int, default=156)
    ap.add_argument("--seed", type=int, default=20261201)
    a = ap.parse_args()
    work = tempfile.mkdtemp(prefix="forewarden-demo-score-")
    feed, truth_file, alerts = (os.path.join(work, n) for n in ("feed.csv", "truth.csv", "alerts.csv"))
    subprocess.run([a.binary, "simulate", "--series", str(a.series), "--periods", str(a.periods),
                    "--seed", str(a.seed), "--start", "2024-01-01", "--output", feed,
                    "--truth", truth_file], check=True)
    subprocess.run([a.binary, "replay", "--config", a.config, "--input", feed, "--output",
                    os.devnull, "--alerts", alerts], check=True, capture_output=True)
    pols = policies_of(a.binary, a.config)
    first = week("2024-01-01")
    periods = collections.Counter()
    with open(feed) as f:
        next(f)
        for line in f:
            periods[line.split(",", 1)[0]] += 1
    truth = {}
    with open(truth_file) as f:
        for r in csv.DictReader(f):
            truth[r["series"]] = week(r["period"]) - first
    opened = collections.defaultdict(list)
    with open(alerts) as f:
        for r in csv.DictReader(f):
            opened[r["series"]].append(week(r["opened"]) - first)
    stats = {p[0]: collections.Counter() for p in pols}
    delays = collections.defaultdict(list)
    for key, n in periods.items():
        pol = next(p for p in pols if fnmatch.fnmatchcase(key, p[1]))
        s = stats[pol[0]]
        s["series"] += 1
        change = truth.get(key)
        watched = max(0, (change if change is not None else n) - pol[2])
        s["expected"] += sum(watched / every for every in pol[3])
        times = sorted(opened.get(key, []))
        s["alerts"] += len(times)
        if change is None:
            s["false"] += len(times)
            continue
        s["changes"] += 1
        s["false"] += sum(1 for t in times if t < change)
        hit = [t - change for t in times if change <= t <= change + WINDOW]
        if hit:
            s["caught"] += 1
            delays[pol[0]].append(hit[0])
        else:
            s["missed"] += 1
        s["true"] += len(hit)
        s["late"] += sum(1 for t in times if t > change + WINDOW)
    print("| policy | series | alerts | true | false | false expected from the budgets | after the 13-period window | changes | caught | missed | median delay |")
    print("|---|---|---|---|---|---|---|---|---|---|---|")
    total = collections.Counter()
    for name, _, _, _ in pols:
        s = stats[name]
        total.update(s)
        d = delays[name]
        print("| %s | %d | %d | %d | %d | %.1f | %d | %d | %d | %d | %s |" % (
            name, s["series"], s["alerts"], s["true"], s["false"], s["expected"], s["late"],
            s["changes"], s["caught"], s["missed"], "%g" % statistics.median(d) if d else "-"))
    d = [x for v in delays.values() for x in v]
    print("| all | %d | %d | %d | %d | %.1f | %d | %d | %d | %d | %s |" % (
        total["series"], total["alerts"], total["true"], total["false"], total["expected"],
        total["late"], total["changes"], total["caught"], total["missed"],
        "%g" % statistics.median(d) if d else "-"))
    return 0


if __name__ == "__main__":
    sys.exit(main())
