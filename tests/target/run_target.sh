#!/usr/bin/env bash
# Proves emitted code on a microcontroller instruction set, for one sample.
#
#   run_target.sh MODE SAMPLE.mnd WORK_DIR
#
# MODE
#   cortex-m4f      build for Cortex-M4F (hard float), run on qemu mps2-an386
#   cortex-m3       build for Cortex-M3 (software float), run on qemu mps2-an385
#   cortex-m7       build for Cortex-M7 (single-precision FPU), run on qemu mps2-an500
#   arm-linux       build for 32-bit ARM Linux (-O2 -static), run under qemu-arm
#   arm-linux-f64   the same with --precision float64
#   host-gcc | host-clang
#                   build with g++ / clang++ -O2 for this machine and run it
#   bits            compare the output bit patterns (bits.txt) the float32 run
#                   modes above wrote for this sample: one differing bit fails
#   warnings-gcc | warnings-clang | warnings-arm
#                   the emitted sources compile cleanly with the strict warning set
#   image           a Cortex-M4F float image of the emitted code links no
#                   software-double helper (__aeabi_d*), no malloc, no operator new,
#                   no C library float maths but sqrtf
#   stack           every emitted function's stack use (-fstack-usage) is static
#   contracting-host | contracting-m4f
#                   a build that breaks the conditions for common bits is
#                   caught: with -ffp-contract=fast (and -mfma on this machine;
#                   the Cortex-M4F FPU has VFMA) the self-test must report
#                   build_conditions_hold() false and the driver exit non-zero
#   cost            `meander cost --json` states the code bytes arm-none-eabi-size
#                   and the entry frame the .su file give for the emitted object,
#                   and the header's workspace_bytes
#   host-gcc-int8 | cortex-m4f-int8 | cortex-m3-int8 | cortex-m7-int8, and
#   the same with -int16
#                   as host-gcc / cortex-m4f / cortex-m3 / cortex-m7 with every
#                   layer's weights as int8 or int16 (--weights-as), compared with
#                   `meander eval --weights-as` (the quantised model's reference)
#                   instead of expected.csv
#   bits-int8 | bits-int16
#                   as bits, over those four runs: the Cortex-M4F and M7 take the
#                   integer steps written in assembly, the others plain C++
#   flash-int8      the emitted object for the Cortex-M4F (-Os) with float and with
#                   int8 weights: .text and .rodata from arm-none-eabi-size; fails
#                   unless the int8 object is smaller
#
# The run modes compare every printed output with the sample's expected.csv
# (outputs of `meander eval`, double precision): an output passes when
#   |target - expected| <= TOL * max(1, |expected|)
# the rule and defaults of `meander verify`: TOL = 1e-4 for float32 (float
# carries ~7 digits; errors grow through layers and steps, newlib's tanhf/expf
# differ from glibc's in the last bits, and an adaptive solver in float may
# take slightly different steps) and 1e-10 for float64. MEANDER_TARGET_TOL
# overrides it.
#
# Environment: MEANDER (the meander binary, default: meander on PATH),
# MEANDER_TIMEOUT (seconds per emulator run, default 60).
# A streaming model (a `state` statement) reads inputs.csv as a sequence file;
# the driver, board_main.cpp built with -DMEANDER_STREAMING, resets at each
# sequence and observes every row with its gap, and runs its self-test (golden
# observations from the same file).
#
# Exit status: 0 pass, 1 fail, 77 a tool is missing (ctest SKIP_RETURN_CODE).
set -u -o pipefail

