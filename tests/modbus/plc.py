"""A simulated PLC for `holdup live` tests: a pymodbus 3.8 Modbus TCP server
holding the signals of an invented blend tank (T-7) at the addresses of
fixtures/plc/plant.toml, changing every second.

Holding registers (protocol addresses, 0-based; a PLC manual's 40001 is 0):
  0-1  FI-110 caustic feed flow, m3/h, f32, high word first
  2-3  FI-120 dilution water flow, m3/h, f32, LOW word first
  4-5  FI-210 outlet flow, m3/h, f32, high word first
  100- written back by holdup (the sensor's output block)
Input registers:
  0    TI-710 temperature, 0.1 degC per count, i16
  1    LI-710 level, mm, u16
  2-3  XI-110 caustic strength, micromol/L, u32, high word first

The signals are functions of wall-clock time, so a PLC restarted after a
stop goes on where the stopped one would have been.

With --faults, in seconds after the start: FI-210 holds a NaN from 3 to 6
(a value that is not finite), the input registers answer exception 02
(illegal data address) from 6 to 9, and holding-register reads are
answered only after 0.6 s (past the fixture's 300 ms timeout) from 9 to 11.

Usage: python3 plc.py [--port 15020] [--faults]
"""

import argparse
import asyncio
import math
import struct
import time

from pymodbus.datastore import (
    ModbusSequentialDataBlock,
    ModbusServerContext,
    ModbusSlaveContext,
)
from pymodbus.server import StartAsyncTcpServer

HOLDING_SIZE = 200
INPUT_SIZE = 4

# Fault windows of --faults, seconds after the start.
NAN_WINDOW = (3.0, 6.0)
EXCEPTION_WINDOW = (6.0, 9.0)
SLOW_WINDOW = (9.0, 11.0)
SLOW_S = 0.6


def within(window, t):
    return window[0] <= t < window[1]


class FaultyPlc(ModbusSlaveContext):
    """A datastore that misbehaves in the fault windows."""

    def __init__(self, start, **kwargs):
        super().__init__(**kwargs)
        self.start = start

    def since_start(self):
        return time.time() - self.start

    def validate(self, fc_as_hex, address, count=1):
        if fc_as_hex == 4 and within(EXCEPTION_WINDOW, self.since_start()):
            return False  # pymodbus answers exception 02
        return super().validate(fc_as_hex, address, count)

    async def async_getValues(self, fc_as_hex, address, count=1):
        if fc_as_hex == 3 and within(SLOW_WINDOW, self.since_start()):
            await asyncio.sleep(SLOW_S)
        return await super().async_getValues(fc_as_hex, address, count)


def f32_words(x, high_first=True):
    """The two registers of an IEEE 754 single (big-endian bytes per word)."""
    hi, lo = struct.unpack(">HH", struct.pack(">f", x))
    return [hi, lo] if high_first else [lo, hi]


def signals(t):
    """The plant's signals at time t (s), in the plant's units."""
    return {
        "FI-110": 0.40 + 0.05 * math.sin(t / 10.0),
        "FI-120": 0.80 + 0.05 * math.cos(t / 7.0),
        "FI-210": 1.20 + 0.02 * math.sin(t / 5.0),
        "TI-710": 25.0 + 0.5 * math.sin(t / 20.0),
        "LI-710": 1.00 + 0.01 * math.sin(t / 15.0),
        "XI-110": 0.50 + 0.01 * math.sin(t / 30.0),
    }


def registers(t, nan_outlet=False):
    """(holding 0-5, input 0-3) at time t."""
    s = signals(t)
    if nan_outlet:
        s["FI-210"] = float("nan")
    holding = (
        f32_words(s["FI-110"])
        + f32_words(s["FI-120"], high_first=False)
        + f32_words(s["FI-210"])
    )
    temp = round(s["TI-710"] * 10) & 0xFFFF
    level = round(s["LI-710"] * 1000)
    strength = round(s["XI-110"] * 1e6)
    inputs = [temp, level, strength >> 16, strength & 0xFFFF]
    return holding, inputs


async def update(slave, faults, start):
    while True:
        now = time.time()
        holding, inputs = registers(now, faults and within(NAN_WINDOW, now - start))
        # pymodbus 3.8 contexts add 1 to the protocol address.
        slave.setValues(3, 0, holding)
        slave.setValues(4, 0, inputs)
        await asyncio.sleep(1.0 - (time.time() % 1.0))


async def main(port, faults):
    start = time.time()
    # Blocks start at 1: pymodbus 3.8 maps protocol address 0 to block address 1.
    slave = FaultyPlc(
        start if faults else float("inf"),
        hr=ModbusSequentialDataBlock(1, [0] * HOLDING_SIZE),
        ir=ModbusSequentialDataBlock(1, [0] * INPUT_SIZE),
    )
    context = ModbusServerContext(slaves={1: slave}, single=False)
    holding, inputs = registers(time.time())
    slave.setValues(3, 0, holding)
    slave.setValues(4, 0, inputs)
    task = asyncio.create_task(update(slave, faults, start))
    try:
        await StartAsyncTcpServer(context=context, address=("127.0.0.1", port))
    finally:
        task.cancel()


if __name__ == "__main__":
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--port", type=int, default=15020)
    parser.add_argument("--faults", action="store_true")
    args = parser.parse_args()
    asyncio.run(main(args.port, args.faults))
