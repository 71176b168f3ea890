#!/usr/bin/env python3
"""Check `holdup serve` from outside with a real Modbus TCP client
(pymodbus 3.8.6), against `holdup replay` of the same log as reference.

Agreement (bit for bit, f32): the server runs with `--clock sequence`.
For serve tick k = 1, 2, ..., M-1 (M rows in the log) the driver writes
log row k-1 (time t0 + (k-1)·tick) and the lab events the replay applies at
that time into the holding registers, then raises the input sequence; the
server runs one tick at sensor time (k-1)·tick on them. The replay, at
time t = t0 + (k-1)·tick, applies the same lab events and ticks from t on
the same row; its estimates.csv row k (time t0 + k·tick) is the state after
that tick with that tick's status. So the input registers read after serve
tick k equal estimates.csv row k; row 0 (the initial state) equals the
registers before the first tick. Every f32 of the row is parsed exactly to
its nearest f32 and compared by its bits; status, qualities, reasons and
kernel flags are compared by code and name.

Faults, against the running server: frames with a broken MBAP header,
inconsistent lengths, a header sent in pieces, another unit id, illegal
function (01), address (02) and length (03), a silent connection kept open
while the ticks go on (and closed after the idle timeout), too many
clients, writes on the read-only port; then, on a second server in real
time, the watchdog: inputs no longer raised -> status 4 (F), the STALE
flag, and the holdup's sigma growing.

Exit status 0 only if everything agreed.

Usage: python3 tests/modbus/serve.py [--holdup target/debug/holdup]
"""

import argparse
import csv
import logging
import os
import re
import socket
import struct
import subprocess
import sys
import tempfile
import time
import tomllib
from fractions import Fraction
from pathlib import Path

from pymodbus.client import ModbusTcpClient

ROOT = Path(__file__).resolve().parents[2]
FIXTURE = ROOT / "fixtures" / "link"
IDLE_S = 2
MAX_CLIENTS = 8
STALE_S = 3
UNIT = 1

FAILURES = []


def check(ok, what):
    """Record one check (the source of truth is named in `what`)."""
    if not ok:
        FAILURES.append(what)
        print(f"FAIL: {what}", file=sys.stderr)
    return ok


# --- f32 helpers -----------------------------------------------------------

def f32_bits_of_decimal(text):
    """The bits of the f32 nearest to the decimal `text` (exact: the
    candidates around the double's rounding are compared as fractions, so
    no double rounding), ties to even."""
    if text.lower() == "nan":
        return None
    exact = Fraction(text)
    (guess,) = struct.unpack(">I", struct.pack(">f", float(text)))
    best = None
    for bits in (guess - 1, guess, guess + 1):
        if bits < 0 or (bits & 0x7F800000) == 0x7F800000:
            continue
        (v,) = struct.unpack(">f", struct.pack(">I", bits))
        d = abs(Fraction(v) - exact)
        if best is None or d < best[0] or (d == best[0] and bits % 2 == 0):
            best = (d, bits)
    return best[1]


def f32_bits_to_text(bits):
    (v,) = struct.unpack(">f", struct.pack(">I", bits))
    return f"{v!r} (0x{bits:08X})"


def f32_words(x, order):
    (bits,) = struct.unpack(">I", struct.pack(">f", x))
    return words32(bits, order)


def words32(bits, order):
    hi, lo = bits >> 16, bits & 0xFFFF
    return [hi, lo] if order == "high-first" else [lo, hi]


def join32(regs, a, order):
    w0, w1 = regs[a], regs[a + 1]
    return (w0 << 16 | w1) if order == "high-first" else (w1 << 16 | w0)


def f32_of(regs, a, order):
    (v,) = struct.unpack(">f", struct.pack(">I", join32(regs, a, order)))
    return v


# --- the map and its code tables, from `holdup registers` ------------------

class RegisterMap:
    """registers.csv and the code tables of registers.md."""

    def __init__(self, out_dir):
        self.entries = {}
        with open(out_dir / "registers.csv", newline="") as f:
            for row in csv.DictReader(f):
                self.entries[(row["table"], row["key"])] = int(row["address"])
        self.holding_len = max(a + 2 for (t, _), a in self.entries.items() if t == "holding")
        self.input_len = max(a + 2 for (t, _), a in self.entries.items() if t == "input")
        md = (out_dir / "registers.md").read_text()
        self.kernel_flags = self._bits(md, "## Kernel flags")
        self.reasons = self._bits(md, "## NE107 reasons")

    @staticmethod
    def _bits(md, title):
        part = md.split(title, 1)[1].split("\n## ", 1)[0]
        return {name: int(bit) for bit, name in re.findall(r"^\| (\d+) \| (\w+) \|$", part, re.M)}

    def holding(self, key):
        return self.entries[("holding", key)]

    def input(self, key):
        return self.entries[("input", key)]