if [ $# -ne 3 ]; then
    echo "usage: run_target.sh MODE SAMPLE.mnd WORK_DIR" >&2
    exit 2
fi
mode=$1
mnd=$2
work=$3
here=$(cd "$(dirname "${BASH_SOURCE[0]}")" && pwd)
sample_dir=$(cd "$(dirname "$mnd")" && pwd)
meander=${MEANDER:-meander}
limit=${MEANDER_TIMEOUT:-60}

fail() { echo "FAIL: $*" >&2; exit 1; }
need() {
    for tool in "$@"; do
        if ! command -v "$tool" > /dev/null 2>&1; then
            echo "SKIP: $tool is not installed (scripts/install-target-tools installs it)"
            exit 77
        fi
    done
}
# Runs a command, showing it first, so a failing test's log says what was run.
run() { echo "+ $*"; "$@"; }

# The flags of the brief for users: small code, no exceptions or RTTI, one
# section per function and object so the linker drops what is unused.
common_cross=(-std=c++17 -Os -fno-exceptions -fno-rtti -fstack-usage -ffunction-sections -fdata-sections)
m4f_flags=(-mcpu=cortex-m4 -mthumb -mfpu=fpv4-sp-d16 -mfloat-abi=hard)
m3_flags=(-mcpu=cortex-m3 -mthumb -mfloat-abi=soft)
m7_flags=(-mcpu=cortex-m7 -mthumb -mfpu=fpv5-sp-d16 -mfloat-abi=hard)
strict=(-std=c++17 -Wall -Wextra -Wconversion -Wdouble-promotion -Wshadow -Werror -fno-exceptions -fno-rtti)

precision=float32
[ "$mode" = arm-linux-f64 ] && precision=float64
if [ "$precision" = float32 ]; then tol_default=1e-4; else tol_default=1e-10; fi
tol=${MEANDER_TARGET_TOL:-$tol_default}

# Integer weight modes: the storage, and the plain mode they run as.
storage_args=()
run_mode=$mode
case "$mode" in
    host-gcc-int8|cortex-m4f-int8|cortex-m3-int8|cortex-m7-int8|bits-int8)
        storage_args=(--weights-as int8); run_mode=${mode%-int8} ;;
    host-gcc-int16|cortex-m4f-int16|cortex-m3-int16|cortex-m7-int16|bits-int16)
        storage_args=(--weights-as int16); run_mode=${mode%-int16} ;;
esac

case "$run_mode" in
    cortex-m4f|cortex-m3|cortex-m7|image|stack|warnings-arm|contracting-m4f) need arm-none-eabi-g++ ;;
    contracting-host) need g++ objdump ;;
    flash-int8) need arm-none-eabi-g++ arm-none-eabi-size ;;
    cost) need arm-none-eabi-g++ arm-none-eabi-size ;;
    arm-linux|arm-linux-f64) need arm-linux-gnueabihf-g++ qemu-arm ;;
    warnings-gcc|host-gcc) need g++ ;;
    host-clang) need clang++ ;;
    bits) ;;
    warnings-clang) need clang++ ;;
    *) echo "run_target.sh: unknown mode '$mode'" >&2; exit 2 ;;
esac
case "$run_mode" in
    cortex-m4f|cortex-m3|cortex-m7|contracting-m4f) need qemu-system-arm ;;
    image) need arm-none-eabi-nm ;;
esac
command -v timeout > /dev/null 2>&1 || { echo "SKIP: timeout (coreutils) is not installed"; exit 77; }

# The float32 run modes whose bits must agree.
bit_modes=(host-gcc host-clang arm-linux cortex-m4f cortex-m3 cortex-m7)
if [ "$run_mode" != "$mode" ]; then
    bit_modes=()
    for m in host-gcc cortex-m4f cortex-m3 cortex-m7; do bit_modes+=("$m${mode#"$run_mode"}"); done
fi
if [ "$run_mode" = bits ]; then
    runs=$(dirname "$work")
    ref=""
    status=0
    for m in "${bit_modes[@]}"; do
        f=$runs/$m/bits.txt
        if [ ! -s "$f" ]; then
            echo "$m: no bits.txt (its test did not run or failed)"
            status=1
            continue
        fi
        if [ -z "$ref" ]; then ref=$m; continue; fi
        if ! cmp -s "$runs/$ref/bits.txt" "$f"; then
            echo "$m differs from $ref:"
            diff "$runs/$ref/bits.txt" "$f" | head -20
            status=1
        else
            echo "$m: $(wc -l < "$f") rows, every output bit equal to $ref's"
        fi
    done
    [ "$status" -eq 0 ] || fail "the targets' output bits differ"
    echo "PASS: $mode"
    exit 0
