#!/usr/bin/python3
"""Regenerates the simulated values of REFERENCES.md (Table A, Table B, C35-C37) with fixed
seeds. Not a test: the calibration tests check forewarden's own simulation against the numbers
this prints. A few seconds with Debian's python3-numpy.

usage: /usr/bin/python3 tests/reference/simulated_tables.py"""
import numpy as np

PATHS = 20000
BURN_IN = 1000
SAMPLES = 100   # per path, one every THIN periods after the burn-in
THIN = 20


def table_a(beta, rng):
    """abs(T) for independent N(0,1) errors; E and M share beta; E0 = 0, M0 = sqrt(2/pi)."""
    e_s = np.zeros(PATHS)
    m_s = np.full(PATHS, np.sqrt(2 / np.pi))
    out = []
    for t in range(BURN_IN + SAMPLES * THIN):
        e = rng.standard_normal(PATHS)
        e_s = beta * e + (1 - beta) * e_s
        m_s = beta * np.abs(e) + (1 - beta) * m_s
        if t >= BURN_IN and (t - BURN_IN) % THIN == 0:
            out.append(np.abs(e_s / m_s))
    return np.concatenate(out)


def table_b(alpha, beta, rng):
    """SES on a stable N(0,1) level, forecast started at the true mean, no reset of C."""
    f = np.zeros(PATHS)
    e_s = np.zeros(PATHS)
    m_s = np.full(PATHS, np.sqrt(2 / np.pi) * np.sqrt(2 / (2 - alpha)))
    c = np.zeros(PATHS)
    t_out, c_out = [], []
    for t in range(BURN_IN + SAMPLES * THIN):
        y = rng.standard_normal(PATHS)
        e = y - f
        f = f + alpha * e
        e_s = beta * e + (1 - beta) * e_s
        m_s = beta * np.abs(e) + (1 - beta) * m_s
        c = c + e
        if t >= BURN_IN and (t - BURN_IN) % THIN == 0:
            t_out.append(np.abs(e_s / m_s))
            c_out.append(np.abs(c / m_s))
    return np.concatenate(t_out), np.concatenate(c_out)


def run_lengths(beta, limit, rng, horizon=3000):
    """Periods to the first abs(T) > limit; E0 = 0, M0 = sqrt(2/pi)."""
    e_s = np.zeros(PATHS)
    m_s = np.full(PATHS, np.sqrt(2 / np.pi))
    first = np.full(PATHS, horizon)
    for t in range(1, horizon + 1):
        e = rng.standard_normal(PATHS)
        e_s = beta * e + (1 - beta) * e_s
        m_s = beta * np.abs(e) + (1 - beta) * m_s
        hit = (np.abs(e_s / m_s) > limit) & (first == horizon)
        first[hit] = t
    return first


def main():
    print("Table A (seed 12345): beta, q90, q95, q99, P(abs(T) > 0.51)")
    for beta in (0.1, 0.2):
        t = table_a(beta, np.random.default_rng(12345))
        q = np.quantile(t, [0.90, 0.95, 0.99])
        print("  %.1f  %.3f  %.3f  %.3f  %.3f" % (beta, q[0], q[1], q[2], np.mean(t > 0.51)))
    print("Table B (seed 777): alpha, beta, q95 abs(T), P(abs(T) > 0.51), P(abs(C/M) > 4)")
    for alpha, beta in ((0.1, 0.1), (0.2, 0.2)):
        t, c = table_b(alpha, beta, np.random.default_rng(777))
        print("  %.1f  %.1f  %.3f  %.3f  %.3f" % (alpha, beta, np.quantile(t, 0.95), np.mean(t > 0.51),
                                                 np.mean(c > 4)))
    first = run_lengths(0.1, 0.51, np.random.default_rng(2024))
    print("C37 (seed 2024): beta 0.1, limit 0.51: mean %.1f, median %.0f periods to the first alarm"
          % (first.mean(), np.median(first)))


if __name__ == "__main__":
    main()
