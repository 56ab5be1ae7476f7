#!/usr/bin/env bash
# Where integer weights start to pay: single dense layers N -> N (N = 2 .. 16,
# identity, with bias; weights invented by a fixed formula, w = sin(7 i + 3 j) / N)
# compiled by meander as float, int8 and int16 for the Cortex-M4F (-Os, one
# section per function and object, the flags of run_target.sh), and the object's
# .text + .rodata from arm-none-eabi-size. Prints one line per N: the bytes in
# each storage and what each integer storage saves (negative: it costs).
# compiler/quantise.cpp's min_quantised_weights comes from this table.
#
#   storage_threshold.sh WORK_DIR      (MEANDER: the meander binary)
set -u -o pipefail
work=${1:?usage: storage_threshold.sh WORK_DIR}
meander=${MEANDER:-meander}
for tool in arm-none-eabi-g++ arm-none-eabi-size python3; do
    command -v "$tool" > /dev/null 2>&1 || { echo "SKIP: $tool is not installed"; exit 77; }
done
case "$work" in ""|/) echo "refusing WORK_DIR '$work'" >&2; exit 2 ;; esac
rm -rf "$work" && mkdir -p "$work" || exit 1
flags=(-mcpu=cortex-m4 -mthumb -mfpu=fpv4-sp-d16 -mfloat-abi=hard -std=c++17 -Os -fno-exceptions -fno-rtti
       -ffunction-sections -fdata-sections -ffp-contract=off)
printf "%4s %7s %7s %7s %7s %9s %9s\n" N weights float int8 int16 int8-saves int16-saves
for n in 2 3 4 5 6 7 8 9 10 11 12 14 16; do
    d=$work/n$n
    mkdir -p "$d"
    python3 - "$n" > "$d/w.mnw" <<'PY'
import math, sys
n = int(sys.argv[1])
print("meander-weights 1")
print(f"tensor one.weight float32 {n} {n}")
for i in range(n):
    row = [f"{math.sin(7 * i + 3 * j) / n:.6g}" for j in range(n)]
    for k in range(0, n, 8): print(" ".join(row[k:k + 8]))
print(f"tensor one.bias float32 {n}")
b = [f"{0.1 * math.cos(i):.6g}" for i in range(n)]
for k in range(0, n, 8): print(" ".join(b[k:k + 8]))
PY
    printf 'model single\nweights "w.mnw"\ninput x[%d]\ndense one: %d -> %d\noutput y[%d]\n' "$n" "$n" "$n" "$n" > "$d/single.mnd"
    line=""
    for s in float int8 int16; do
        # A layer below the threshold stays float: measure the integer kernel itself by
        # asking the quantiser with the threshold lifted (MEANDER_MIN_QUANTISED_WEIGHTS=0).
        MEANDER_MIN_QUANTISED_WEIGHTS=0 "$meander" compile "$d/single.mnd" -o "$d/$s" --weights-as "$s" 2> /dev/null ||
            { echo "FAIL: compile N=$n $s"; exit 1; }
        arm-none-eabi-g++ "${flags[@]}" -c "$d/$s/single.cpp" -o "$d/$s.o" || { echo "FAIL: cross build N=$n $s"; exit 1; }
        size=$(arm-none-eabi-size -A "$d/$s.o" | awk '$1 ~ /^\.(text|rodata)/ { t += $2 } END { print t + 0 }')
        eval "b_$s=$size"
    done
    printf "%4d %7d %7d %7d %7d %9d %9d\n" "$n" $((n * n)) "$b_float" "$b_int8" "$b_int16" $((b_float - b_int8)) $((b_float - b_int16))
done