fi

# The model's name: the identifier after the first `model` keyword.
name=$(sed -e 's/#.*//' "$mnd" | awk '{ for (i = 1; i < NF; ++i) if ($i == "model") { print $(i + 1); exit } }')
[ -n "$name" ] || fail "$mnd: no 'model NAME' statement"

case "$work" in ""|/) echo "run_target.sh: refusing WORK_DIR '$work'" >&2; exit 2 ;; esac
rm -rf "$work"
mkdir -p "$work/gen" || fail "cannot create $work"
inputs=$sample_dir/inputs.csv
expected=$sample_dir/expected.csv
[ -f "$inputs" ] || fail "$inputs is missing"
if [ ${#storage_args[@]} -gt 0 ]; then
    # The quantised model's own reference: eval with the same integers and scales.
    expected=$work/expected-integers.csv
    run "$meander" eval "$mnd" --input "$inputs" "${storage_args[@]}" --output "$expected" || fail "meander eval failed"
fi

streaming=0
sed -e 's/#.*//' "$mnd" | grep -Eq '^[[:space:]]*state[[:space:]]' && streaming=1
run "$meander" compile "$mnd" -o "$work/gen" --self-test "$inputs" --precision "$precision" "${storage_args[@]}" ||
    fail "meander compile failed"
for f in "$name.hpp" "$name.cpp" "${name}_selftest.hpp" "${name}_selftest.cpp"; do
    [ -f "$work/gen/$f" ] || fail "meander compile did not write $f"
done
sources=("$work/gen/$name.cpp" "$work/gen/${name}_selftest.cpp")

# A CSV's numeric rows: '#' comments and blank lines skipped, a first line
# with a non-numeric field taken as the header.
csv_rows() {
    awk -F, '
        function num(s) { return s ~ /^[ \t]*[-+]?([0-9]+\.?[0-9]*|\.[0-9]+)([eE][-+]?[0-9]+)?[ \t\r]*$/ }
        /^[ \t]*(#|$)/ { next }
        { sub(/\r$/, "") }
        !seen { seen = 1; for (i = 1; i <= NF; ++i) if (!num($i)) next }
        { for (i = 1; i <= NF; ++i) if (!num($i)) { printf "%s:%d: not a number: %s\n", FILENAME, FNR, $i > "/dev/stderr"; exit 1 }
          print }' "$1"
}

# The board driver's inputs: each CSV row as a brace list of double literals.
# A sequence file's rows become {first, gap, observation...}: the gap is the
# time stamp minus the previous row's of the same sequence (0 at its first row),
# printed with 17 digits as the host computes it.
write_inputs() {
    if [ "$streaming" = 1 ]; then
        awk -F, '
            /^[ \t]*(#|$)/ { next }
            { sub(/\r$/, ""); for (i = 1; i <= NF; ++i) gsub(/^[ \t]+|[ \t]+$/, "", $i) }
            !seen { seen = 1; if ($2 !~ /^[-+]?([0-9]+\.?[0-9]*|\.[0-9]+)([eE][-+]?[0-9]+)?$/) next }
            { first = ($1 != id); gap = first ? 0 : $2 - t; id = $1; t = $2
              printf "    {%d, %.17g", first, gap; for (i = 3; i <= NF; ++i) printf ", %s", $i; print "}," }' "$inputs" \
            > "$work/board_inputs.inc" || fail "cannot read $inputs"
        [ -s "$work/board_inputs.inc" ] || fail "$inputs has no rows"
        return
    fi
    csv_rows "$inputs" | awk -F, '{ printf "    {"; for (i = 1; i <= NF; ++i) { v = $i; gsub(/[ \t]/, "", v); printf "%s%s", (i > 1 ? ", " : ""), v } print "}," }' \
        > "$work/board_inputs.inc" || fail "cannot read $inputs"
    [ -s "$work/board_inputs.inc" ] || fail "$inputs has no rows"
}

driver=board_main.cpp
tol_literal=$tol
[ "$precision" = float32 ] && tol_literal=${tol}f
driver_defs=(-I"$work" -I"$work/gen" -DMEANDER_MODEL="$name" -DMEANDER_MODEL_HEADER="\"$name.hpp\""
             -DMEANDER_SELFTEST_HEADER="\"${name}_selftest.hpp\"" -DMEANDER_TOLERANCE="$tol_literal")
[ "$streaming" = 1 ] && driver_defs+=(-DMEANDER_STREAMING)

# Checks the run's printed rows against expected.csv, and the self-test line.
compare() {
    local log=$1
    [ -f "$expected" ] || fail "$expected is missing"
    csv_rows "$expected" > "$work/expected.rows" || fail "cannot read $expected"
    grep -E '^(row|self-test) ' "$log" > "$work/printed" || true
    # The reference's counters per row (meander eval --stats, on stderr, a
    # header naming the columns). In float64 the emitted code must take the
    # very same steps; in float32 rounding may tip an adaptive step decision,
    # so differing rows are only counted.
    "$meander" eval "$mnd" --input "$inputs" --stats "${storage_args[@]}" > /dev/null 2> "$work/eval.stats" ||
        fail "meander eval --stats failed"
    awk -v streaming="$streaming" -v tol="$tol" -v rows_file="$work/expected.rows" -v stats_file="$work/eval.stats" -v strict="$([ "$precision" = float64 ] && echo 1 || echo 0)" '
        function abs(x) { return x < 0 ? -x : x }
        BEGIN {
            n = 0
            while ((getline line < rows_file) > 0) { m = split(line, v, ","); width[n] = m; for (i = 1; i <= m; ++i) want[n, i] = v[i] + 0; ++n }
            k = 0
            while ((getline line < stats_file) > 0) {
                m = split(line, v, /[ \t]+/)
                if (!cols) { for (i = 1; i <= m; ++i) col[v[i]] = i; cols = ("field_evals" in col) && ("steps_accepted" in col) && ("steps_rejected" in col); continue }
                counts[k++] = v[col["field_evals"]] " " v[col["steps_accepted"]] " " v[col["steps_rejected"]]
            }
            if (!cols) { print "meander eval --stats printed no field_evals / steps_accepted / steps_rejected columns"; exit 1 }
            bad = 0; seen = 0; max_abs = 0; max_scaled = 0; selftest = 0; counter_rows = 0
        }
        $1 == "row" {
            r = $2 + 0; ++seen
            if (r >= n) { printf "row %d: not in expected.csv\n", r; ++bad; next }
            if ((r in counts) && counts[r] != $4 " " $5 " " $6) {
                ++counter_rows
                if (strict) { printf "row %d: counters (field evals, taken, rejected) %s %s %s, eval has %s\n", r, $4, $5, $6, counts[r]; ++bad }
            }
            if ($3 != "ok") { printf "row %d: result %s, expected ok\n", r, $3; ++bad; next }
            if (NF - 6 != width[r]) { printf "row %d: %d outputs printed, expected.csv has %d\n", r, NF - 6, width[r]; ++bad; next }
            for (i = 1; i <= width[r]; ++i) {
                got = $(6 + i) + 0; w = want[r, i]; d = abs(got - w); s = d / (abs(w) > 1 ? abs(w) : 1)
                if (d > max_abs) max_abs = d
                if (s > max_scaled) { max_scaled = s; where = sprintf("row %d output %d", r, i - 1) }
                if (!(s <= tol)) { printf "row %d output %d: target %.17g, expected %.17g, deviation %.3g, scaled %.3g > %g\n", r, i - 1, got, w, d, s, tol; ++bad }
            }
        }
        $1 == "self-test" {
            selftest = 1
            if ($5 != 0 || $NF != "ok") { printf "self-test on the target failed: %s\n", $0; ++bad }
            for (i = 1; i < NF; ++i) if ($i == "build-conditions" && $(i + 1) != 1) { print "build_conditions_hold() is false: this build may not give the common bits"; ++bad }
        }
        END {
            if (seen != n) { printf "%d rows printed, expected.csv has %d\n", seen, n; ++bad }
            if (!selftest) { print "no self-test report printed"; ++bad }
            if (k != n) { printf "meander eval --stats gave %d rows, expected.csv has %d\n", k, n; ++bad }
            printf "%d rows compared, tolerance %g (|d| <= tol * max(1, |expected|)), largest |d| %.3g, largest scaled %.3g%s\n",
                   seen, tol, max_abs, max_scaled, (max_scaled > 0 ? " at " where : "")
            printf "counters equal to eval'"'"'s in %d of %d rows\n", seen - counter_rows, seen
            exit bad > 0
        }' "$work/printed"
}

# Runs an image under the emulator, bounded; prints its output.
emulate() {
    local log=$work/run.log rc
    echo "+ timeout $limit $*"
    timeout "$limit" "$@" > "$log" 2>&1
    rc=$?
    cat "$log"
    grep '^bits ' "$log" > "$work/bits.txt" || true
    [ "$rc" -ne 124 ] || fail "the run did not end within $limit s"
    compare "$log" || fail "outputs differ from expected.csv"
    [ "$rc" -eq 0 ] || fail "the program exited with status $rc"
    echo "PASS: $mode"
}

# A run that must be caught: the self-test reports build_conditions_hold()
# false (build-conditions 0) and the driver exits non-zero.
expect_caught() {
    local log=$work/run.log rc
    echo "+ timeout $limit $*"
    timeout "$limit" "$@" > "$log" 2>&1
    rc=$?
    grep '^self-test ' "$log"
    [ "$rc" -ne 124 ] || fail "the run did not end within $limit s"
    grep -Eq '^self-test .* build-conditions 0 ' "$log" ||
        fail "build_conditions_hold() did not notice the contracting build"
    [ "$rc" -ne 0 ] || fail "the driver exited 0 although build_conditions_hold() is false"
    echo "PASS: $mode (build_conditions_hold() is false, exit status $rc)"
}

contract=-ffp-contract=off
board() {
    local machine=$1; shift
    write_inputs
    run arm-none-eabi-g++ "${common_cross[@]}" "$contract" "$@" "${driver_defs[@]}" \
        "$here/startup.cpp" "$here/$driver" "${sources[@]}" \
        -T "$here/mps2.ld" -nostartfiles --specs=rdimon.specs -Wl,--gc-sections -o "$work/app.elf" ||
        fail "cross build failed"
    local qemu=(qemu-system-arm -M "$machine" -nographic -semihosting-config enable=on,target=native -kernel "$work/app.elf")
    if [ "$contract" = -ffp-contract=off ]; then emulate "${qemu[@]}"; else expect_caught "${qemu[@]}"; fi
}

case "$run_mode" in
host-gcc|host-clang)
    write_inputs
    if [ "$run_mode" = host-gcc ]; then cxx=g++; else cxx=clang++; fi
    run "$cxx" -std=c++17 -O2 -ffp-contract=off -fno-exceptions -fno-rtti "${driver_defs[@]}" \
        "$here/$driver" "${sources[@]}" -o "$work/app" || fail "host build failed"
    emulate "$work/app"
    ;;
contracting-host)
    [ "$streaming" = 0 ] || { echo "SKIP: a streaming model has no self-test yet"; exit 77; }
    grep -qw fma /proc/cpuinfo 2> /dev/null || { echo "SKIP: this CPU has no FMA: a contracting build cannot run here"; exit 77; }
    write_inputs
    run g++ -std=c++17 -O2 -mfma -ffp-contract=fast -fno-exceptions -fno-rtti "${driver_defs[@]}" \
        "$here/$driver" "${sources[@]}" -o "$work/app" || fail "host build failed"
    echo "fused multiply-adds in the build: $(objdump -d "$work/app" | grep -c 'vfn\?m\(add\|sub\)')"
    expect_caught "$work/app"
    ;;
contracting-m4f)
    [ "$streaming" = 0 ] || { echo "SKIP: a streaming model has no self-test yet"; exit 77; }
    contract=-ffp-contract=fast
    board mps2-an386 "${m4f_flags[@]}"
    ;;
cortex-m4f) board mps2-an386 "${m4f_flags[@]}" ;;
cortex-m3)  board mps2-an385 "${m3_flags[@]}" ;;
cortex-m7)  board mps2-an500 "${m7_flags[@]}" ;;
arm-linux|arm-linux-f64)
    write_inputs
    run arm-linux-gnueabihf-g++ -std=c++17 -O2 -ffp-contract=off -static -fno-exceptions -fno-rtti "${driver_defs[@]}" \
        "$here/$driver" "${sources[@]}" -o "$work/app" || fail "cross build failed"
    emulate qemu-arm "$work/app"
    ;;
