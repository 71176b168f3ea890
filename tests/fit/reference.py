#!/usr/bin/env python3
"""Outside check of `holdup fit`: the same weighted least-squares problem
solved with scipy.optimize.least_squares, compared with holdup's fit.json.

The problem (generated, seeded, into a temporary folder or --keep DIR): an
invented continuous stirred tank (vertical cylinder, D 1.2 m, H 2.5 m, flat
bottom) at constant volume V, one species A consumed first order,
A -> products, with the Arrhenius form of the kernel

    k(T) = k_ref * exp(-Ea/R * (1/T - 1/T_ref)),   T in K,

inlet flow = outlet flow = q (both logged, constant), constant feed
concentration c_f, known initial concentration c0, and a logged temperature
that is piecewise constant (steps every 2-5 h within 40-65 degC). Log every
10 s for 48 h, plant tick 10 s. The kernel holds each row's inputs over the
following tick (zero-order hold) and integrates exactly, so per tick
(closed form of dc/dt = (q/V)(c_f - c) - k c with constant coefficients,
common practice)

    c_{j+1} = c_ss + (c_j - c_ss) * exp(-(q/V + k(T_j)) * h),
    c_ss    = (q/V) c_f / (q/V + k(T_j)),

with c_0 at the first row's time. The prediction for a lab sample drawn at
row j's time is c_j (the state at that time, before the tick from it).
12 lab results, truth * (1 + 0.02 N(0,1)).

Unknowns: k_ref (1/s) and Ea (kJ/mol), as written in plant.toml
(`rate_constant = { guess, unit, min, max }`, likewise `activation_energy`).
Residuals r_i = (c_pred_i - lab_i) / sigma_i, sigma_i = lab_sigma * |lab_i|
(lab_sigma = 0.02 from [fit]); the fit runs in x = (ln k_ref, Ea) with the
analytic Jacobian (sensitivities carried through the recurrence). Standard
errors: cov = s^2 (J^T J)^-1 with J the Jacobian in the reported parameters
(k_ref in 1/s, Ea in kJ/mol) and s^2 = sum r^2 / (m - p); 95 % interval
value +- t_{0.975, m-p} SE (Student t, scipy.stats.t).

First, the replay check: `holdup replay` of plant-replay.toml (the same
plant with the true k_ref and Ea) must give c_A within 1e-12 relative of the
per-tick model above at every row, so that the model and the timing the
comparison relies on are the kernel's. Then `holdup fit`, checked against
OUT/fit.json (see tests/fit/README.md): each optimum within 1e-4 relative,
each SE within 5 % relative, each 95 % half-width within 5 %, each interval
centred on the value (1e-4), chi2 within 1e-3 relative, the correlation
within 0.01, dof = m - p and residuals = m exactly. Exit 0 if all agree, 1
otherwise, 2 if holdup fails (cannot run, non-zero exit, or no readable
fit.json), with its stderr shown.

Usage:
  python3 tests/fit/reference.py [--holdup target/release/holdup] [--seed N]
      [--keep DIR] [--write-only DIR] [--replay-only] [--self-test]
"""

import argparse
import csv
import json
import math
import shutil
import subprocess
import sys
import tempfile
import tomllib
from datetime import datetime, timedelta, timezone
from pathlib import Path

import numpy as np
import scipy
from scipy.integrate import solve_ivp
from scipy.optimize import least_squares
from scipy.stats import t as student_t

ROOT = Path(__file__).resolve().parents[2]

# Molar gas constant, J/(mol K): CODATA 2018 (exact since the 2019 SI
# redefinition); the kernel uses the same value (kernel/src/units.rs).
R = 8.314462618
# 0 degC = 273.15 K (exact), NIST SP 811, B.9.
ZERO_CELSIUS = 273.15

# The invented plant and its true parameters.
DIAMETER = 1.2  # m
HEIGHT = 2.5  # m
VOLUME = 2.0  # m3
FLOW_M3H = 3.6  # m3/h in and out: residence time V/q = 2000 s
FEED = 200.0  # mol/m3
C0 = 120.0  # mol/m3
K_REF_TRUE = 3e-4  # 1/s at T_REF
EA_TRUE = 55.0  # kJ/mol
T_REF_C = 50.0  # degC
T_MIN_C, T_MAX_C = 40.0, 65.0
HOURS = 48
STEP_S = 10  # log interval and plant tick
LABS = 12
LAB_REL_SIGMA = 0.02
REACTION = "decay"
START = datetime(2026, 5, 4, tzinfo=timezone.utc)

