#!/usr/bin/python3
"""Baseline (c) of the replay benchmark: statsmodels SimpleExpSmoothing fitted once per series
(alpha 0.2, start at the first actual, no optimisation), one-step fitted values only, on the
first N series of the feed. Prints actuals processed and seconds spent in statsmodels.

usage: statsmodels_ses.py INPUT.csv N
"""
import sys
import time
import warnings

import pandas as pd
from statsmodels.tsa.holtwinters import SimpleExpSmoothing


def main(inp, n):
    df = pd.read_csv(inp, dtype={"series": str, "period": str, "value": float})
    keys = df["series"].unique()[:n]
    groups = df[df["series"].isin(set(keys))].groupby("series", sort=False)["value"]
    series = [g.to_numpy() for _, g in groups]
    warnings.simplefilter("ignore")
    actuals = 0
    t0 = time.perf_counter()
    for y in series:
        fit = SimpleExpSmoothing(y, initialization_method="known", initial_level=y[0]).fit(
            smoothing_level=0.2, optimized=False)
        _ = fit.fittedvalues
        actuals += len(y)
    print("%d %.6f" % (actuals, time.perf_counter() - t0))


if __name__ == "__main__":
    main(sys.argv[1], int(sys.argv[2]))
