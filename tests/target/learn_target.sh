#!/usr/bin/env bash
# Learning on the emulated Cortex-M4F: the drift calibration of
# samples/fan_balance/drift (--learn biases, float32, 5 epochs of SGD over the
# node's 120 rows) built for the host and for the board (mps2-an386), run on
# both; passes when both print the same bits (gradient and final parameters),
# the counters meet the header's learn_field_evals, and the held-out loss
# falls below 60 % of where it started; the same with --learn-by adjoint, whose
# workspace must not grow with the steps. Then the float64 build on the board
# (software double) checks its gradient against central differences.
#   learn_target.sh WORKDIR        (MEANDER: the meander binary)
set -u
here=$(cd "$(dirname "$0")" && pwd)
root=$(cd "$here/../.." && pwd)
work=$1
limit=${MEANDER_TIMEOUT:-300}
fail() { echo "FAIL: $*" >&2; exit 1; }
run() { echo "+ $*"; "$@"; }
for tool in arm-none-eabi-g++ qemu-system-arm; do
    command -v "$tool" > /dev/null 2>&1 || { echo "SKIP: $tool is not installed"; exit 77; }
done
rm -rf "$work" && mkdir -p "$work" || fail "cannot make $work"
sample=$root/samples/fan_balance
drift=$sample/drift
rows() { paste -d, <(tail -n +2 "$1") <(tail -n +2 "$2") | awk '{ print "    {" $0 "}," }'; }
rows "$drift/learn_inputs.csv" "$drift/learn_targets.csv" > "$work/learn_rows.inc" || fail "cannot read the learning rows"
rows "$drift/heldout_inputs.csv" "$drift/heldout_targets.csv" > "$work/heldout_rows.inc" || fail "cannot read the held-out rows"
common=(-DMEANDER_MODEL=fan_balance '-DMEANDER_MODEL_HEADER="fan_balance.hpp"' -DMEANDER_RATE=0.01f
        -DMEANDER_CLIP=1.0f -I"$work")
defs=("${common[@]}" -DMEANDER_EPOCHS=5 -I"$work/gen")
m4f=(-mcpu=cortex-m4 -mthumb -mfpu=fpv4-sp-d16 -mfloat-abi=hard)
cross=(-std=c++17 -Os -fno-exceptions -fno-rtti -ffp-contract=off -ffunction-sections -fdata-sections)
board() {  # ELF OUT
    echo "+ qemu-system-arm -M mps2-an386 ... -kernel $1"
    timeout "$limit" qemu-system-arm -M mps2-an386 -nographic -semihosting-config enable=on,target=native \
        -kernel "$1" > "$2" 2>&1
    local rc=$?
    cat "$2"
    [ "$rc" -ne 124 ] || fail "the board run did not end within $limit s"
    [ "$rc" -eq 0 ] || fail "the board run exited with status $rc"
}

run "$MEANDER" compile "$sample/fan_balance.mnd" -o "$work/gen" --learn biases || fail "compile --learn failed"
run g++ -std=c++17 -O2 -ffp-contract=off -fno-exceptions -fno-rtti "${defs[@]}" "$here/board_learn_main.cpp" \
    "$work/gen/fan_balance.cpp" -o "$work/host" || fail "host build failed"
"$work/host" > "$work/host.txt" || fail "the host run failed: $(cat "$work/host.txt")"
cat "$work/host.txt"
run arm-none-eabi-g++ "${cross[@]}" "${m4f[@]}" "${defs[@]}" "$here/startup.cpp" "$here/board_learn_main.cpp" \
    "$work/gen/fan_balance.cpp" -T "$here/mps2.ld" -nostartfiles --specs=rdimon.specs -Wl,--gc-sections \
    -o "$work/board.elf" || fail "board build failed"
board "$work/board.elf" "$work/board.txt"
diff <(grep -E '^(bits|heldout|epoch)' "$work/host.txt") <(grep -E '^(bits|heldout|epoch)' "$work/board.txt") ||
    fail "the board's learning differs from the host's"