# --- the server -------------------------------------------------------------

class Server:
    """`holdup serve` as a child process on free ports."""

    def __init__(self, holdup, config, *extra):
        cmd = [str(holdup), "serve", "--config", str(config), "--listen", "127.0.0.1:0",
               "--unit", str(UNIT), *extra]
        self.proc = subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                                     text=True)
        self.port = self.ro_port = None
        self.banner = []
        deadline = time.monotonic() + 30
        while self.port is None and time.monotonic() < deadline:
            line = self.proc.stdout.readline()
            if not line:
                raise SystemExit(f"holdup serve exited: {self.proc.stderr.read()}")
            self.banner.append(line)
            if m := re.match(r"read-only on 127\.0\.0\.1:(\d+)", line):
                self.ro_port = int(m[1])
            if m := re.match(r"listening on 127\.0\.0\.1:(\d+)", line):
                self.port = int(m[1])
        if self.port is None:
            raise SystemExit("holdup serve printed no `listening on` line")

    def alive(self):
        return self.proc.poll() is None

    def stop(self):
        self.proc.terminate()
        self.proc.wait(timeout=10)


def client(port):
    c = ModbusTcpClient("127.0.0.1", port=port, timeout=2, retries=0)
    if not c.connect():
        raise SystemExit(f"cannot connect to 127.0.0.1:{port}")
    return c


def read_inputs(c, n):
    r = c.read_input_registers(0, count=n, slave=UNIT)
    if r.isError():
        raise SystemExit(f"reading the input registers failed: {r}")
    return list(r.registers)


# --- the log, the lab and the plant ------------------------------------------

def plant_sources(plant):
    """Each holding key fed from a log tag: {key: tag}. The fixture's units
    are SI, so the log's values go to the registers unchanged."""
    si = {"m3/s", "mol/m3", "K", "m"}
    out = {}
    species = [s["name"] for s in plant["species"]]

    def take(key, sig):
        if isinstance(sig, dict) and "tag" in sig:
            if sig.get("unit") not in si:
                raise SystemExit(f"fixture tag {sig['tag']}: unit {sig.get('unit')} is not SI")
            out[key] = sig["tag"]

    for k, inlet in enumerate(plant["inlet"]):
        take(f"inlet_flow[{k}]", inlet["flow"])
        for name, sig in inlet.get("feed", {}).items():
            take(f"feed[{k}][{species.index(name)}]", sig)
    for k, outlet in enumerate(plant["outlet"]):
        take(f"outlet_flow[{k}]", outlet.get("flow"))
    take("temperature", plant["temperature"])
    take("level", plant["level"])
    return out, species


def load_log(path):
    with open(path, newline="") as f:
        rows = list(csv.DictReader(f))
    return rows


def load_lab(path, species):
    """Lab rows in sample-time order (the replay's sample ids are these
    indices), times in s."""
    with open(path, newline="") as f:
        rows = list(csv.DictReader(f))
    rows.sort(key=lambda r: int(r["sample_time"]))
    for r in rows:
        if r["unit"] != "mol/m3":
            raise SystemExit(f"lab unit {r['unit']} is not SI")
    return [(int(r["sample_time"]), species.index(r["species"]), r["value"],
             int(r.get("result_time") or r["sample_time"])) for r in rows]


# --- agreement ---------------------------------------------------------------

STATUS = {"-": 0, "M": 1, "S": 2, "C": 3, "F": 4}
QUALITY = {"good": 0, "uncertain": 1, "bad": 2}