warnings-gcc|warnings-clang|warnings-arm)
    case "$mode" in
        warnings-gcc) cxx=(g++) ;;
        warnings-clang) cxx=(clang++) ;;
        warnings-arm) cxx=(arm-none-eabi-g++ "${m4f_flags[@]}" -Os) ;;
    esac
    for src in "${sources[@]}"; do
        run "${cxx[@]}" "${strict[@]}" -c "$src" -o "$work/$(basename "$src" .cpp).o" ||
            fail "$(basename "$src") does not compile cleanly with ${cxx[0]}"
    done
    echo "PASS: $mode"
    ;;
image)
    # A minimal program: start-up without semihosting and one inference on
    # zeros, so every symbol in the image comes from the emitted model code,
    # the C++ runtime it needs, and the float maths library.
    call="infer(ctx, in, out)"
    [ "$streaming" = 1 ] && call="observe(ctx, in, $name::largest_gap, out)"
    cat > "$work/image_main.cpp" <<EOF
#include "$name.hpp"
namespace {
$name::context ctx;
}
int main() {
    const $name::real in[$name::input_size] = {};
    $name::real out[$name::output_size];
    return static_cast<int>($name::$call);
}
EOF
    run arm-none-eabi-g++ "${common_cross[@]}" "${m4f_flags[@]}" -I"$work/gen" -DMEANDER_NO_SEMIHOSTING \
        "$here/startup.cpp" "$work/image_main.cpp" "$work/gen/$name.cpp" \
        -T "$here/mps2.ld" -nostartfiles --specs=nano.specs --specs=nosys.specs -Wl,--gc-sections -o "$work/image.elf" ||
        fail "cross build failed"
    arm-none-eabi-nm "$work/image.elf" > "$work/image.nm" || fail "arm-none-eabi-nm failed"
    # Software double helpers of the ARM run-time ABI: __aeabi_d* (arithmetic,
    # comparisons, d2f, d2iz, ...), __aeabi_cd* (flag comparisons) and the
    # conversions into double (f2d, i2d, ui2d, l2d, ul2d): a hidden double.
    # malloc/free and operator new/delete (_Znw*/_Zna*/_Zdl*/_Zda*): heap use.
    if grep -E ' (__aeabi_(c?d[a-z0-9_]*|[a-z]+2d)|malloc|_malloc_r|calloc|realloc|free|_free_r|_Zn[wa][jm].*|_Zd[la]Pv.*)$' "$work/image.nm"; then
        fail "the Cortex-M4F float image links the symbols above"
    fi
    # meander's own kernels stand in for the C library's float maths (sqrtf,
    # correctly rounded, is the one allowed).
    if grep -E ' (__ieee754_)?(expf|expm1f|logf|log1pf|tanhf|powf|nextafterf|exp2f|log2f|ceilf|floorf|fmaxf|fminf)$' "$work/image.nm"; then
        fail "the Cortex-M4F float image calls the C library maths above"
    fi
    echo "$(wc -l < "$work/image.nm") symbols, none of them software double, heap, operator new or C library maths but sqrtf"
    echo "PASS: $mode"
    ;;