grep -Eq '^field_evals ([0-9]+) of \1$' "$work/board.txt" || fail "field evaluations differ from learn_field_evals"
awk '/^heldout before/ { b = $4 } /^heldout after/ { a = $4 }
     END { printf "held-out loss %.6f -> %.6f\n", b, a; exit !(a < 0.6 * b) }' "$work/board.txt" ||
    fail "the held-out loss did not fall below 60 % of where it started"

# The adjoint on the board: the same calibration with --learn-by adjoint must bring the
# held-out loss down as well, and its learning workspace must not grow with the step
# count (the description's 8 steps against 32: the header's learn_workspace_size).
run "$MEANDER" compile "$sample/fan_balance.mnd" -o "$work/gen_adj" --learn biases --learn-by adjoint ||
    fail "compile --learn-by adjoint failed"
run arm-none-eabi-g++ "${cross[@]}" "${m4f[@]}" "${common[@]}" -DMEANDER_EPOCHS=5 -I"$work/gen_adj" "$here/startup.cpp" \
    "$here/board_learn_main.cpp" "$work/gen_adj/fan_balance.cpp" -T "$here/mps2.ld" -nostartfiles \
    --specs=rdimon.specs -Wl,--gc-sections -o "$work/board_adj.elf" || fail "adjoint board build failed"
board "$work/board_adj.elf" "$work/board_adj.txt"
grep -Eq '^field_evals ([0-9]+) of \1$' "$work/board_adj.txt" || fail "adjoint: field evaluations differ from learn_field_evals"
awk '/^heldout before/ { b = $4 } /^heldout after/ { a = $4 }
     END { printf "adjoint: held-out loss %.6f -> %.6f\n", b, a; exit !(a < 0.6 * b) }' "$work/board_adj.txt" ||
    fail "adjoint: the held-out loss did not fall below 60 % of where it started"
grep -Eq '^ *solver rk4, steps 8$' "$sample/fan_balance.mnd" || fail "fan_balance.mnd no longer says 'solver rk4, steps 8'"
mkdir -p "$work/steps32" && cp "$sample"/fan_balance.* "$work/steps32/" &&
    sed -i 's/^\( *solver rk4, steps\) 8$/\1 32/' "$work/steps32/fan_balance.mnd" || fail "cannot write the 32-step copy"
run "$MEANDER" compile "$work/steps32/fan_balance.mnd" -o "$work/gen_adj32" --learn biases --learn-by adjoint ||
    fail "compile --learn-by adjoint (32 steps) failed"
workspace() { sed -n 's/^constexpr std::size_t learn_workspace_size = \([0-9]*\);$/\1/p' "$1/fan_balance.hpp"; }
w8=$(workspace "$work/gen_adj"); w32=$(workspace "$work/gen_adj32")
echo "adjoint learning workspace: 8 steps $w8 reals, 32 steps $w32 reals"
[ -n "$w8" ] && [ "$w8" = "$w32" ] || fail "the adjoint's learning workspace changed with the step count ($w8 -> $w32)"

run "$MEANDER" compile "$sample/fan_balance.mnd" -o "$work/gen64" --learn biases --precision float64 ||
    fail "compile --learn --precision float64 failed"
run arm-none-eabi-g++ "${cross[@]}" "${m4f[@]}" "${common[@]}" -I"$work/gen64" -DMEANDER_CENTRAL_DIFFERENCES \
    -DMEANDER_EPOCHS=0 "$here/startup.cpp" "$here/board_learn_main.cpp" "$work/gen64/fan_balance.cpp" \
    -T "$here/mps2.ld" -nostartfiles --specs=rdimon.specs -Wl,--gc-sections -o "$work/board64.elf" ||
    fail "float64 board build failed"
board "$work/board64.elf" "$work/board64.txt"
grep -q '^central differences' "$work/board64.txt" || fail "no central differences printed"
echo "PASS: learning on the emulated Cortex-M4F (through the steps and by the adjoint)"