def compare_row(k, row, regs, m, species, order):
    """estimates.csv row `k` against the input registers."""
    f32s = [("holdup_m3", "holdup"), ("holdup_sigma_m3", "holdup_sigma"),
            ("level_m", "level_estimate"), ("bias_feed_pump", "bias[0]"),
            ("bias_feed_pump_sigma", "bias_sigma[0]")]
    for i, s in enumerate(species):
        f32s += [(f"{s}_mol_m3", f"concentration[{i}]"),
                 (f"{s}_sigma_mol_m3", f"concentration_sigma[{i}]")]
    ok = True
    for col, key in f32s:
        want = f32_bits_of_decimal(row[col])
        got = join32(regs, m.input(key), order)
        ok &= check(want == got, f"tick {k}: {key} served {f32_bits_to_text(got)}, "
                                 f"replay estimates.csv {col} = {row[col]}")
    if k == 0:
        return ok
    names = lambda table, bits: sorted(n for n, b in table.items() if bits >> b & 1)
    ints = [
        ("status", STATUS[row["status"]], regs[m.input("device_status")]),
        ("holdup_quality", QUALITY[row["holdup_quality"]], regs[m.input("holdup_quality")]),
        ("concentration_quality", QUALITY[row["concentration_quality"]],
         max(regs[m.input(f"concentration_quality[{i}]")] for i in range(len(species)))),
        ("reasons", sorted(filter(None, row["reasons"].split("|"))),
         names(m.reasons, join32(regs, m.input("reasons"), order))),
        ("flags", sorted(filter(None, row["flags"].split("|"))),
         names(m.kernel_flags, regs[m.input("kernel_flags")])),
        ("tick_count", k, join32(regs, m.input("tick_count"), order)),
        ("heartbeat", k & 0xFFFF, regs[m.input("heartbeat")]),
        ("sequence_applied", k & 0xFFFF, regs[m.input("sequence_applied")]),
    ]
    for what, want, got in ints:
        ok &= check(want == got, f"tick {k}: {what} served {got}, replay {want}")
    return ok


def agreement(holdup, tmp, order):
    """The whole log through the server, each tick against the replay."""
    plant = tomllib.loads((FIXTURE / "plant.toml").read_text())
    sources, species = plant_sources(plant)
    rel_sigma = plant.get("estimator", {}).get("lab_sigma", 0.02)
    rep = tmp / "replay"
    subprocess.run([str(holdup), "replay", "--config", str(FIXTURE / "plant.toml"), "--log",
                    str(FIXTURE / "log.csv"), "--lab", str(FIXTURE / "lab.csv"), "--out", str(rep),
                    "--every", "tick", "-q"], check=True, stdout=subprocess.DEVNULL)
    with open(rep / "estimates.csv", newline="") as f:
        estimates = list(csv.DictReader(f))
    subprocess.run([str(holdup), "registers", "--config", str(FIXTURE / "plant.toml"), "--out",
                    str(tmp / "regs")], check=True, stdout=subprocess.DEVNULL)
    m = RegisterMap(tmp / "regs")
    log = load_log(FIXTURE / "log.csv")
    labs = load_lab(FIXTURE / "lab.csv", species)
    check(len(estimates) == len(log), "replay writes one row per log row (every tick)")

    srv = Server(holdup, FIXTURE / "plant.toml", "--clock", "sequence", "--word-order", order,
                 "--stale-after", "off", "--idle-timeout", f"{IDLE_S} s", "--max-clients",
                 str(MAX_CLIENTS), "--read-only-listen", "127.0.0.1:0")
    try:
        banner = "".join(srv.banner)
        check("advisory" in banner and "no authentication" in banner,
              "serve prints the caution and the security note at start")
        c = client(srv.port)
        silent = socket.create_connection(("127.0.0.1", srv.port))
        hold = c.read_holding_registers(0, count=m.holding_len, slave=UNIT).registers
        regs = read_inputs(c, m.input_len)
        compare_row(0, estimates[0], regs, m, species, order)
        t0 = int(log[0]["time"])
        draw_seq = result_seq = 0
        outcomes = []
        for k in range(1, len(log)):
            t = t0 + k - 1
            block = list(hold)
            for key, tag in sources.items():
                a = m.holding(key)
                block[a:a + 2] = f32_words(float(log[k - 1][tag]), order)
            draws = [(i, lab) for i, lab in enumerate(labs) if lab[0] == t]
            results = [(i, lab) for i, lab in enumerate(labs) if lab[3] == t]
            check(len(draws) + len(results) <= 1, f"fixture: one lab event per tick at {t}")
            for i, (_, sp, _, _) in draws:
                c_est = f32_of(regs, m.input(f"concentration[{sp}]"), order)
                draw_seq += 1
                block[m.holding("lab_species")] = sp
                block[4:6] = words32(i, order)
                a = m.holding("lab_sigma")
                block[a:a + 2] = f32_words(rel_sigma * max(abs(c_est), 0.1), order)
            for i, (_, _, value, _) in results:
                result_seq += 1
                block[4:6] = words32(i, order)
                a = m.holding("lab_value")
                block[a:a + 2] = f32_words(float(value), order)
            block[1], block[2] = draw_seq & 0xFFFF, result_seq & 0xFFFF
            w = c.write_registers(1, block[1:], slave=UNIT)
            check(not w.isError(), f"tick {k}: writing the inputs: {w}")
            w = c.write_register(0, k & 0xFFFF, slave=UNIT)
            check(not w.isError(), f"tick {k}: raising the sequence: {w}")
            hold = block
            regs = read_inputs(c, m.input_len)
            if draws or results:
                outcomes.append(regs[m.input("lab_outcome")])
            compare_row(k, estimates[k], regs, m, species, order)
        summary = (rep / "summary.json").read_text()
        fused = int(re.search(r'"fused": (\d+)', summary)[1])
        check(outcomes.count(4) == fused and fused > 0,
              f"lab outcomes served {outcomes} (4 = fused); replay summary: {fused} fused")
        c.close()
        faults(srv, m, silent)
        check(srv.alive(), "the server is still running after the faults")
    finally:
        srv.stop()


