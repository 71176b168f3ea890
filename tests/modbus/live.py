"""End-to-end check of `holdup live` against a simulated PLC (plc.py, a
pymodbus 3.8 Modbus TCP server): the PLC is stopped for a few seconds in
the middle of the run and restarted. Checks, each against a source outside
the live loop:

- exit status 0 and the report's reconnect count (the process);
- the outage as empty rows of inputs.csv and as a PLC-away window in the
  report, as missing runs per tag and NE107 failure ticks in the replay's
  summary.json (the replay pipeline, holdup's reference);
- estimates.csv written, one row per recorded row (the replay pipeline);
- live == replay bit for bit, as printed by holdup (its own comparison);
- with plc.py --faults: a NaN, exception responses and timeouts each
  reported naming the tags (and the code), the readings missing in
  inputs.csv, and live == replay still;
- a run without --duration stopped by SIGINT: exit 0, report, live ==
  replay;
- the write-back: the output block read from the PLC with a pymodbus
  client, its holdup decoded by the documented layout (input registers
  0-12 header, one quality per species, then holdup as f32 high word
  first) equal to the replay's final holdup as f32.

Usage: python3 tests/modbus/live.py [--holdup target/release/holdup]
Takes about 45 s.
"""

import argparse
import csv
import json
import os
import re
import signal
import socket
import struct
import subprocess
import sys
import tempfile
import time

from pymodbus.client import ModbusTcpClient

HERE = os.path.dirname(os.path.abspath(__file__))
ROOT = os.path.dirname(os.path.dirname(HERE))
CONFIG = os.path.join(ROOT, "fixtures", "plc", "plant.toml")
PORT = 15020
SPECIES = 2  # NaOH, NaCl in fixtures/plc/plant.toml
WRITE_BACK = 100  # [plc] write_back
DURATION_S = 22
STOP_AT_S = 7
AWAY_S = 5
FAULTS_DURATION_S = 13


def start_plc(faults=False):
    p = subprocess.Popen(
        [sys.executable, os.path.join(HERE, "plc.py"), "--port", str(PORT)]
        + (["--faults"] if faults else []),
        stdout=subprocess.DEVNULL,
        stderr=subprocess.PIPE,
    )
    deadline = time.time() + 10
    while time.time() < deadline:
        try:
            socket.create_connection(("127.0.0.1", PORT), timeout=0.2).close()
            return p
        except OSError:
            if p.poll() is not None:
                sys.exit("plc.py exited: " + p.stderr.read().decode())
            time.sleep(0.1)
    p.kill()
    sys.exit("plc.py did not listen on port %d" % PORT)


def stop_plc(p):
    p.terminate()
    try:
        p.wait(timeout=5)
    except subprocess.TimeoutExpired:
        p.kill()
        p.wait()


failures = []


def check(ok, what):
    print(("ok   " if ok else "FAIL ") + what)
    if not ok:
        failures.append(what)


def read_write_back(n):
    """The output block the live run wrote to the PLC."""
    c = ModbusTcpClient("127.0.0.1", port=PORT)
    c.connect()
    r = c.read_holding_registers(WRITE_BACK, count=n, slave=1)
    c.close()
    return None if r.isError() else r.registers


def start_live(holdup, out, duration_s):
    duration = ["--duration", "%d s" % duration_s] if duration_s else []
    return subprocess.Popen(
        [holdup, "live", "--config", CONFIG, "--out", out, "--quiet"] + duration,
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
    )