# Comparison tolerances.
TOL_VALUE = 1e-4  # relative, each optimum
TOL_SE = 0.05  # relative, each standard error
TOL_HALF = 0.05  # relative, each 95 % half-width
TOL_CHI2 = 1e-3  # relative
TOL_CORR = 0.01  # absolute
TOL_REPLAY = 1e-12  # relative, holdup replay at the truth vs the per-tick model

# Unit factors to SI for the units this script writes (docs/config.md).
FLOW_UNITS = {"m3/s": 1.0, "m3/h": 1.0 / 3600.0, "m3/min": 1.0 / 60.0}
RATE1_UNITS = {"1/s": 1.0, "1/min": 1.0 / 60.0, "1/h": 1.0 / 3600.0}
ENERGY_UNITS = {"J/mol": 1.0, "kJ/mol": 1e3}
CONC_UNITS = {"mol/m3": 1.0, "mol/L": 1e3, "kmol/m3": 1e3, "mmol/L": 1.0}
VOLUME_UNITS = {"m3": 1.0, "L": 1e-3}


def iso(t):
    return t.strftime("%Y-%m-%dT%H:%M:%SZ")


def rate_constant(k_ref, ea_j, t_k, t_ref_k):
    """k(T) in the kernel's Arrhenius form (SI)."""
    return k_ref * np.exp(-ea_j / R * (1.0 / t_k - 1.0 / t_ref_k))


def trajectory(k_ref, ea_j, temps_k, t_ref_k, alpha, c_feed, c0, h):
    """Per-tick exact model: c_j at every row j (the tick from row j uses
    row j's temperature, so the last row's temperature is not used)."""
    k = rate_constant(k_ref, ea_j, temps_k[:-1], t_ref_k)
    lam = alpha + k
    a = np.exp(-lam * h)
    css = alpha * c_feed / lam
    c = np.empty(len(temps_k))
    c[0] = c0
    cj = c0
    for j in range(len(a)):
        cj = css[j] + (cj - css[j]) * a[j]
        c[j + 1] = cj
    return c


def predict(x, prob, jac=False):
    """Predictions at the lab rows for x = (ln k_ref [1/s], Ea [kJ/mol]);
    with jac, also d c / d x at the lab rows (exact sensitivities)."""
    k_ref = math.exp(x[0])
    ea_j = x[1] * 1e3
    temps, t_ref = prob["temps_k"], prob["t_ref_k"]
    alpha, c_feed, h = prob["alpha"], prob["feed"], prob["h"]
    k = rate_constant(k_ref, ea_j, temps[:-1], t_ref)
    lam = alpha + k
    a = np.exp(-lam * h)
    css = alpha * c_feed / lam
    # d k / d ln k_ref = k;  d k / d Ea[kJ/mol] = -k (1/T - 1/T_ref) 1e3 / R
    dk = np.stack([k, -k * (1.0 / temps[:-1] - 1.0 / t_ref) * 1e3 / R], axis=1)
    rows = prob["lab_rows"]
    last = int(rows.max())
    want = np.zeros(last + 1, dtype=bool)
    want[rows] = True
    c = np.empty(last + 1)
    s = np.zeros((last + 1, 2))
    cj = prob["c0"]
    sj = np.zeros(2)
    c[0] = cj
    for j in range(last):
        aj, cs = a[j], css[j]
        if jac:
            # c_{j+1} = cs + (c_j - cs) a;  d cs/dk = -cs/lam, d a/dk = -h a
            dc_dk = -cs / lam[j] * (1.0 - aj) - (cj - cs) * h * aj
            sj = aj * sj + dc_dk * dk[j]
            if want[j + 1]:
                s[j + 1] = sj
        cj = cs + (cj - cs) * aj
        c[j + 1] = cj
    return (c[rows], s[rows]) if jac else c[rows]


# --------------------------------------------------------------------------
# Generating the problem


