#!/usr/bin/env bash
# Where a tick's instructions go: a one-off profile of the firmware's ticks
# on QEMU, by function.
#
#   bash kernel/firmware/profile.sh        # markdown table per tick kind on stdout
#
# QEMU runs the release firmware without -icount (the instruction stream is
# the same; only the firmware's own reported counts change) and logs every
# translated block (`in_asm`: its instructions) and every execution of a
# block (`exec,nochain`). awk follows the stream: a tick is the time between
# entering a `tick::step_once` instance and the next block executed in the
# function that called it; inside, every executed block adds its
# instructions to the block's address. The addresses are then attributed to
# the symbols of the ELF (llvm-nm). A tick kind is a `step_once` instance,
# listed in the order the firmware runs them (exact, reference, observer);
# functions under 0.05 instructions per tick are left out. The sum per tick
# matches the meter's mean to within the call and the counter reads (~4).
# Takes a few minutes: the log is ~80 M lines, streamed, never stored.
#
# Needs qemu-system-arm and llvm-nm (rustup component llvm-tools). Honours
# CARGO_TARGET_DIR.
set -euo pipefail
cd "$(dirname "$0")"

target_dir="${CARGO_TARGET_DIR:-target}"
elf="$target_dir/thumbv7em-none-eabihf/release/holdup-firmware"
cargo build --release --quiet
sysroot="$(rustc --print sysroot)"
nm_tool="$(ls "$sysroot"/lib/rustlib/*/bin/llvm-nm 2>/dev/null | head -n1 || true)"
[ -n "$nm_tool" ] || { echo "profile.sh: need llvm-nm (rustup component add llvm-tools)" >&2; exit 1; }

work="$(mktemp -d)"
trap 'rm -rf "$work"' EXIT
# Functions: start (8 hex digits, Thumb bit cleared), size (hex), name.
"$nm_tool" -C -S -n --defined-only "$elf" \
  | awk '$3 ~ /^[tTwW]$/ { name = $4; for (i = 5; i <= NF; i++) name = name " " $i;
                           sub(/::h[0-9a-f]+$/, "", name); print $1, $2, name }' > "$work/syms"

# 1. Stream: per step_once instance, executed instructions by block address.
# (The firmware's verdict is not this script's business: a failing run is
# profiled all the same.)
{ timeout "${PROFILE_TIMEOUT:-1800}" qemu-system-arm -M mps2-an386 -cpu cortex-m4 -nographic \
    -monitor none -serial none -semihosting-config enable=on,target=native \
    -d in_asm,exec,nochain -D /dev/stdout -kernel "$elf" 2>/dev/null || true; } | awk -v symfile="$work/syms" '
  function hex(s,    i, n, c) {
    n = 0; s = tolower(s)
    for (i = 1; i <= length(s); i++) { c = index("0123456789abcdef", substr(s, i, 1)) - 1; n = n * 16 + c }
    return n
  }
  function sym_of(pc,    i) { # index of the symbol holding pc (numeric), 0 if none
    for (i = 1; i <= nsym; i++) if (pc >= start[i] && pc < start[i] + size[i]) return i
    return 0
  }
  BEGIN {
    while ((getline line < symfile) > 0) {
      split(line, f, " "); nsym++
      start[nsym] = hex(f[1]) - hex(f[1]) % 2; size[nsym] = hex(f[2])
      name[nsym] = substr(line, length(f[1]) + length(f[2]) + 3)
      if (name[nsym] ~ /::tick::step_once$/) entry[sprintf("%08x", start[nsym])] = nsym
    }
  }
  /^IN:/ { inblk = 1; first = ""; n = 0; next }
  inblk && /^0x[0-9a-f]+:/ { if (first == "") first = substr($1, 3, 8); n++; next }
  inblk && /^$/ { if (first != "") len[first] = n; inblk = 0; next }
  /^Trace / {
    inblk = 0
    split($4, b, "/"); pc = b[2]
    if (pc in entry) {
      inst = pc
      if (!(inst in order)) { order[inst] = ++ninst; clo[inst] = ""; }
      if (clo[inst] == "") { # the caller: the function of the block before the entry
        ks = sym_of(hex(prev)); clo[inst] = sprintf("%08x", start[ks]); chi[inst] = sprintf("%08x", start[ks] + size[ks])
      }
      calls[inst]++; cur = inst
    } else if (cur != "" && pc >= clo[cur] && pc < chi[cur]) {
      cur = ""
    }
    if (cur != "") exec[cur SUBSEP pc]++
    prev = pc
    next
  }
  END {
    for (key in exec) {
      split(key, k, SUBSEP)
      printf "%s %d %s %d %d\n", k[1], order[k[1]], k[2], exec[key], len[k[2]] > "/dev/stdout"
    }
    for (inst in calls) printf "calls %s %d %d\n", inst, order[inst], calls[inst] > "/dev/stdout"
  }' > "$work/counts"

# 2. Attribute to symbols: instructions per tick and calls per tick.
awk -v symfile="$work/syms" '
  function hex(s,    i, n, c) {
    n = 0; s = tolower(s)
    for (i = 1; i <= length(s); i++) { c = index("0123456789abcdef", substr(s, i, 1)) - 1; n = n * 16 + c }
    return n
  }
  BEGIN {
    while ((getline line < symfile) > 0) {
      split(line, f, " "); nsym++
      start[nsym] = hex(f[1]) - hex(f[1]) % 2; size[nsym] = hex(f[2])
      name[nsym] = substr(line, length(f[1]) + length(f[2]) + 3)
    }
  }
  $1 == "calls" { ticks[$3] = $4; next }
  {
    ord = $2; pc = hex($3); execs = $4; ins = $5
    for (i = 1; i <= nsym; i++) if (pc >= start[i] && pc < start[i] + size[i]) break
    s = (i <= nsym) ? name[i] : "?"
    total[ord] += execs * ins; by[ord SUBSEP s] += execs * ins
    if (i <= nsym && pc == start[i]) entered[ord SUBSEP s] += execs
  }
  END {
    for (ord = 1; ord in ticks; ord++) {
      printf "\n### step_once instance %d: %d ticks, %.1f instructions per tick\n\n", ord, ticks[ord], total[ord] / ticks[ord]
      print "| function | instructions per tick | share | calls per tick |"
      print "|---|---|---|---|"
      cmd = "sort -t\"|\" -k3 -g -r"
      for (key in by) {
        split(key, k, SUBSEP)
        if (k[1] != ord || by[key] < 0.05 * ticks[ord]) continue
        printf "| `%s` | %.1f | %.1f %% | %.2f |\n", k[2], by[key] / ticks[ord], 100 * by[key] / total[ord], entered[key] / ticks[ord] | cmd
      }
      close(cmd)
    }
  }' "$work/counts"
