#!/usr/bin/env bash
# The gateway against a real Modbus client over a socket, bit for bit.
#
#   bash kernel/firmware/modbus-check.sh [TICKS]     (default 660)
#
# Builds the gateway (`holdup-gateway`, Clock::Sequence) and the host
# program `host/gateway-expect` (the PLC's writes and the expected input
# registers of every tick, from the host's f32 pipeline), starts QEMU with
# UART 0 on a TCP socket of 127.0.0.1, and runs tests/modbus/gateway.py
# (pymodbus 3.8.6, RTU framing over that socket) against it. Exit status 0
# only when every register of every tick agreed and every malformed or
# illegal request got the answer (or the silence) the protocol asks for.
#
# Timing on the emulator. The gateway ends a frame after 1.75 ms of silence
# on timer 0, and QEMU hands the UART the socket's bytes one at a time (the
# CMSDK UART holds one byte; its I/O thread delivers the next after the
# guest reads DATA). What was tried, 400 writes of 21-39 bytes each:
#  * a guest that busy-polls: about half the frames cut in two (both halves
#    dropped on their CRC, as they must be): the spinning vCPU thread takes
#    the core the I/O thread needs, and two bytes of one frame arrive more
#    than 1.75 ms apart;
#  * the guest sleeping in WFI when idle, polling the UART when awake:
#    394/400 answered without -icount, 396/400 with -icount shift=10
#    (sleep=on: an idle guest's virtual time follows real time, so the two
#    behave alike), on a machine at load average 2-4; the rest were cut by
#    host scheduling pauses longer than 1.75 ms;
#  * what the gateway does: the byte taken in the UART's receive interrupt
#    (stamped there), WFI when idle: 100/100 in the same test, and 11
#    repeats in the 1,986 requests of a 660-tick check (0.6 %);
#  * -icount shift=10,sleep=off: 0/400. An idle guest's clock jumps at once
#    to its next timer deadline, the frame-end alarm, before the I/O thread
#    delivers the next byte.
# So QEMU runs here without -icount (the guest's timers run on the host's
# clock) and the client repeats a request that got no answer (every request
# of the check can be repeated); the repeats are counted and printed.
# Instruction counts are the load mode's business (`gateway-load`, with
# -icount, bytes injected with their nominal times); this check is about
# bits on the wire and the protocol's answers.
#
# Needs: qemu-system-arm, the thumbv7em-none-eabihf target, python3 with
# pymodbus 3.8.6 (`pip install pymodbus==3.8.6`).
set -euo pipefail
cd "$(dirname "$0")"
ticks="${1:-660}"
root="$(cd ../.. && pwd)"

target_dir="${CARGO_TARGET_DIR:-target}"
elf="$target_dir/thumbv7em-none-eabihf/release/holdup-gateway"
cargo build --release --quiet --features gateway --bin holdup-gateway
work="$(mktemp -d)"
(cd host/gateway-expect && cargo run --release --quiet -- "$ticks") > "$work/expect.jsonl"

port="$(python3 -c 'import socket; s = socket.socket(); s.bind(("127.0.0.1", 0)); print(s.getsockname()[1])')"
qemu-system-arm -M mps2-an386 -cpu cortex-m4 -display none -monitor none \
  -chardev "socket,id=plc,host=127.0.0.1,port=$port,server=on,wait=off" -serial chardev:plc \
  -semihosting-config enable=on,target=native -kernel "$elf" > "$work/qemu.log" 2>&1 &
qemu=$!
trap 'kill "$qemu" 2> /dev/null || true; rm -rf "$work"' EXIT
start=$(date +%s)
status=0
python3 "$root/tests/modbus/gateway.py" 127.0.0.1 "$port" "$work/expect.jsonl" || status=$?
echo "modbus-check: $(( $(date +%s) - start )) s, exit $status"
exit "$status"
