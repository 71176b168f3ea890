#!/usr/bin/env python3
"""The gateway's socket check: a real Modbus client against the firmware.

pymodbus 3.8.6 (the client; its RTU framer and its CRC-16/MODBUS) talks
Modbus RTU over the TCP socket QEMU puts on the gateway's UART 0. For every
tick of the schedule printed by `host/gateway-expect` it writes the PLC's
two writes (tail, then head: outlet flow, temperature and level, then the
input sequence, lab registers and inlet flows: the raw 4-20 mA readings of
the firmware's instruments), reads the whole input block back and compares
it register by register with the host's f32 pipeline on the same inputs.

Halfway, over the same socket: a frame with a wrong CRC and a frame for
another unit (both must get no answer: the client times out and the
session goes on), then an illegal function, an illegal address and an
illegal length (exceptions 01, 02, 03 of the Modbus application protocol,
common practice); then the scenario continues and must still agree.

    python3 tests/modbus/gateway.py HOST PORT EXPECT.jsonl

Exit status 0 only when everything agreed.
"""

import json
import select
import sys
import time

from pymodbus.client import ModbusTcpClient
from pymodbus.exceptions import ModbusIOException
from pymodbus.framer import FramerType
from pymodbus.framer.rtu import FramerRTU

# No answer within this is "no answer" (the gateway answers within a few
# milliseconds of the frame's end).
SILENT_S = 0.5
# A request that got no answer is sent again, at most this many times. On
# the emulator a frame can be cut in two: QEMU's I/O thread hands the UART
# one byte at a time, and when the host is busy it may pause longer than
# the 1.75 ms frame-end silence between two bytes of one frame; the gateway
# then drops both halves (CRC), as it must. Every request here can be
# repeated (writes of absolute values, reads); the retries are counted and
# printed, and more than RETRIES in a row fail the check.
RETRIES = 5
TIMEOUT_S = 0.3


class Retrying:
    """A request, repeated while it times out; counts the repeats."""

    def __init__(self):
        self.retried = 0

    def __call__(self, request):
        for attempt in range(RETRIES + 1):
            try:
                return request()
            except ModbusIOException:
                if attempt == RETRIES:
                    raise
                self.retried += 1
        raise AssertionError("unreachable")


def crc(frame: bytes) -> bytes:
    """CRC-16/MODBUS of `frame`, low byte first, by pymodbus's framer."""
    return FramerRTU.compute_CRC(frame).to_bytes(2, "big")


def raw_exchange(client, frame: bytes, wait_s: float) -> bytes:
    """Send `frame` on the client's socket; what comes back within `wait_s`."""
    sock = client.socket
    sock.sendall(frame)
    got = b""
    deadline = time.monotonic() + wait_s
    while True:
        left = deadline - time.monotonic()
        if left <= 0:
            return got
        ready, _, _ = select.select([sock], [], [], left)
        if not ready:
            return got
        chunk = sock.recv(512)
        if not chunk:
            return got
        got += chunk
        # An exception response is 5 bytes; stop once a whole one is in.
        if len(got) >= 5 and got[1] & 0x80:
            return got


class Check:
    def __init__(self):
        self.failed = 0
        self.passed = 0

    def __call__(self, ok: bool, what: str):
        if ok:
            self.passed += 1
        else:
            self.failed += 1
            print(f"FAIL {what}", flush=True)


def connect(host: str, port: int) -> ModbusTcpClient:
    client = ModbusTcpClient(host, port=port, framer=FramerType.RTU, timeout=TIMEOUT_S, retries=0)
    for _ in range(100):
        if client.connect():
            return client
        time.sleep(0.1)
    raise SystemExit(f"gateway.py: no gateway on {host}:{port}")