# --- faults ------------------------------------------------------------------

def raw(port):
    s = socket.create_connection(("127.0.0.1", port), timeout=1)
    return s


def recv_or_none(s, timeout):
    """The bytes received; b"" when the server closed the connection (a
    close with unread input is a reset); None when nothing came."""
    s.settimeout(timeout)
    try:
        return s.recv(300)
    except ConnectionResetError:
        return b""
    except socket.timeout:
        return None


def read_frame(tid, unit, address, count, fc=4):
    return struct.pack(">HHHBBHH", tid, 0, 6, unit, fc, address, count)


def faults(srv, m, silent):
    # The silent connection was open through every tick above; after the
    # idle timeout the server has closed it.
    time.sleep(IDLE_S + 0.5)
    check(recv_or_none(silent, 1) == b"", "a silent connection is closed after the idle timeout")
    silent.close()
    c = client(srv.port)

    s = raw(srv.port)
    # A header sent in three pieces is reassembled (Modbus TCP: MBAP length).
    req = read_frame(0x0101, UNIT, 0, 2)
    for part in (req[:3], req[3:7], req[7:]):
        s.sendall(part)
        time.sleep(0.1)
    r = recv_or_none(s, 2)
    check(r is not None and r[:2] == b"\x01\x01" and r[7] == 4,
          f"a request sent in pieces is answered: {r!r}")
    # Inconsistent lengths: a write of 100 registers whose byte count says
    # 200 bytes, in a frame of 13 bytes; dropped, the connection goes on.
    bad = struct.pack(">HHHBBHHB", 0x0202, 0, 7, UNIT, 0x10, 0, 100, 200)
    s.sendall(bad)
    check(recv_or_none(s, 0.5) is None, "a frame whose lengths disagree gets no answer")
    s.sendall(read_frame(0x0303, UNIT, 0, 1))
    r = recv_or_none(s, 2)
    check(r is not None and r[:2] == b"\x03\x03", f"the connection still works after it: {r!r}")
    # Another unit id: no answer (the request is not ours).
    s.sendall(read_frame(0x0404, UNIT + 6, 0, 1))
    check(recv_or_none(s, 0.5) is None, "a request for another unit id gets no answer")
    # A header with protocol id 1 cannot be Modbus TCP: the server closes.
    s.sendall(struct.pack(">HHHBBHH", 0x0505, 1, 6, UNIT, 4, 0, 1))
    check(recv_or_none(s, 2) == b"", "a broken MBAP header closes the connection")
    s.close()

    # Exceptions (Modbus Application Protocol v1.1b3, section 7).
    r = c.read_discrete_inputs(0, count=1, slave=UNIT)
    check(r.isError() and r.exception_code == 1, f"function 02 is illegal: {r}")
    r = c.read_input_registers(m.input_len - 1, count=2, slave=UNIT)
    check(r.isError() and r.exception_code == 2, f"reading past the map is an illegal address: {r}")
    # pymodbus refuses to send a count above 125 or of 0: raw frames.
    s = raw(srv.port)
    for count in (126, 0):
        s.sendall(read_frame(0x0707, UNIT, 0, count))
        r = recv_or_none(s, 2)
        check(r == bytes([7, 7, 0, 0, 0, 3, UNIT, 0x84, 3]),
              f"reading {count} registers is an illegal length (exception 03): {r!r}")
    s.close()
    r = c.write_coil(1, True, slave=UNIT)
    check(r.isError() and r.exception_code == 4, f"save checkpoint without checkpoints: {r}")

    # The read-only port answers reads and refuses writes with 01.
    ro = client(srv.ro_port)
    r = ro.read_input_registers(0, count=2, slave=UNIT)
    check(not r.isError() and r.registers[0] == 1, f"reads on the read-only port: {r}")
    r = ro.write_register(0, 7, slave=UNIT)
    check(r.isError() and r.exception_code == 1, f"writes on the read-only port: {r}")
    ro.close()
    h = c.read_holding_registers(0, count=1, slave=UNIT)
    check(not h.isError() and h.registers[0] != 7, "the refused write changed nothing")

    # Too many clients: beyond the limit connections are closed at once.
    time.sleep(0.3)
    extra = [raw(srv.port) for _ in range(MAX_CLIENTS + 3)]
    time.sleep(0.5)
    closed = sum(1 for s in extra if recv_or_none(s, 0.2) == b"")
    # Open before: the pymodbus client only.
    check(closed == 4, f"{closed} of {len(extra)} extra connections closed (limit {MAX_CLIENTS})")
    for s in extra:
        s.close()
    time.sleep(0.3)
    c.close()  # idle past the timeout by now: a new connection
    c = client(srv.port)
    r = c.read_input_registers(0, count=1, slave=UNIT)
    check(not r.isError(), "a client is served after the crowd left")
    c.close()



