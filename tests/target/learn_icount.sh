#!/usr/bin/env bash
# cost --learn's measured learning step against a count made outside it.
#
# `meander cost --learn biases --json` counts the instructions of each learning
# step on the emulated Cortex-M4F from qemu's translation log (compiler/cost_cycles.cpp).
# This test counts them another way: qemu's -icount shift=0 makes the virtual clock
# advance by one nanosecond per executed instruction, so the SysTick counter ticks in
# proportion to instructions; board_learn_main.cpp (MEANDER_STEP_TICKS) reads it around
# each learn_step and around a hand-written loop of 2,000,000 instructions that gives
# instructions per tick. Same rows, same targets, same rate and clip, same compiler
# flags as cost's measured build; passes when the medians agree within 0.1 % (the marks
# and the counter reads differ by a few instructions; a tick is about 40 instructions).
# It also checks the step's cycles per instruction is within [1, 3] (the Cortex-M4
# timings: one cycle an instruction at least; loads, divisions and branches more).
#   learn_icount.sh WORKDIR        (MEANDER: the meander binary)
set -u
here=$(cd "$(dirname "$0")" && pwd)
root=$(cd "$here/../.." && pwd)
work=$1
limit=${MEANDER_TIMEOUT:-600}
fail() { echo "FAIL: $*" >&2; exit 1; }
run() { echo "+ $*"; "$@"; }
for tool in arm-none-eabi-g++ qemu-system-arm python3; do
    command -v "$tool" > /dev/null 2>&1 || { echo "SKIP: $tool is not installed"; exit 77; }
done
rm -rf "$work" && mkdir -p "$work" || fail "cannot make $work"
sample=$root/samples/fan_balance
drift=$sample/drift
rows=16   # cost measures the first 16 rows on the Cortex-M4F (kLearnRows)

echo "+ $MEANDER cost ... --learn biases --json"
"$MEANDER" cost "$sample/fan_balance.mnd" --input "$drift/learn_inputs.csv" --labels "$drift/learn_targets.csv" \
    --learn biases --json > "$work/cost.json" || fail "cost --learn failed: $(cat "$work/cost.json")"

paste -d, <(tail -n +2 "$drift/learn_inputs.csv") <(tail -n +2 "$drift/learn_targets.csv") | head -n "$rows" |
    awk '{ print "    {" $0 "}," }' > "$work/learn_rows.inc" || fail "cannot read the learning rows"
run "$MEANDER" compile "$sample/fan_balance.mnd" -o "$work/gen" --learn biases || fail "compile --learn failed"
run arm-none-eabi-g++ -mcpu=cortex-m4 -mthumb -mfpu=fpv4-sp-d16 -mfloat-abi=hard -std=c++17 -Os -fno-exceptions \
    -fno-rtti -ffunction-sections -fdata-sections -ffp-contract=off -I"$work" -I"$work/gen" \
    -DMEANDER_MODEL=fan_balance '-DMEANDER_MODEL_HEADER="fan_balance.hpp"' -DMEANDER_RATE=0.01f -DMEANDER_CLIP=1.0f \
    -DMEANDER_STEP_TICKS "$here/startup.cpp" "$here/board_learn_main.cpp" "$work/gen/fan_balance.cpp" \
    -T "$here/mps2.ld" -nostartfiles --specs=rdimon.specs -Wl,--gc-sections -o "$work/ticks.elf" ||
    fail "board build failed"
echo "+ qemu-system-arm -M mps2-an386 -icount shift=0 ... -kernel $work/ticks.elf"
timeout "$limit" qemu-system-arm -M mps2-an386 -icount shift=0 -nographic \
    -semihosting-config enable=on,target=native -kernel "$work/ticks.elf" > "$work/ticks.txt" 2>&1 ||
    fail "the board run failed: $(cat "$work/ticks.txt")"
cat "$work/ticks.txt"

python3 - "$work/cost.json" "$work/ticks.txt" "$rows" <<'EOF' || fail "the counts disagree"
import json, statistics, sys
cost = json.load(open(sys.argv[1]))
m4f = [m for m in cost["learning"]["measured"] if m["core"] == "cortex-m4f"]
if not m4f:
    sys.exit("cost measured no Cortex-M4F learning step: %s" % cost["learning"].get("measured_skipped"))
m4f = m4f[0]
cal = None
ticks = []
for line in open(sys.argv[2]):
    w = line.split()
    if w[:1] == ["calibration"]:
        cal = int(w[1]) / int(w[3])  # instructions per tick
    elif w[:1] == ["step"]:
        if w[2] != "ok":
            sys.exit("step %s: %s" % (w[1], w[2]))
        ticks.append(int(w[3]))
if cal is None or len(ticks) != int(sys.argv[3]) or m4f["steps"] != int(sys.argv[3]):
    sys.exit("expected %s steps: icount run %d, cost %d" % (sys.argv[3], len(ticks), m4f["steps"]))
icount = statistics.median(t * cal for t in ticks)
traced = m4f["instructions"]["median"]
cycles = m4f["cycles"]["median"]
print("instructions per tick %.4f" % cal)
print("instructions per learning step, median: icount %.0f, cost's trace %.0f (%.3f %%)"
      % (icount, traced, 100 * (traced - icount) / icount))
print("cycles per learning step, median: %.0f (%.3f per instruction)" % (cycles, cycles / traced))
if abs(traced - icount) > 0.001 * icount:
    sys.exit("the traced instruction count is not within 0.1 % of qemu's icount")
if not (1.0 <= cycles / traced <= 3.0):
    sys.exit("cycles per instruction outside [1, 3]")
EOF
echo "PASS: cost --learn's instructions per learning step agree with qemu's icount"