def temperature_profile(rng, n_rows):
    """Piecewise-constant degC per row: segments of 2-5 h (half hours),
    levels in [40, 65] degC on a 0.5 degC grid, at least 5 degC apart."""
    temps = np.empty(n_rows)
    row = 0
    prev = None
    per_half_hour = 1800 // STEP_S
    while row < n_rows:
        length = int(rng.integers(4, 11)) * per_half_hour
        while True:
            level = round(float(rng.uniform(T_MIN_C, T_MAX_C)) * 2) / 2
            if prev is None or abs(level - prev) >= 5.0:
                break
        temps[row:row + length] = level
        row += length
        prev = level
    return temps


def plant_text(seed, t0_c, unknown):
    """plant.toml: with `unknown`, k_ref and Ea as fit unknowns and [fit];
    else the same plant with the true values (for `holdup replay`)."""
    if unknown:
        what = ""
        kinetics = ('rate_constant = { guess = 1e-4, unit = "1/s", min = 1e-7, max = 1e-1 }\n'
                    'activation_energy = { guess = 40, unit = "kJ/mol", min = 0, max = 200 }')
        fit = f"\n[fit]\nlab_sigma = {LAB_REL_SIGMA}\nhold_out = 0\n"
    else:
        what = ",\n# with the true k_ref and Ea, for holdup replay"
        kinetics = (f'rate_constant = {{ value = {K_REF_TRUE!r}, unit = "1/s" }}\n'
                    f'activation_energy = {{ value = {EA_TRUE!r}, unit = "kJ/mol" }}')
        fit = ""
    return f"""\
# Invented stirred tank T-15 for the `holdup fit` outside check
# (tests/fit/reference.py generated this file; seed {seed}){what}.
[plant]
name = "Invented decay tank T-15 (fit check, seed {seed})"
tick = "{STEP_S} s"
scalar = "f64"
method = "auto"

[vessel]
shape = "vertical-cylinder"
diameter = {{ value = {DIAMETER}, unit = "m" }}
height = {{ value = {HEIGHT}, unit = "m" }}
bottom = "flat"

[[species]]
name = "A"

[[inlet]]
name = "feed"
flow = {{ tag = "FI-1", unit = "m3/h" }}
feed = {{ A = {{ value = {FEED}, unit = "mol/m3" }} }}

[[outlet]]
name = "product"
kind = "measured"
flow = {{ tag = "FI-2", unit = "m3/h" }}

[temperature]
tag = "TI-1"
unit = "degC"

[level]
tag = "LI-1"
unit = "m"

[[reaction]]
name = "{REACTION}"
stoichiometry = {{ A = -1 }}
orders = {{ A = 1 }}
{kinetics}
reference_temperature = {{ value = {T_REF_C}, unit = "degC" }}

[initial]
volume = {{ value = {VOLUME}, unit = "m3" }}
concentrations = {{ A = {{ value = {C0}, unit = "mol/m3" }} }}
temperature = {{ value = {t0_c!r}, unit = "degC" }}

[log]
format = "wide"
time = "iso8601"
{fit}"""


def generate(seed, out):
    """Write plant.toml, log.csv and lab.csv into `out`; return the truth."""
    rng = np.random.default_rng(seed)
    n_rows = HOURS * 3600 // STEP_S + 1
    temps_c = temperature_profile(rng, n_rows)
    level = VOLUME / (math.pi * DIAMETER ** 2 / 4)  # flat-bottomed cylinder
    alpha = FLOW_M3H / 3600.0 / VOLUME
    c = trajectory(K_REF_TRUE, EA_TRUE * 1e3, temps_c + ZERO_CELSIUS,
                   T_REF_C + ZERO_CELSIUS, alpha, FEED, C0, float(STEP_S))
    # Lab i drawn in [4i + 0.5 h, 4i + 3.5 h], on a row time.
    rows = []
    for i in range(LABS):
        lo, hi = (4 * i + 0.5) * 3600 // STEP_S, (4 * i + 3.5) * 3600 // STEP_S
        rows.append(int(rng.integers(lo, hi + 1)))
    noise = rng.standard_normal(LABS)
    labs = [(r, float(c[r] * (1.0 + LAB_REL_SIGMA * e))) for r, e in zip(rows, noise)]

    out = Path(out)
    out.mkdir(parents=True, exist_ok=True)
    t0_c = float(temps_c[0])
    (out / "plant.toml").write_text(plant_text(seed, t0_c, True))
    (out / "plant-replay.toml").write_text(plant_text(seed, t0_c, False))
    with open(out / "log.csv", "w", newline="") as f:
        f.write("time,FI-1,FI-2,TI-1,LI-1\n")
        for j in range(n_rows):
            t = START + timedelta(seconds=j * STEP_S)
            f.write(f"{iso(t)},{FLOW_M3H!r},{FLOW_M3H!r},{float(temps_c[j])!r},{level!r}\n")
    with open(out / "lab.csv", "w", newline="") as f:
        f.write("sample_time,species,value,unit\n")
        for r, v in labs:
            f.write(f"{iso(START + timedelta(seconds=r * STEP_S))},A,{v!r},mol/m3\n")
    return {"k_ref": K_REF_TRUE, "ea": EA_TRUE, "trajectory": c}