# --- the watchdog ------------------------------------------------------------

def watchdog(holdup, tmp, order):
    """Real time: the inputs raised each second, then no more."""
    m = RegisterMap(tmp / "regs")
    plant = tomllib.loads((FIXTURE / "plant.toml").read_text())
    sources, _ = plant_sources(plant)
    log = load_log(FIXTURE / "log.csv")
    srv = Server(holdup, FIXTURE / "plant.toml", "--clock", "real", "--word-order", order,
                 "--stale-after", f"{STALE_S} s")
    try:
        c = client(srv.port)
        for k in range(4):
            for key, tag in sources.items():
                c.write_registers(m.holding(key), f32_words(float(log[k][tag]), order), slave=UNIT)
            c.write_register(0, k + 1, slave=UNIT)
            time.sleep(1)
        regs = read_inputs(c, m.input_len)
        check(regs[m.input("link_flags")] & 1 == 0 and regs[m.input("device_status")] != 4,
              f"fresh inputs are not stale (status {regs[m.input('device_status')]})")
        time.sleep(STALE_S + 1.5)
        regs = read_inputs(c, m.input_len)
        check(regs[m.input("link_flags")] & 1 == 1, "STALE is set once the sequence stops")
        check(regs[m.input("device_status")] == 4, "status is F (4) on stale inputs")
        check(regs[m.input("holdup_quality")] == 2, "the holdup is bad on stale inputs")
        s0 = f32_of(regs, m.input("holdup_sigma"), order)
        time.sleep(3.2)
        s1 = f32_of(read_inputs(c, m.input_len), m.input("holdup_sigma"), order)
        check(s1 > s0, f"the holdup's sigma grows on stale inputs: {s0} -> {s1}")
        c.close()
    finally:
        srv.stop()


def main():
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    target = Path(os.environ.get("CARGO_TARGET_DIR", ROOT / "target"))
    ap.add_argument("--holdup", type=Path, default=target / "debug" / "holdup",
                    help="the holdup binary (default: $CARGO_TARGET_DIR/debug/holdup)")
    args = ap.parse_args()
    # Exceptions are expected here; the checks report them.
    logging.getLogger("pymodbus").setLevel(logging.CRITICAL)
    if not args.holdup.is_file():
        raise SystemExit(f"--holdup: {args.holdup} not found; build it with cargo build -p holdup-sim")
    with tempfile.TemporaryDirectory() as d:
        tmp = Path(d)
        for order in ("high-first", "low-first"):
            print(f"agreement with the replay, word order {order} ...")
            agreement(args.holdup, tmp, order)
        print("watchdog ...")
        watchdog(args.holdup, tmp, "high-first")
    if FAILURES:
        print(f"{len(FAILURES)} check(s) failed", file=sys.stderr)
        return 1
    print("serve.py: every check agreed")
    return 0


if __name__ == "__main__":
    sys.exit(main())
