#!/usr/bin/env bash
# Prints the gateway firmware's measured table: instructions per tick
# (exact, from QEMU's -icount) open loop and of the soft sensor's pipeline
# tick, flops and their ratio, kernel, observer and sensor state sizes,
# stack high-water marks and the firmware's sections.
#
#   bash kernel/firmware/measure.sh            # table (markdown) on stdout
#
# Needs: qemu-system-arm, the thumbv7em-none-eabihf target, and llvm-size
# (rustup component llvm-tools) or arm-none-eabi-size. Honours
# CARGO_TARGET_DIR. The firmware is run twice: the counts must be identical.
set -euo pipefail
cd "$(dirname "$0")"

target_dir="${CARGO_TARGET_DIR:-target}"
elf="$target_dir/thumbv7em-none-eabihf/release/holdup-firmware"
cargo build --release --quiet

run() {
  timeout 300 qemu-system-arm -M mps2-an386 -cpu cortex-m4 -nographic -monitor none -serial none \
    -icount shift=10 -semihosting-config enable=on,target=native -kernel "$elf"
}
first="$(run)" || { echo "$first"; echo "measure.sh: firmware FAILED" >&2; exit 1; }
second="$(run)"
if [ "$first" != "$second" ]; then
  echo "measure.sh: two runs differ (the counts must be deterministic)" >&2
  diff <(echo "$first") <(echo "$second") >&2 || true
  exit 1
fi

sysroot="$(rustc --print sysroot)"
size_tool="$(ls "$sysroot"/lib/rustlib/*/bin/llvm-size 2>/dev/null | head -n1 || true)"
[ -n "$size_tool" ] || size_tool="$(command -v arm-none-eabi-size || true)"
[ -n "$size_tool" ] || { echo "measure.sh: need llvm-size (rustup component add llvm-tools) or arm-none-eabi-size" >&2; exit 1; }
sections="$("$size_tool" -A "$elf")"
sec() { awk -v s="$1" '$1 == s { print $2 }' <<<"$sections"; }
vt=$(sec .vector_table); text=$(sec .text); ro=$(sec .rodata); data=$(sec .data); bss=$(sec .bss); uninit=$(sec .uninit)
flash=$(( ${vt:-0} + ${text:-0} + ${ro:-0} + ${data:-0} ))
ram=$(( ${data:-0} + ${bss:-0} + ${uninit:-0} ))

# Fields of the firmware's report.
cost() { # name -> "min mean max"
  grep -F "cost $1:" <<<"$first" | sed -E 's/.* min ([0-9]+) mean ([^ ]+) max ([0-9]+).*/\1 \2 \3/'
}
after() { # the value after "<label>: " in the block that follows "cost <name>:"
  awk -v name="cost $1:" -v key="$2" '
    index($0, name) == 1 { inblock = 1; next }
    /^cost / { inblock = 0 }
    inblock && index($0, key) { sub(/.*: /, ""); sub(/ .*/, ""); print; exit }' <<<"$first"
}
num() { awk -v x="$1" 'BEGIN { printf "%.'"${2:-0}"'f", x }'; }
field() { grep -F "$1" <<<"$first" | head -n1 | sed -E 's/.*: ([0-9]+).*/\1/'; }

read -r rmin rmean rmax <<<"$(cost 'open-loop reference tick')"
read -r emin emean emax <<<"$(cost 'exact tick (3 species, 1 reaction)')"
rflops=$(after 'open-loop reference tick' 'flops per tick')
rcalls=$(after 'open-loop reference tick' 'libm calls per tick')
rratio=$(after 'open-loop reference tick' 'ratio')
rstack=$(after 'open-loop reference tick' 'stack high-water')
eflops=$(after 'exact tick (3 species, 1 reaction)' 'flops per tick')
ecalls=$(after 'exact tick (3 species, 1 reaction)' 'libm calls per tick')
eratio=$(after 'exact tick (3 species, 1 reaction)' 'ratio')
estack=$(after 'exact tick (3 species, 1 reaction)' 'stack high-water')
read -r smin smean smax <<<"$(cost 'stiff reference tick (k x 1e4)')"
read -r omin omean omax <<<"$(cost 'sensor pipeline tick')"
oflops=$(after 'sensor pipeline tick' 'flops per tick')
ocalls=$(after 'sensor pipeline tick' 'libm calls per tick')
osqrt=$(after 'sensor pipeline tick' 'of which sqrt')
oratio=$(after 'sensor pipeline tick' 'ratio')
ostack=$(after 'sensor pipeline tick' 'stack high-water')
obusy=$(after 'sensor pipeline tick' 'mean of those ticks')
ostate=$(field 'size_of Observer<f32')
sstate=$(field 'size_of Sensor<f32')
state=$(field 'size_of ReferenceVessel<f32>')
fwstack=$(field 'stack high-water, whole firmware')
sigcost=$(grep -F 'cost signal update' <<<"$first" | sed -E 's/.*mean: ([0-9.e+-]+).*/\1/')