# --------------------------------------------------------------------------
# Reading the problem back from the files (what holdup is given)


def quantity(q, table, what):
    if q.get("unit") not in table:
        raise SystemExit(f"reference.py: {what}: unit {q.get('unit')!r} not handled here")
    return table[q["unit"]]


def temperature_k(q, what):
    if q["unit"] == "K":
        return float(q["value"])
    if q["unit"] in ("degC", "°C", "C"):
        return float(q["value"]) + ZERO_CELSIUS
    raise SystemExit(f"reference.py: {what}: unit {q['unit']!r} not handled here")


def read_problem(folder):
    folder = Path(folder)
    with open(folder / "plant.toml", "rb") as f:
        plant = tomllib.load(f)
    (rx,) = plant["reaction"]
    inlet, outlet = plant["inlet"][0], plant["outlet"][0]
    tick_s = float(plant["plant"]["tick"].split()[0])
    assert plant["plant"]["tick"].split()[1] == "s"
    kq, eq = rx["rate_constant"], rx["activation_energy"]
    k_f = quantity(kq, RATE1_UNITS, "rate_constant")
    e_f = quantity(eq, ENERGY_UNITS, "activation_energy") / 1e3  # to kJ/mol
    feed_q = inlet["feed"]["A"]
    init = plant["initial"]
    c0_q = init["concentrations"]["A"]

    times, fin, fout, temp = [], [], [], []
    with open(folder / "log.csv") as f:
        header = f.readline().strip().split(",")
        col = {name: i for i, name in enumerate(header)}
        for line in f:
            cells = line.strip().split(",")
            times.append(datetime.fromisoformat(cells[col["time"]]))
            fin.append(float(cells[col[inlet["flow"]["tag"]]]))
            fout.append(float(cells[col[outlet["flow"]["tag"]]]))
            temp.append(float(cells[col[plant["temperature"]["tag"]]]))
    flow_f = quantity(inlet["flow"], FLOW_UNITS, "inlet flow")
    fin = np.array(fin) * flow_f
    fout = np.array(fout) * quantity(outlet["flow"], FLOW_UNITS, "outlet flow")
    if not (np.all(fin == fin[0]) and np.all(fout == fin[0])):
        raise SystemExit("reference.py: the model here needs constant, equal flows")
    temps_k = np.array([temperature_k({"value": v, "unit": plant["temperature"]["unit"]}, "TI")
                        for v in temp])
    steps = {(b - a).total_seconds() for a, b in zip(times, times[1:])}
    if steps != {tick_s}:
        raise SystemExit(f"reference.py: log interval {steps} is not the tick {tick_s} s")

    lab_rows, lab_vals = [], []
    with open(folder / "lab.csv") as f:
        header = f.readline().strip().split(",")
        col = {name: i for i, name in enumerate(header)}
        for line in f:
            cells = line.strip().split(",")
            t = datetime.fromisoformat(cells[col["sample_time"]])
            row = (t - times[0]).total_seconds() / tick_s
            if row != int(row):
                raise SystemExit(f"reference.py: lab time {t} is not on a row")
            lab_rows.append(int(row))
            lab_vals.append(float(cells[col["value"]]) *
                            quantity({"unit": cells[col["unit"]]}, CONC_UNITS, "lab"))
    lab_vals = np.array(lab_vals)
    return {
        "reaction": rx["name"],
        "h": tick_s,
        "alpha": fin[0] / (float(init["volume"]["value"]) *
                           quantity(init["volume"], VOLUME_UNITS, "volume")),
        "feed": float(feed_q["value"]) * quantity(feed_q, CONC_UNITS, "feed"),
        "c0": float(c0_q["value"]) * quantity(c0_q, CONC_UNITS, "c0"),
        "t_ref_k": temperature_k(rx["reference_temperature"], "reference_temperature"),
        "temps_k": temps_k,
        "lab_rows": np.array(lab_rows),
        "lab": lab_vals,
        "sigma": plant["fit"]["lab_sigma"] * np.abs(lab_vals),
        # guesses and bounds in the reported units: k in 1/s, Ea in kJ/mol
        "k_unit": kq["unit"], "k_factor": k_f,
        "e_unit": eq["unit"], "e_factor": e_f,
        "guess": (kq["guess"] * k_f, eq["guess"] * e_f),
        "lower": (kq["min"] * k_f, eq["min"] * e_f),
        "upper": (kq["max"] * k_f, eq["max"] * e_f),
    }


