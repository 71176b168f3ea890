#!/usr/bin/env python3
"""The replay benchmark's tank, scripted with a general-purpose ODE library.

This is the comparison point for ``cargo bench -p holdup-sim --bench replay``:
the same balances the holdup kernel integrates, written the way a process
engineer would script them in an afternoon — read the historian log with the
``csv`` module into numpy arrays, interpolate the logged inputs with
``np.interp`` inside the right-hand side, and hand the whole span to
``scipy.integrate.solve_ivp(method="LSODA")`` with its default tolerances
(rtol = 1e-3, atol = 1e-6), evaluating at the hourly report times.

The balances (constant density, well mixed, state = holdup V and amount n of
species A, as in the kernel)::

    dV/dt = q_in − q_out
    dn/dt = q_in·c_f − q_out·n/V − k·n

Reference answer: with q_in = q_out = q and V constant, the concentration
c = n/V obeys dc/dt = (q/V)(c_f − c) − k·c, a linear first-order equation.
On a piece [t_i, t_{i+1}) where the feed c_f is constant its solution is

    c(t) = c_ss + (c(t_i) − c_ss)·exp(−(q/V + k)(t − t_i)),
    c_ss = (q/V)·c_f / (q/V + k),

(set dc/dt = 0 for c_ss; the homogeneous part decays with rate q/V + k).
The feed is taken as held from each log row to the next (a step at the first
row of a new grade), which is how the holdup replay feeds its kernel. The
pieces are found from the log itself, so the script needs no schedule.

Note on the reference: ``np.interp`` turns each feed step into a 1 s ramp
between the last row of the old grade and the first row of the new one. The
ODE solved here therefore differs from the reference by about
0.5 s · (q/V) · Δc_f / c per step, ~1e-5 relative for the benchmark's log,
which is two orders below LSODA's default rtol; the reported error is the
solver's.

Usage::

    python3 ode_replay.py LOG.csv VOLUME_M3 K_PER_S [--c0 MOL_M3] [--every S]

Prints one JSON line on stdout (wall and phase times, solver statistics, the
maximum relative error of c_A against the closed form at the report times)
and a short human summary on stderr. Needs numpy and scipy
(``pip install numpy scipy``).
"""

import time

T_START = time.perf_counter()  # before the heavy imports: they are part of the cost

import argparse  # noqa: E402
import csv  # noqa: E402
import json  # noqa: E402
import sys  # noqa: E402

import numpy as np  # noqa: E402
import scipy  # noqa: E402
from scipy.integrate import solve_ivp  # noqa: E402

INFLOW = "FI-101"  # m3/h
OUTFLOW = "FI-201"  # m3/h
FEED = "AI-101"  # mol/m3


def read_log(path):
    """Wide CSV, first column epoch seconds; returns (t [s], {tag: array})."""
    with open(path, newline="") as f:
        reader = csv.reader(f)
        header = next(reader)
        cols = [[] for _ in header]
        for row in reader:
            for i, value in enumerate(row):
                cols[i].append(float(value))
    data = {name: np.asarray(col, dtype=float) for name, col in zip(header, cols)}
    t = data.pop(header[0])
    return t, data


def closed_form(t_eval, t_log, q, volume, k, c_feed, c0):
    """Exact c_A at the times t_eval (same clock as t_log) for constant q, V
    and the feed held piecewise constant from each log row to the next."""
    lam = q / volume + k
    # First row of each constant-feed piece.
    starts = np.concatenate(([0], np.flatnonzero(np.diff(c_feed) != 0.0) + 1))
    ends = np.concatenate((t_log[starts[1:]], [np.inf]))
    out = np.empty_like(t_eval, dtype=float)
    c_start = c0
    for s, t_end in zip(starts, ends):
        t_i = t_log[s]
        c_ss = (q / volume) * c_feed[s] / lam
        sel = (t_eval >= t_i) & (t_eval < t_end)
        out[sel] = c_ss + (c_start - c_ss) * np.exp(-lam * (t_eval[sel] - t_i))
        if np.isfinite(t_end):
            c_start = c_ss + (c_start - c_ss) * np.exp(-lam * (t_end - t_i))
    return out


def main():
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("log", help="wide CSV log: time (epoch s), FI-101, FI-201, AI-101, ...")
    ap.add_argument("volume", type=float, help="holdup V at the start, m3")
    ap.add_argument("k", type=float, help="first-order rate constant of A -> (consumed), 1/s")
    ap.add_argument("--c0", type=float, default=50.0, help="initial c_A, mol/m3 (default 50)")
    ap.add_argument("--every", type=float, default=3600.0, help="report interval, s (default 3600)")
    args = ap.parse_args()

    t_read = time.perf_counter()
    t_abs, tags = read_log(args.log)
    t = t_abs - t_abs[0]
    q_in = tags[INFLOW] / 3600.0
    q_out = tags[OUTFLOW] / 3600.0
    c_feed = tags[FEED]
    read_s = time.perf_counter() - t_read

    volume, k = args.volume, args.k

    def rhs(time_s, y):
        v, n = y
        qi = np.interp(time_s, t, q_in)
        qo = np.interp(time_s, t, q_out)
        cf = np.interp(time_s, t, c_feed)
        return [qi - qo, qi * cf - qo * n / v - k * n]

    t_eval = np.arange(0.0, t[-1] + 0.5, args.every)
    t_eval = t_eval[t_eval <= t[-1]]
    t_solve = time.perf_counter()
    sol = solve_ivp(rhs, (0.0, t[-1]), [volume, volume * args.c0], method="LSODA", t_eval=t_eval)
    solve_s = time.perf_counter() - t_solve
    if not sol.success:
        print(f"error: solve_ivp failed: {sol.message}", file=sys.stderr)
        return 1
    c_num = sol.y[1] / sol.y[0]

    # The closed form needs q_in = q_out = q constant (so V is constant).
    q = q_in[0]
    if not (np.all(q_in == q) and np.all(q_out == q)):
        print("error: the closed form needs FI-101 = FI-201 = constant", file=sys.stderr)
        return 1
    c_exact = closed_form(t_eval, t, q, volume, k, c_feed, args.c0)
    rel = np.abs(c_num - c_exact) / np.abs(c_exact)
    worst = int(np.argmax(rel))
    wall_s = time.perf_counter() - T_START

    result = {
        "solver": f"scipy {scipy.__version__} solve_ivp LSODA (rtol 1e-3, atol 1e-6)",
        "numpy": np.__version__,
        "rows": int(t.size),
        "span_s": float(t[-1]),
        "report_times": int(t_eval.size),
        "read_s": read_s,
        "solve_s": solve_s,
        "wall_s": wall_s,
        "nfev": int(sol.nfev),
        "njev": int(sol.njev),
        "max_rel_error": float(rel[worst]),
        "max_rel_error_at_h": float(t_eval[worst] / 3600.0),
    }
    print(
        f"ode_replay: {t.size} rows, read {read_s:.2f} s, LSODA {solve_s:.2f} s "
        f"({sol.nfev} RHS calls), wall {wall_s:.2f} s; max relative error of c_A "
        f"{rel[worst]:.2e} at {t_eval[worst] / 3600.0:.0f} h",
        file=sys.stderr,
    )
    print(json.dumps(result))
    return 0


if __name__ == "__main__":
    sys.exit(main())
