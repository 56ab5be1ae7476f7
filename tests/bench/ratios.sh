#!/usr/bin/env bash
# Builds bench_infer, runs it once and prints, per sample, how the emitted
# code's time compares with the reference evaluator and float64 with float32,
# beside the MACs per inference that `meander cost --json` counts; then the
# cost of each integration method on one field. Prints; asserts nothing.
#
#   tests/bench/ratios.sh [BUILD_DIR] [-- bench_infer options...]
#
# BUILD_DIR defaults to build-bench in the source tree; it is configured as a
# Release build when it has no cache yet. MEANDER_BENCH_JOBS sets the build's
# parallel jobs (default 2).
set -euo pipefail

root=$(cd "$(dirname "${BASH_SOURCE[0]}")/../.." && pwd)
build="$root/build-bench"
if [[ $# -gt 0 && "$1" != "--" ]]; then
  build=$1
  shift
fi
[[ $# -gt 0 && "$1" == "--" ]] && shift

if [[ ! -f "$build/CMakeCache.txt" ]]; then
  cmake -S "$root" -B "$build" -G Ninja -DCMAKE_BUILD_TYPE=Release >/dev/null
fi
build_type=$(sed -n 's/^CMAKE_BUILD_TYPE:[A-Z]*=//p' "$build/CMakeCache.txt")
if [[ "$build_type" != "Release" ]]; then
  echo "ratios.sh: note: $build is a '$build_type' build; timings are for that build type" >&2
fi
cmake --build "$build" --target bench_infer meander -j "${MEANDER_BENCH_JOBS:-2}" >/dev/null

bench="$build/tests/bench/bench_infer"
if [[ ! -x "$bench" ]]; then
  echo "ratios.sh: $bench was not built (is libbenchmark-dev installed?)" >&2
  exit 1
fi

work=$(mktemp -d)
trap 'rm -rf "$work"' EXIT

echo "running bench_infer (about half a minute)..." >&2
"$bench" --benchmark_format=json "$@" >"$work/bench.json"

for desc in "$root"/samples/*/*.mnd; do
  sample=$(basename "$desc" .mnd)
  "$build/meander" cost --json --precision float32 "$desc" >"$work/cost_$sample.json"
done

python3 - "$work" <<'EOF'
import glob, json, os, sys

work = sys.argv[1]
with open(os.path.join(work, "bench.json")) as f:
    runs = {b["name"]: b for b in json.load(f)["benchmarks"] if b.get("run_type", "iteration") == "iteration"}
scale = {"ns": 1.0, "us": 1e3, "ms": 1e6, "s": 1e9}

def ns(name):
    b = runs.get(name)
    if b is None or b.get("error_occurred"):
        return None
    return b["cpu_time"] * scale[b["time_unit"]]

def ratio(a, b):
    return f"{a / b:.2f}" if a is not None and b else "-"

def fixed(v, digits):
    return "-" if v is None else f"{v:.{digits}f}"

print("per inference, cycling over each sample's first rows (CPU time, host)")
head = ("sample", "reference ns", "float32 ns", "float64 ns", "ref/f32", "f64/f32",
        "field evals", "MACs", "worst MACs", "ns/MAC f32")
print("{:<14}{:>13}{:>12}{:>12}{:>9}{:>9}{:>13}{:>10}{:>12}{:>12}".format(*head))
for path in sorted(glob.glob(os.path.join(work, "cost_*.json"))):
    sample = os.path.basename(path)[len("cost_"):-len(".json")]
    with open(path) as f:
        total = json.load(f)["total"]
    ref, f32, f64 = ns(f"evaluate/{sample}"), ns(f"infer/{sample}/float32"), ns(f"infer/{sample}/float64")
    evals = runs.get(f"infer/{sample}/float32", {}).get("field_evals")
    # MACs of the measured inferences: cost's MACs outside the fields plus its
    # MACs per field evaluation times the field evaluations the runs made.
    macs = None if evals is None else total["macs_outside_fields"] + total["macs_per_field_eval"] * evals
    print("{:<14}{:>13}{:>12}{:>12}{:>9}{:>9}{:>13}{:>10}{:>12}{:>12}".format(
        sample, fixed(ref, 0), fixed(f32, 0), fixed(f64, 0), ratio(ref, f32), ratio(f64, f32),
        fixed(evals, 2), fixed(macs, 0), total["macs"], "-" if f32 is None or not macs else f"{f32 / macs:.3f}"))

methods = [(name.split("/"), b) for name, b in runs.items() if name.startswith("integrate/")]
if methods:
    print()
    print("integration methods on the field of {}, each tuned to a max error of {:g}".format(
        methods[0][0][1], methods[0][1].get("target_error", float("nan"))))
    print("{:<20}{:<24}{:>12}{:>14}{:>16}{:>12}".format(
        "method", "setting", "field evals", "time ns", "ns/field eval", "max error"))
    for parts, b in methods:
        t = ns("/".join(parts))
        evals = b.get("field_evals")
        print("{:<20}{:<24}{:>12.0f}{:>14.0f}{:>16}{:>12.2e}".format(
            parts[2], b.get("label", ""), evals, t, ratio(t, evals), b.get("max_abs_error")))
EOF