# --------------------------------------------------------------------------
# The reference fit


def fit(prob, start=None):
    """Weighted least squares; returns values, SEs, intervals, correlation in
    the reported parameters (k_ref [1/s], Ea [kJ/mol])."""
    sigma, lab = prob["sigma"], prob["lab"]

    def fun(x):
        return (predict(x, prob) - lab) / sigma

    def jac(x):
        return predict(x, prob, jac=True)[1] / sigma[:, None]

    g = start or prob["guess"]
    x0 = np.array([math.log(g[0]), g[1]])
    lo = np.array([math.log(prob["lower"][0]), prob["lower"][1]])
    hi = np.array([math.log(prob["upper"][0]), prob["upper"][1]])
    res = least_squares(fun, x0, jac=jac, bounds=(lo, hi), method="trf",
                        x_scale=np.array([1.0, 10.0]),
                        xtol=1e-15, ftol=1e-15, gtol=1e-15, max_nfev=2000)
    # Polish without bounds (Levenberg-Marquardt) from the trf optimum; the
    # optimum must be interior (checked below), so both are the same problem.
    lm = least_squares(fun, res.x, jac=jac, method="lm",
                       xtol=1e-15, ftol=1e-15, gtol=1e-15, max_nfev=2000)
    x = lm.x
    r = fun(x)
    m, p = len(r), 2
    k_ref = math.exp(x[0])
    # Jacobian in the reported parameters: d/dk_ref = (d/d ln k_ref) / k_ref.
    j = jac(x) * np.array([1.0 / k_ref, 1.0])
    chi2 = float(r @ r)
    s2 = chi2 / (m - p)
    cov = s2 * np.linalg.inv(j.T @ j)
    se = np.sqrt(np.diag(cov))
    tq = float(student_t.ppf(0.975, m - p))
    values = np.array([k_ref, x[1]])
    interior = bool(np.all(x > lo) and np.all(x < hi))
    grad = jac(x).T @ r  # in the fitted variables (ln k_ref, Ea [kJ/mol])
    return {
        "values": values, "se": se, "half": tq * se, "t": tq,
        "corr": float(cov[0, 1] / (se[0] * se[1])),
        "chi2": chi2, "dof": m - p, "m": m,
        "nfev": (res.nfev, lm.nfev), "status": (res.status, lm.status),
        "trf_values": np.array([math.exp(res.x[0]), res.x[1]]),
        "interior": interior, "grad": grad,
    }


# --------------------------------------------------------------------------
# Self-test (no holdup needed)