def negative_tests(client, unit: int, input_len: int, check: Check, retry: Retrying):
    # A read of the whole input block with its CRC broken: silence.
    pdu = bytes([unit, 0x04, 0, 0, 0, input_len])
    good = pdu + crc(pdu)
    bad = good[:-2] + bytes([good[-2] ^ 0xFF, good[-1]])
    got = raw_exchange(client, bad, SILENT_S)
    check(got == b"", f"wrong CRC answered: {got.hex()}")
    # The same read for another unit: silence (another device's frame on
    # a shared line).
    other = bytes([unit + 1, 0x04, 0, 0, 0, input_len])
    got = raw_exchange(client, other + crc(other), SILENT_S)
    check(got == b"", f"other unit answered: {got.hex()}")
    # The session goes on: the good frame is answered, CRC by pymodbus.
    n = 5 + 2 * input_len
    got = b""
    for _ in range(RETRIES + 1):
        got = raw_exchange(client, good, SILENT_S)
        if got:
            break
        retry.retried += 1
    check(len(got) == n and got[:3] == bytes([unit, 0x04, 2 * input_len])
          and crc(got[:-2]) == got[-2:], f"good frame after silence: {got.hex()}")
    # 01 illegal function: discrete inputs (function 02) are not served.
    r = retry(lambda: client.read_discrete_inputs(0, count=1, slave=unit))
    check(r.isError() and r.exception_code == 1, f"illegal function: {r}")
    # 02 illegal data address: two registers from the last input register.
    r = retry(lambda: client.read_input_registers(input_len - 1, count=2, slave=unit))
    check(r.isError() and r.exception_code == 2, f"illegal address: {r}")
    # 03 illegal data value: 126 registers (a read carries at most 125).
    raw = bytes([unit, 0x04, 0, 0, 0, 126])
    for _ in range(RETRIES + 1):
        got = raw_exchange(client, raw + crc(raw), SILENT_S)
        if got:
            break
        retry.retried += 1
    check(got[:3] == bytes([unit, 0x84, 0x03]) and len(got) == 5 and crc(got[:3]) == got[3:],
          f"illegal length: {got.hex()}")


def main() -> int:
    host, port, path = sys.argv[1], int(sys.argv[2]), sys.argv[3]
    with open(path) as f:
        header = json.loads(f.readline())
        ticks = [json.loads(line) for line in f]
    unit, input_len = header["unit"], header["input_len"]
    check = Check()
    retry = Retrying()
    client = connect(host, port)
    start = time.monotonic()
    middle = len(ticks) // 2
    differing = 0
    for t in ticks:
        n = t["n"]
        if n == middle:
            negative_tests(client, unit, input_len, check, retry)
        w = retry(lambda: client.write_registers(t["tail_at"], t["tail"], slave=unit))
        check(not w.isError(), f"tick {n}: tail write: {w}")
        w = retry(lambda: client.write_registers(t["head_at"], t["head"], slave=unit))
        check(not w.isError(), f"tick {n}: head write: {w}")
        r = retry(lambda: client.read_input_registers(0, count=input_len, slave=unit))
        if r.isError():
            check(False, f"tick {n}: read: {r}")
            continue
        same = list(r.registers) == t["expect"]
        if not same:
            differing += 1
            if differing <= 5:
                diff = [(i, a, b) for i, (a, b) in enumerate(zip(r.registers, t["expect"])) if a != b]
                print(f"tick {n}: registers differ (address, gateway, host): {diff}", flush=True)
        check(same, f"tick {n}: input registers")
    client.close()
    took = time.monotonic() - start
    print(f"gateway.py: {len(ticks)} ticks (lab draw at {header['draw_at']} s, result at "
          f"{header['result_at']} s, level loop fault {header['fault_at']}-"
          f"{header['fault_at'] + header['fault_s'] - 1} s), {check.passed} checks passed, "
          f"{check.failed} failed, {differing} ticks differ; {retry.retried} requests repeated "
          f"after no answer (frames cut by the emulator's I/O); {took:.1f} s", flush=True)
    return 0 if check.failed == 0 and check.passed > 0 else 1


if __name__ == "__main__":
    sys.exit(main())
