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
# With INLINED=1 it also splits the instructions executed in each
# `step_once` itself — the code LLVM inlined into it, such as the whole
# `Sensor::tick` — by inlined function: every executed instruction's
# address goes through `llvm-symbolizer --inlining`, and its count goes to
# the first INLINED_DEPTH (default 2) frames of its inline chain from the
# outermost `holdup_kernel` frame on (slower: every instruction is counted,
# not every block).
#
# Needs qemu-system-arm and llvm-nm (rustup component llvm-tools), and for
# INLINED=1 llvm-symbolizer (e.g. Debian's llvm package). Honours
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
    -d in_asm,exec,nochain -D /dev/stdout -kernel "$elf" 2>/dev/null || true; } | awk -v symfile="$work/syms" \
    -v inlined="${INLINED:-0}" -v inlfile="$work/inlined" '
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
  /^IN:/ { inblk = 1; first = ""; n = 0; lst = ""; next }
  inblk && /^0x[0-9a-f]+:/ { a = substr($1, 3, 8); if (first == "") first = a; n++; if (inlined) lst = lst " " a; next }
  inblk && /^$/ { if (first != "") { len[first] = n; if (inlined) ins[first] = lst }; inblk = 0; next }
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
    if (cur != "") {
      exec[cur SUBSEP pc]++
      if (inlined) { nk = split(ins[pc], L, " "); for (i = 1; i <= nk; i++) icnt[cur SUBSEP L[i]]++ }
    }
    prev = pc
    next
  }
  END {
    for (key in exec) {
      split(key, k, SUBSEP)
      printf "%s %d %s %d %d\n", k[1], order[k[1]], k[2], exec[key], len[k[2]] > "/dev/stdout"
    }
    for (inst in calls) printf "calls %s %d %d\n", inst, order[inst], calls[inst] > "/dev/stdout"
    if (inlined) for (key in icnt) { split(key, k, SUBSEP); printf "%d %s %d\n", order[k[1]], k[2], icnt[key] > inlfile }
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

# 3. INLINED=1: each step_once instance's own body by inlined function.
if [ "${INLINED:-0}" = 1 ]; then
  command -v llvm-symbolizer > /dev/null || { echo "profile.sh: INLINED=1 needs llvm-symbolizer" >&2; exit 1; }
  awk '$1 == "calls" { print $3, $4 }' "$work/counts" > "$work/ticks"
  # Only addresses inside a step_once: its callees have their rows above.
  awk 'function hex(s,    i, v, c) { v = 0; s = tolower(s); for (i = 1; i <= length(s); i++) { c = index("0123456789abcdef", substr(s, i, 1)) - 1; v = v * 16 + c }; return v }
    NR == FNR { if ($3 ~ /::tick::step_once$/) { n++; lo[n] = hex($1) - hex($1) % 2; hi[n] = lo[n] + hex($2) }; next }
    { a = hex($2); for (i = 1; i <= n; i++) if (a >= lo[i] && a < hi[i]) { print; break } }' \
    "$work/syms" "$work/inlined" > "$work/own"
  awk '{ print "0x" $2 }' "$work/own" | llvm-symbolizer --inlining --functions=linkage --demangle -e "$elf" > "$work/frames"
  awk -v depth="${INLINED_DEPTH:-2}" -v ownfile="$work/own" -v tickfile="$work/ticks" '
    function clean(f,    i, j) {
      sub(/::h[0-9a-f]+$/, "", f)
      while ((i = index(f, "$LT$")) > 0 && (j = index(substr(f, i), "$GT$")) > 0) f = substr(f, 1, i - 1) substr(f, i + j + 3)
      return f
    }
    function flush(    i, k, key, top) {
      if (nf == 0) return
      rec++; top = 0
      for (i = nf; i >= 1; i--) if (fr[i] ~ /^holdup_kernel::/) { top = i; break }
      key = "(firmware)"
      if (top > 0) { key = fr[top]; for (k = 1; k < depth && top - k >= 1; k++) key = key " > " fr[top - k] }
      by[inst[rec] SUBSEP key] += cnt[rec]; tot[inst[rec]] += cnt[rec]
      nf = 0; pos = 0
    }
    BEGIN {
      while ((getline line < tickfile) > 0) { split(line, t, " "); ticks[t[1]] = t[2] }
      while ((getline line < ownfile) > 0) { split(line, ow, " "); m++; inst[m] = ow[1]; cnt[m] = ow[3] }
    }
    /^$/ { flush(); next }
    { pos++; if (pos % 2 == 1) fr[++nf] = clean($0) }
    END {
      flush()
      for (o = 1; o in ticks; o++) {
        if (!(o in tot)) continue
        printf "\n### step_once instance %d, its own body by inlined function: %.1f instructions per tick\n\n", o, tot[o] / ticks[o]
        print "| inlined function (outermost kernel frames) | instructions per tick |"
        print "|---|---|"
        cmd = "sort -t\"|\" -k3 -g -r"
        for (key in by) {
          split(key, k, SUBSEP)
          if (k[1] != o || by[key] < 0.5 * ticks[o]) continue
          printf "| `%s` | %.1f |\n", k[2], by[key] / ticks[o] | cmd
        }
        close(cmd)
      }
    }' "$work/frames"
fi