def self_test(seeds):
    ok = True
    h, alpha, cf = float(STEP_S), FLOW_M3H / 3600.0 / VOLUME, FEED
    t_ref = T_REF_C + ZERO_CELSIUS
    # 1. Per-tick model against a fine integration over constant-T segments.
    for t_c, c_start in ((40.0, C0), (65.0, 180.0), (52.5, 30.0)):
        t_k = t_c + ZERO_CELSIUS
        n = 2 * 3600 // STEP_S
        c = trajectory(K_REF_TRUE, EA_TRUE * 1e3, np.full(n + 1, t_k), t_ref, alpha, cf,
                       c_start, h)
        k = float(rate_constant(K_REF_TRUE, EA_TRUE * 1e3, t_k, t_ref))
        sol = solve_ivp(lambda _t, y: alpha * (cf - y) - k * y, (0.0, n * h), [c_start],
                        method="DOP853", rtol=1e-12, atol=1e-12,
                        t_eval=np.arange(n + 1) * h)
        err = float(np.max(np.abs(sol.y[0] - c) / np.abs(c)))
        good = err < 1e-9
        ok &= good
        print(f"  per-tick model vs solve_ivp (DOP853, rtol 1e-12), {t_c} degC, 2 h:"
              f" max rel. diff {err:.1e} {'ok' if good else 'FAIL'}")
    # 2. Analytic Jacobian against central differences; 3. truth coverage.
    covered = 0
    for n, seed in enumerate(seeds):
        with tempfile.TemporaryDirectory(prefix="holdup-fit-self-") as d:
            truth = generate(seed, d)
            prob = read_problem(d)
        c_truth = truth["trajectory"][prob["lab_rows"]]
        pred = predict(np.array([math.log(K_REF_TRUE), EA_TRUE]), prob)
        same = float(np.max(np.abs(pred - c_truth) / c_truth))
        ok &= same < 1e-13
        if n == 0:
            x = np.array([math.log(2e-4), 48.0])
            jac = predict(x, prob, jac=True)[1]
            fd = np.empty_like(jac)
            for i, step in enumerate((1e-6, 1e-5)):
                e = np.zeros(2)
                e[i] = step
                fd[:, i] = (predict(x + e, prob) - predict(x - e, prob)) / (2 * step)
            jerr = float(np.max(np.abs(jac - fd)) / np.max(np.abs(jac)))
            ok &= jerr < 1e-6
            print(f"  analytic Jacobian vs central differences: max rel. diff {jerr:.1e}"
                  f" {'ok' if jerr < 1e-6 else 'FAIL'}")
        f = fit(prob)
        # a different start must give the same optimum
        g = fit(prob, start=(1e-3, 90.0))
        agree = float(np.max(np.abs(g["values"] - f["values"]) / f["values"]))
        # (the optimum is flat: ~1e-8 is the floating-point floor of the
        # solver's stopping tests, far below the 1e-4 comparison)
        good = agree < 1e-7 and f["interior"]
        ok &= good
        inside = [bool(abs(v - tv) <= hw) for v, tv, hw in
                  zip(f["values"], (K_REF_TRUE, EA_TRUE), f["half"])]
        covered += sum(inside)
        print(f"  seed {seed}: k_ref {f['values'][0]:.5e} +- {f['half'][0]:.1e},"
              f" Ea {f['values'][1]:.4f} +- {f['half'][1]:.2f} kJ/mol, chi2 {f['chi2']:.2f},"
              f" truth inside {inside}, other start {agree:.0e},"
              f" model at truth = generator {same:.0e}"
              f" {'ok' if good and same < 1e-13 else 'FAIL'}")
    print(f"  truth inside the 95 % interval: {covered} of {2 * len(seeds)} (informative)")
    return ok


# --------------------------------------------------------------------------
# Comparison with holdup


def rel(a, b):
    return abs(a - b) / abs(b) if b != 0 else abs(a - b)