stack)
    status=0
    for src in "${sources[@]}"; do
        stem=$(basename "$src" .cpp)
        run arm-none-eabi-g++ "${common_cross[@]}" "${m4f_flags[@]}" -c "$src" -o "$work/$stem.o" ||
            fail "cross build of $stem.cpp failed"
        [ -f "$work/$stem.su" ] || fail "no $stem.su written"
        cat "$work/$stem.su"
        # Each line: file:line:col:function<TAB>bytes<TAB>static|dynamic[,bounded]
        if awk -F'\t' '$3 != "static" { print "not static: " $0; bad = 1 } END { exit !bad }' "$work/$stem.su"; then
            status=1
        fi
    done
    [ "$status" -eq 0 ] || fail "some emitted function's stack use is not static"
    echo "PASS: $mode"
    ;;
flash-int8)
    # The same object with float and with int8 weights (layers too small to gain stay float).
    mkdir -p "$work/gen-int8"
    run "$meander" compile "$mnd" -o "$work/gen-int8" --weights-as int8 || fail "meander compile --weights-as int8 failed"
    for kind in gen gen-int8; do
        run arm-none-eabi-g++ "${m4f_flags[@]}" "${common_cross[@]}" -c "$work/$kind/$name.cpp" -o "$work/$kind.o" ||
            fail "cross build of $kind/$name.cpp failed"
    done
    sizes() { arm-none-eabi-size -A "$1" | awk '$1 ~ /^\.text/ { t += $2 } $1 ~ /^\.rodata/ { r += $2 } END { print t + 0, r + 0 }'; }
    read -r text_f rodata_f <<< "$(sizes "$work/gen.o")"
    read -r text_q rodata_q <<< "$(sizes "$work/gen-int8.o")"
    total_f=$((text_f + rodata_f))
    total_q=$((text_q + rodata_q))
    echo "float: .text $text_f B, .rodata $rodata_f B, $total_f B"
    echo "int8:  .text $text_q B, .rodata $rodata_q B, $total_q B"
    echo "saved: $((total_f - total_q)) B of $total_f B ($(awk -v a="$total_f" -v b="$total_q" 'BEGIN { printf "%.1f", 100 * (a - b) / a }')%)"
    [ "$total_q" -lt "$total_f" ] || fail "int8 weights do not make the object smaller"
    echo "PASS: $mode"
    ;;
