#!/usr/bin/python3
"""Baseline (b) of the replay benchmark: the computation of `forewarden replay` with
tests/bench/bench.yaml (ses alpha 0.2 from the first actual, E/M/C with beta 0.1, warm-up 4,
Trigg and cusum signals, 95% interval from the MAD, rules drift and running-bias) written with
NumPy, vectorised across series one period at a time, and the same 14 output columns written
with pandas in input order (floats in Python's shortest round-trip repr).

usage: numpy_replay.py INPUT.csv OUTPUT.csv
"""
import sys

import numpy as np
import pandas as pd

ALPHA, BETA, WARMUP, Z = 0.2, 0.1, 4, 1.959963984540054
SIGMA_PER_MAD = 1.2533141373155003
RULES = [("drift", "trigg", 0.6, 0.4, 2), ("running-bias", "cusum", 6.0, 3.0, 1)]


def main(inp, out):
    df = pd.read_csv(inp, dtype={"series": str, "period": str, "value": float})
    sid, keys = pd.factorize(df["series"])
    occ = df.groupby(sid).cumcount().to_numpy()
    periods = pd.to_datetime(df["period"])
    monday = (periods - pd.to_timedelta(periods.dt.weekday, unit="D")).dt.strftime("%Y-%m-%d")
    n, t_max = len(keys), occ.max() + 1
    y = np.full((n, t_max), np.nan)
    y[sid, occ] = df["value"].to_numpy()

    cols = ["forecast", "error", "smoothed_error", "mad", "cusum", "trigg", "cusum_signal",
            "lower", "upper"]
    res = {c: np.full((n, t_max), np.nan) for c in cols}
    active = np.zeros((n, t_max, len(RULES)), dtype=bool)
    level = np.full(n, np.nan)
    e_s, m_s, c_s = np.zeros(n), np.zeros(n), np.zeros(n)
    forecasts = np.zeros(n, dtype=np.int64)
    run = np.zeros((n, len(RULES)), dtype=np.int64)
    act = np.zeros((n, len(RULES)), dtype=bool)
    for t in range(t_max):
        yt = y[:, t]
        present = ~np.isnan(yt)
        has_f = present & ~np.isnan(level)
        first = present & np.isnan(level)
        f = level
        e = yt - f
        res["forecast"][has_f, t] = f[has_f]
        res["error"][has_f, t] = e[has_f]
        ok = has_f & (m_s > 0)
        hw = Z * SIGMA_PER_MAD * m_s
        res["lower"][ok, t] = (f - hw)[ok]
        res["upper"][ok, t] = (f + hw)[ok]
        e0 = np.where(has_f, e, 0.0)
        e_s = np.where(has_f, BETA * e0 + (1 - BETA) * e_s, e_s)
        m_s = np.where(has_f, BETA * np.abs(e0) + (1 - BETA) * m_s, m_s)
        c_s = np.where(has_f, c_s + e0, c_s)
        level = np.where(has_f, ALPHA * yt + (1 - ALPHA) * level, level)
        level = np.where(first, yt, level)
        forecasts += has_f
        res["smoothed_error"][present, t] = e_s[present]
        res["mad"][present, t] = m_s[present]
        res["cusum"][present, t] = c_s[present]
        signals = has_f & (forecasts > WARMUP) & (m_s > 0)
        with np.errstate(divide="ignore", invalid="ignore"):
            trigg, cus = e_s / m_s, c_s / m_s
        res["trigg"][signals, t] = trigg[signals]
        res["cusum_signal"][signals, t] = cus[signals]
        for k, (_, sig, limit, clear, persistence) in enumerate(RULES):
            v = np.abs(trigg if sig == "trigg" else cus)
            beyond = v > limit
            run[:, k] = np.where(signals, np.where(beyond, run[:, k] + 1, 0), run[:, k])
            opens = signals & ~act[:, k] & (run[:, k] >= persistence)
            clears = signals & act[:, k] & (v <= clear)
            act[:, k] = (act[:, k] | opens) & ~clears
        active[present, t, :] = act[present]

    def column(name):
        return res[name][sid, occ]

    rule_hits = active[sid, occ]
    alerts = np.where(rule_hits[:, 0] & rule_hits[:, 1], "drift;running-bias",
                      np.where(rule_hits[:, 0], "drift", np.where(rule_hits[:, 1], "running-bias", "")))
    outdf = pd.DataFrame({
        "series": df["series"], "period": monday, "actual": df["value"],
        "forecast": column("forecast"), "error": column("error"), "alpha": ALPHA,
        "smoothed_error": column("smoothed_error"), "mad": column("mad"), "cusum": column("cusum"),
        "trigg_signal": column("trigg"), "cusum_signal": column("cusum_signal"),
        "lower": column("lower"), "upper": column("upper"), "alerts": alerts})
    outdf.to_csv(out, index=False, na_rep="")


if __name__ == "__main__":
    main(sys.argv[1], sys.argv[2])