def outage(holdup):
    """The PLC stopped mid-run and restarted."""
    print("== the PLC away for %d s and back" % AWAY_S)
    out = tempfile.mkdtemp(prefix="holdup-live-")
    plc = start_plc()
    live = start_live(holdup, out, DURATION_S)
    time.sleep(STOP_AT_S)
    stop_plc(plc)
    time.sleep(AWAY_S)
    plc = start_plc()
    try:
        stdout, stderr = live.communicate(timeout=DURATION_S + 20)
        print(stdout)
        print(stderr, file=sys.stderr)
        check(live.returncode == 0, "holdup live exits 0 (got %s)" % live.returncode)
        m = re.search(r"(\d+) connects, (\d+) reconnects, (\d+) lost", stdout)
        check(m is not None and int(m.group(2)) >= 1 and int(m.group(3)) >= 1,
              "the report counts the lost connection and the reconnect")
        check("reconnected to the PLC" in stderr, "the reconnect is shown while running")
        check(re.search(r"PLC away \(no reading at all\): \S+ to \S+", stdout) is not None,
              "the report names the window the PLC was away")
        check("live vs replay: the same bit for bit" in stdout, "live == replay bit for bit")
        with open(os.path.join(out, "live.txt")) as f:
            check(f.read() == stdout, "live.txt holds the printed report")

        with open(os.path.join(out, "inputs.csv")) as f:
            rows = list(csv.reader(f))
        header, body = rows[0], rows[1:]
        empty = [all(c == "" for c in r[1:]) for r in body]
        runs, run = [], 0
        for e in empty:
            run = run + 1 if e else 0
            runs.append(run)
        check(max(runs) >= AWAY_S - 2,
              "inputs.csv holds the outage as empty rows (%d in a row)" % max(runs))
        check(not empty[0] and not empty[-1], "inputs.csv has readings before and after")
        check(header[0] == "time" and len(header) == 7, "inputs.csv has a column per tag")

        with open(os.path.join(out, "estimates.csv")) as f:
            est = list(csv.DictReader(f))
        check(len(est) == len(body), "estimates.csv has a row per recorded row")
        check(any(r["status"] == "F" for r in est),
              "NE107 goes to F while the readings are missing (estimates.csv)")
        with open(os.path.join(out, "summary.json")) as f:
            summary = json.load(f)
        tags = summary["log_stats"]["tags"]
        check(all(t["ticks"]["missing"] + t["ticks"]["stale"] >= AWAY_S - 2 for t in tags),
              "summary.json counts the missing ticks of every tag")
        check(summary["status_ticks"]["failure"] >= 1, "summary.json counts failure ticks")

        n_out = 13 + SPECIES + 6 + 4 * SPECIES + 4  # one bias slot's pair at most
        regs = read_write_back(n_out - 4)
        check(regs is not None, "the PLC holds the written-back block")
        if regs is not None:
            check(regs[0] == 1, "write-back: map version 1 in the block's first register")
            a = 13 + SPECIES
            holdup = struct.unpack(">f", struct.pack(">HH", regs[a], regs[a + 1]))[0]
            final = struct.unpack(">f", struct.pack(">f", summary["final"]["holdup_m3"]))[0]
            check(holdup == final,
                  "write-back: holdup %r from the PLC == replay's final %r" % (holdup, final))
    finally:
        stop_plc(plc)
        if live.poll() is None:
            live.kill()


def column(rows, name):
    i = rows[0].index(name)
    return [r[i] for r in rows[1:]]


def faults(holdup):
    """A value that is not finite, exception responses, timeouts (plc.py
    --faults: their windows are in its doc)."""
    print("== faults: a NaN, exception 02, slow responses")
    out = tempfile.mkdtemp(prefix="holdup-live-faults-")
    plc = start_plc(faults=True)
    live = start_live(holdup, out, FAULTS_DURATION_S)
    try:
        stdout, stderr = live.communicate(timeout=FAULTS_DURATION_S + 20)
        print(stdout)
        print(stderr, file=sys.stderr)
        check(live.returncode == 0, "holdup live exits 0 (got %s)" % live.returncode)
        check("tag FI-210: the PLC holds a value that is not finite" in stderr,
              "the NaN is reported, naming the tag")
        check(re.search(r"tag TI-710, LI-710, XI-110: unit 1, input registers 0\.\.3: "
                        r"exception response, code 02", stderr) is not None,
              "the exception response is reported, naming the tags and the code")
        check("no response within the timeout" in stderr, "the timeout is reported")
        m = re.search(r"(\d+) timeouts, (\d+) exception responses", stdout)
        check(m is not None and int(m.group(1)) >= 1 and int(m.group(2)) >= 1,
              "the report counts timeouts and exception responses")
        check("live vs replay: the same bit for bit" in stdout, "live == replay bit for bit")
        with open(os.path.join(out, "inputs.csv")) as f:
            rows = list(csv.reader(f))
        fi210, fi110, ti710 = (column(rows, t) for t in ("FI-210", "FI-110", "TI-710"))
        check(any(a == "" and b != "" for a, b in zip(fi210, fi110)),
              "inputs.csv: FI-210 missing while the other flows are read")
        check(any(a == "" and b != "" for a, b in zip(ti710, fi110)),
              "inputs.csv: the input registers' tags missing while the flows are read")
    finally:
        stop_plc(plc)
        if live.poll() is None:
            live.kill()


def interrupted(holdup):
    """No --duration: Ctrl-C (SIGINT) ends the run with the full report."""
    print("== stopped by SIGINT")
    out = tempfile.mkdtemp(prefix="holdup-live-int-")
    plc = start_plc()
    live = start_live(holdup, out, None)
    try:
        time.sleep(4)
        live.send_signal(signal.SIGINT)
        stdout, _ = live.communicate(timeout=10)
        check(live.returncode == 0, "holdup live exits 0 after SIGINT (got %s)" % live.returncode)
        check("live vs replay: the same bit for bit" in stdout,
              "after SIGINT: the report, the replay and live == replay")
    finally:
        stop_plc(plc)
        if live.poll() is None:
            live.kill()


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--holdup", default=os.path.join(ROOT, "target", "release", "holdup"))
    args = ap.parse_args()
    started = time.time()
    outage(args.holdup)
    faults(args.holdup)
    interrupted(args.holdup)
    print("%.1f s, %d failed" % (time.time() - started, len(failures)))
    sys.exit(1 if failures else 0)


if __name__ == "__main__":
    main()