cost)
    # The object as `meander cost` builds it: the core's flags, -Os, sections.
    run arm-none-eabi-g++ "${m4f_flags[@]}" "${common_cross[@]}" -c "$work/gen/$name.cpp" -o "$work/$name.o" ||
        fail "cross build of $name.cpp failed"
    text=$(arm-none-eabi-size -A "$work/$name.o" | awk '$1 ~ /^\.text/ { s += $2 } END { print s + 0 }')
    entry=infer
    [ "$streaming" = 1 ] && entry=observe
    frame=$(awk -F'\t' -v f="$name::$entry(" 'index($1, f) { print $2 }' "$work/$name.su")
    reals=$(sed -n 's/.*constexpr std::size_t workspace_size = \([0-9]*\);.*/\1/p' "$work/gen/$name.hpp")
    run "$meander" cost "$mnd" --json --estimate-only > "$work/cost.json" || fail "meander cost failed"
    # The "total" object's fields (a streaming model's: the top level's), one per line in the JSON.
    if [ "$streaming" = 1 ]; then
        total() { sed -n "s/^  \"$1\": \([0-9]*\),\{0,1\}$/\1/p" "$work/cost.json"; }
    else
        total() { sed -n '/"total": {/,/}/p' "$work/cost.json" | sed -n "s/^ *\"$1\": \([0-9]*\),\{0,1\}$/\1/p"; }
    fi
    echo "arm-none-eabi-size: .text $text B; .su: $entry frame $frame B; header: workspace_size $reals reals"
    echo "meander cost: code $(total code_bytes) B, entry frame $(total entry_stack_bytes) B, workspace $(total workspace_bytes) B"
    grep -q '"code_measured": true' "$work/cost.json" || fail "meander cost did not measure the code"
    [ -n "$text" ] && [ "$(total code_bytes)" = "$text" ] || fail "code bytes differ"
    [ -n "$frame" ] && [ "$(total entry_stack_bytes)" = "$frame" ] || fail "entry frames differ"
    [ -n "$reals" ] && [ "$(total workspace_bytes)" = "$((reals * 4))" ] || fail "workspace bytes differ"
    echo "PASS: $mode"
    ;;
esac