verdict() { if awk -v a="$1" -v b="$2" 'BEGIN { exit !(a < b) }'; then echo met; else echo MISSED; fi; }

cat <<TABLE
Gateway firmware on QEMU mps2-an386 (Cortex-M4F, f32), $(rustc --version | cut -d' ' -f1-2), counts identical on two runs.

| quantity | measured | target |
|---|---|---|
| open-loop reference tick (3 species, 2 reactions, MPRK22), instructions min / mean / max over 28,800 ticks | $rmin / $(num "$rmean" 0) / $rmax | < 1,500: $(verdict "$rmean" 1500) |
| sensor pipeline tick (lab calls + \`Sensor::tick\`: four 4–20 mA loops conditioned, level update, closure, NIS, prediction, NE107 diagnosis; lab sample every 2 h, result 45 min later), instructions min / mean / max over 28,800 ticks | $omin / $(num "$omean" 0) / $omax | < 6,000: $(verdict "$omean" 6000) |
| sensor pipeline tick, mean over the ticks with a lab sample pending | $(num "$obusy" 0) | — |
| stiff reference tick (reference network, saponification 10⁴× faster; first 2 h of the shift), instructions min / mean / max over 7,200 ticks | $smin / $(num "$smean" 0) / $smax | worst < 500,000: $(verdict "$smax" 500000) |
| exact tick (analytic scenario, 3 species, 1 reaction), instructions min / mean / max | $emin / $(num "$emean" 0) / $emax | — |
| input path: one \`Signal::update\` (4–20 mA loop: NE43, range, hold), good sample, instructions mean over 1,000 (inside the pipeline tick, four a tick) | $(num "$sigcost" 0) | — |
| flops per pipeline tick (+ − × ÷) + libm calls (of which sqrt) | $(num "$oflops" 0) + $(num "$ocalls" 1) ($(num "$osqrt" 1)) | — |
| instructions per (flop + libm call), pipeline tick | $(num "$oratio" 2) | — |
| flops per reference tick (+ − × ÷) + libm calls | $(num "$rflops" 1) + $(num "$rcalls" 0) | — |
| instructions per (flop + libm call), reference tick | $(num "$rratio" 2) | — |
| flops per exact tick + libm calls; ratio | $(num "$eflops" 0) + $(num "$ecalls" 0); $(num "$eratio" 2) | — |
| kernel state, \`size_of::<ReferenceVessel<f32>>()\` | $state B | < 2,048 B: $(verdict "$state" 2048) |
| observer state, \`size_of::<Observer<f32, 3, 2, 1, 5, 2>>()\` (includes the vessel) | $ostate B | < 2,048 B: $(verdict "$ostate" 2048) |
| sensor, \`size_of::<Sensor<f32, 3, 2, 1, 2, 5, 2>>()\` (the observer, 11 channels' conditioning, its specification, the closure and NIS monitors) | $sstate B | — |
| stack high-water of a reference tick | $rstack B | — |
| stack high-water of an exact tick | $estack B | — |
| stack high-water of a pipeline tick (checkpoints, lab draws and results) | $ostack B | — |
| stack high-water, whole firmware from reset | $fwstack B | — |
| flash: .vector_table + .text + .rodata + .data | $flash B ($(awk -v x="$flash" 'BEGIN { printf "%.1f", x / 1024 }') KiB): text ${text:-0}, rodata ${ro:-0}, vectors ${vt:-0}, data ${data:-0} | < 65,536 B: $(verdict "$flash" 65536) (CI gate < 81,920 B) |
| static RAM: .data + .bss + .uninit | $ram B: data ${data:-0}, bss ${bss:-0}, uninit ${uninit:-0} | — |
TABLE