def compare(ref, prob, fit_json):
    rows, ok = [], True

    def check(name, h, s, diff, tol, kind="rel"):
        nonlocal ok
        good = diff is not None and diff <= tol
        ok &= good
        rows.append((name, h, s, diff, f"{kind} {tol:g}", "ok" if good else "FAIL"))

    def num(obj, *keys):
        """obj[k1][k2]... as a float, or None when missing or not a number."""
        try:
            for k in keys:
                obj = obj[k]
            return float(obj) if not isinstance(obj, bool) else None
        except (KeyError, IndexError, TypeError, ValueError):
            return None

    def diff(h, s, f):
        return f(h, s) if h is not None else None

    params = {p.get("name"): p for p in fit_json.get("parameters", []) if isinstance(p, dict)}
    names = [(f"{prob['reaction']}.rate_constant", prob["k_unit"], prob["k_factor"]),
             (f"{prob['reaction']}.activation_energy", prob["e_unit"], prob["e_factor"])]
    for i, (name, unit, factor) in enumerate(names):
        p = params.get(name)
        if p is None:
            print(f"FAIL: fit.json has no parameter {name!r} (has {sorted(map(str, params))})")
            ok = False
            continue
        if p.get("unit") != unit:
            print(f"FAIL: {name}: unit {p.get('unit')!r}, plant file says {unit!r}")
            ok = False
        # ref is in 1/s and kJ/mol; one plant-file unit is `factor` of those.
        v, se, half = (ref[key][i] / factor for key in ("values", "se", "half"))
        hv, hse = num(p, "value"), num(p, "se")
        lo, hi = num(p, "ci95", 0), num(p, "ci95", 1)
        hhalf = (hi - lo) / 2 if lo is not None and hi is not None else None
        mid = (hi + lo) / 2 if hhalf is not None else None
        check(f"{name} [{unit}]", hv, v, diff(hv, v, rel), TOL_VALUE)
        check("  se", hse, se, diff(hse, se, rel), TOL_SE)
        check("  ci95 half-width", hhalf, half, diff(hhalf, half, rel), TOL_HALF)
        check("  ci95 centre", mid, v, diff(mid, v, rel), TOL_VALUE)
    corr = num(fit_json, "correlation", 0, 1)
    check("correlation", corr, ref["corr"], diff(corr, ref["corr"], lambda a, b: abs(a - b)),
          TOL_CORR, "abs")
    chi2 = num(fit_json, "chi2")
    check("chi2", chi2, ref["chi2"], diff(chi2, ref["chi2"], rel), TOL_CHI2)
    for key, want in (("dof", ref["dof"]), ("residuals", ref["m"])):
        got = fit_json.get(key)
        check(key, got, want, 0.0 if got == want else None, 0, "exact")

    print(f"{'':36} {'holdup':>16} {'scipy':>16} {'difference':>11}  tolerance")
    for name, h, s, d, tol, verdict in rows:
        fmt = lambda x: f"{x:16.9g}" if isinstance(x, (int, float)) else f"{str(x):>16}"
        ds = f"{d:11.2e}" if d is not None else f"{'-':>11}"
        print(f"{name:36} {fmt(h)} {fmt(s)} {ds}  {tol:10} {verdict}")
    print(f"holdup evaluations: {fit_json.get('evaluations')}")
    return ok


def run_holdup(cmd, timeout):
    """Run holdup; None and a message when it cannot run or exits non-zero."""
    print("running:", " ".join(cmd))
    try:
        run = subprocess.run(cmd, capture_output=True, text=True, timeout=timeout)
    except (OSError, subprocess.TimeoutExpired) as e:
        print(f"{cmd[1]}: could not run: {e}")
        return None
    if run.returncode != 0:
        print(f"holdup {cmd[1]} exited {run.returncode}; stderr:\n{run.stderr}")
        return None
    return run


def replay_check(holdup, folder, prob, timeout):
    """`holdup replay` of plant-replay.toml (true k_ref and Ea) against this
    script's per-tick model at every row: the model and the timing that the
    fit comparison relies on. Returns True, False, or None (holdup failed)."""
    out = folder / "out-replay"
    run = run_holdup([str(holdup), "replay", "--config", str(folder / "plant-replay.toml"),
                      "--log", str(folder / "log.csv"), "--lab", str(folder / "lab.csv"),
                      "--out", str(out), "--every", "tick", "--quiet"], timeout)
    if run is None:
        return None
    with open(out / "estimates.csv") as f:
        est = np.array([float(r["A_mol_m3"]) for r in csv.DictReader(f)])
    c = trajectory(K_REF_TRUE, EA_TRUE * 1e3, prob["temps_k"], prob["t_ref_k"],
                   prob["alpha"], prob["feed"], prob["c0"], prob["h"])
    if len(est) != len(c):
        print(f"replay check: estimates.csv has {len(est)} rows, the log {len(c)}: FAIL")
        return False
    err = float(np.max(np.abs(est - c) / np.abs(c)))
    good = err <= TOL_REPLAY
    print(f"replay check: c_A of holdup replay (true k_ref, Ea) vs the per-tick model, "
          f"{len(c)} rows: max rel. diff {err:.1e} (tolerance {TOL_REPLAY:g}) "
          f"{'ok' if good else 'FAIL'}")
    return good


