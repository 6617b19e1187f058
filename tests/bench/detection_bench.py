#!/usr/bin/python3
"""Detection quality: how early each configuration catches the changes `forewarden simulate`
injects, and how many false alerts it raises, measured with `forewarden replay --alerts` (the
service's own step and rules) against the simulation's truth file.

  detection_bench.py --binary build/release/daemon/forewarden [--series 10000] [--periods 156]
                     [--seed 11] [--configs DIR] [--markdown]

Per configuration (every *.yaml in --configs, default tests/bench/detection/):
  * detection rate within 4 periods, within 13, and the median delay (periods from the change
    to the first alert opened at or after it, within 13), for each kind of change, and for
    steps of 3 sigma or more;
  * false alerts per 1,000 series-periods: episodes opened on a series before its change (or
    on one without a change), over the series-periods watched (periods with a forecast, past
    the warm-up, before any change).
The series are steady lines (no slow movers, no seasonal lines) so that every configuration
watches the same in-control behaviour. Deterministic for a seed."""
import argparse
import collections
import csv
import datetime
import glob
import os
import statistics
import subprocess
import sys
import tempfile

WINDOW = 13  # periods after a change within which an alert counts as its detection
# the diagnosis' kind that names each injected kind (monitors/diagnosis.h)
KIND_SAID = {"trend-start": "trend-up", "step-up": "step-up", "step-down": "step-down", "spike": "spike"}


def week_index(text):
    d = datetime.date.fromisoformat(text)
    return (d - datetime.date(1970, 1, 5)).days // 7


def warmup_of(config):
    """Periods without signals at the start of a series: start window plus warm-up (the
    configs here use one policy each: first-actual start, `warmup: N`)."""
    warm = 0
    with open(config) as f:
        for line in f:
            s = line.strip()
            if s.startswith("warmup:"):
                warm = int(s.split(":")[1])
    return 1 + warm


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--binary", required=True)
    ap.add_argument("--series", type=int, default=10000)
    ap.add_argument("--periods", type=int, default=156)
    ap.add_argument("--seed", type=int, default=11)
    ap.add_argument("--configs", default=os.path.join(os.path.dirname(__file__), "detection"))
    ap.add_argument("--markdown", action="store_true")
    a = ap.parse_args()
    work = tempfile.mkdtemp(prefix="forewarden-detect-")
    feed, truth_file = os.path.join(work, "feed.csv"), os.path.join(work, "truth.csv")
    subprocess.run([a.binary, "simulate", "--series", str(a.series), "--periods", str(a.periods),
                    "--seed", str(a.seed), "--intermittent-share", "0", "--seasonal-share", "0",
                    "--change-share", "0.5", "--level-min", "20", "--output", feed,
                    "--truth", truth_file], check=True)
    with open(feed) as f:
        next(f)
        first_period = week_index(next(f).split(",")[1])
    truth = {}
    with open(truth_file) as f:
        for r in csv.DictReader(f):
            truth[r["series"]] = (week_index(r["period"]) - first_period, r["kind"], float(r["sigmas"]))
    rows = []
    diag = collections.defaultdict(lambda: collections.defaultdict(list))
    for config in sorted(glob.glob(os.path.join(a.configs, "*.yaml"))):
        name = os.path.splitext(os.path.basename(config))[0]
        episodes = os.path.join(work, name + ".alerts.csv")
        subprocess.run([a.binary, "replay", "--config", config, "--input", feed, "--output",
                        os.devnull, "--alerts", episodes], check=True, capture_output=True)
        opened = collections.defaultdict(list)
        diagnosis = collections.defaultdict(list)  # series -> (opened, began, kind)
        with open(episodes) as f:
            for r in csv.DictReader(f):
                opened[r["series"]].append(week_index(r["opened"]) - first_period)
                if r["change_began"]:
                    diagnosis[r["series"]].append((week_index(r["opened"]) - first_period,
                                                   week_index(r["change_began"]) - first_period,
                                                   r["kind"]))
        warm = warmup_of(config)
        false_alerts = 0
        watched = 0
        delays = collections.defaultdict(list)  # kind -> delay or None
        # every simulated series: the feed lists all of them in its first period
        all_keys = set()
        with open(feed) as f:
            next(f)
            for i, line in enumerate(f):
                if i >= a.series:
                    break
                all_keys.add(line.split(",", 1)[0])
        for key in all_keys:
            change_at, kind, sigmas = truth.get(key, (a.periods, None, 0.0))
            watched += max(0, change_at - warm)
            times = sorted(opened.get(key, []))
            false_alerts += sum(1 for t in times if t < change_at)
            if kind is None:
                continue
            after = [t - change_at for t in times if change_at <= t <= change_at + WINDOW]
            delay = after[0] if after else None
            delays[kind].append(delay)
            if delay is not None:  # the diagnosis of the alert that caught the change
                _, began, said = sorted(x for x in diagnosis[key] if x[0] == change_at + delay)[0]
                group = kind if kind != "step-up" and kind != "step-down" or abs(sigmas) < 3 else "step >= 3 sigma"
                for g in {group, kind}:
                    diag[name][g].append((abs(began - change_at), said == KIND_SAID.get(kind, kind)))
            if kind in ("step-up", "step-down") and abs(sigmas) >= 3:
                delays["step >= 3 sigma"].append(delay)
        result = {"config": name, "false_per_1000": 1000.0 * false_alerts / max(1, watched)}
        for kind, ds in delays.items():
            hit4 = sum(1 for d in ds if d is not None and d <= 4) / len(ds)
            hit = [d for d in ds if d is not None]
            result[kind] = (hit4, len(hit) / len(ds), statistics.median(hit) if hit else None, len(ds))
        rows.append(result)
    kinds = ["step >= 3 sigma", "step-up", "step-down", "trend-start", "spike"]
    head = "| configuration | false alerts / 1,000 series-periods | " + " | ".join(
        "%s: within 4 / within 13 / median delay" % k for k in kinds) + " |"
    print(head)
    print("|" + "---|" * (2 + len(kinds)))
    for r in rows:
        cells = []
        for k in kinds:
            if k not in r:
                cells.append("-")
                continue
            hit4, hit, med, n = r[k]
            cells.append("%.0f%% / %.0f%% / %s (n=%d)" % (100 * hit4, 100 * hit, "-" if med is None else "%g" % med, n))
        print("| %s | %.2f | %s |" % (r["config"], r["false_per_1000"], " | ".join(cells)))
    print("\nDiagnosis of the alert that caught each change (default configuration): the change's start\n"
          "estimated within 2 periods, and the kind named right (trend-start as trend-up)\n")
    print("| change | caught | start within 2 periods | kind right |")
    print("|---|---|---|---|")
    for kind in kinds:
        ds = diag["default"].get(kind, [])
        if not ds:
            continue
        print("| %s | %d | %.0f%% | %.0f%% |" % (kind, len(ds), 100.0 * sum(1 for d, _ in ds if d <= 2) / len(ds),
                                               100.0 * sum(1 for _, ok in ds if ok) / len(ds)))
    target = [r for r in rows if r["config"] == "default"]
    if target:
        r = target[0]
        ok = r["false_per_1000"] <= 1.0 and r.get("step >= 3 sigma", (0,))[0] >= 0.90
        print("\ntarget (default: <= 1 false alert per 1,000 series-periods, >= 90%% of steps >= 3 sigma within 4 periods): %s"
              % ("met" if ok else "NOT met"))
    return 0


if __name__ == "__main__":
    sys.exit(main())