def find_holdup(path):
    p = Path(path)
    if not p.is_absolute() and not p.exists():
        p = ROOT / p
    return p


def main():
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--holdup", default="target/release/holdup",
                    help="holdup binary (default target/release/holdup, relative to the "
                         "current folder or else the repository)")
    ap.add_argument("--seed", type=int, default=7,
                    help="problem seed (default 7: s^2 = chi2/dof = 0.57 there, so SEs "
                         "with and without the s^2 factor differ by 24 %%)")
    ap.add_argument("--keep", metavar="DIR", help="write the files into DIR (kept)")
    ap.add_argument("--write-only", metavar="DIR", help="only write the files into DIR")
    ap.add_argument("--self-test", action="store_true",
                    help="check this script's model, Jacobian and fit (no holdup)")
    ap.add_argument("--replay-only", action="store_true",
                    help="only the replay check (holdup replay at the true parameters "
                         "against this script's model); needs no `holdup fit`")
    ap.add_argument("--timeout", type=float, default=600,
                    help="seconds allowed for each holdup run (default 600)")
    args = ap.parse_args()

    print(f"Python {sys.version.split()[0]}, numpy {np.__version__}, scipy {scipy.__version__}")
    if args.self_test:
        ok = self_test([args.seed] + [n for n in range(1, 9) if n != args.seed])
        print("self-test", "passed" if ok else "FAILED")
        return 0 if ok else 1
    if args.write_only:
        generate(args.seed, args.write_only)
        print(f"wrote plant.toml, log.csv, lab.csv and plant-replay.toml (the true k_ref and Ea,"
              f" for holdup replay) into {args.write_only} (seed {args.seed})")
        return 0

    tmp = None
    if args.keep:
        folder = Path(args.keep)
    else:
        tmp = tempfile.mkdtemp(prefix="holdup-fit-")
        folder = Path(tmp)
    try:
        truth = generate(args.seed, folder)
        prob = read_problem(folder)
        ref = fit(prob)
        if not ref["interior"]:
            print("reference fit ended on a bound: the problem is not suitable")
            return 1
        print(f"problem: seed {args.seed}, {len(prob['temps_k'])} rows, {ref['m']} labs,"
              f" in {folder}")
        print(f"scipy least_squares: trf {ref['nfev'][0]} + lm {ref['nfev'][1]} evaluations,"
              f" status {ref['status']}, t_0.975,{ref['dof']} = {ref['t']:.6f},"
              f" gradient {np.abs(ref['grad']).max():.1e}")

        holdup = find_holdup(args.holdup)
        replay_ok = replay_check(holdup, folder, prob, args.timeout)
        if replay_ok is None:
            return 2
        if args.replay_only:
            return 0 if replay_ok else 1
        out = folder / "out"
        run = run_holdup([str(holdup), "fit", "--config", str(folder / "plant.toml"),
                          "--log", str(folder / "log.csv"), "--lab", str(folder / "lab.csv"),
                          "--out", str(out)], args.timeout)
        if run is None:
            return 2
        try:
            fit_json = json.loads((out / "fit.json").read_text())
            if not isinstance(fit_json, dict):
                raise ValueError("not a JSON object")
        except (OSError, ValueError) as e:
            print(f"holdup fit exited 0 but {out / 'fit.json'} is not readable: {e}")
            print(f"stderr:\n{run.stderr}")
            return 2

        ok = compare(ref, prob, fit_json) and replay_ok
        for name, tv, v, hw in (("k_ref [1/s]", truth["k_ref"], ref["values"][0], ref["half"][0]),
                                ("Ea [kJ/mol]", truth["ea"], ref["values"][1], ref["half"][1])):
            print(f"truth {name} {tv:g}: scipy {v:.6g} +- {hw:.3g},"
                  f" {'inside' if abs(v - tv) <= hw else 'outside'} the 95 % interval"
                  " (informative)")
        print("holdup fit agrees with the scipy reference" if ok else
              "holdup fit DISAGREES with the scipy reference")
        return 0 if ok else 1
    finally:
        if tmp is not None:
            shutil.rmtree(tmp, ignore_errors=True)


if __name__ == "__main__":
    sys.exit(main())
