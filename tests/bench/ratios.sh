#!/usr/bin/env bash
# Builds bench_infer, runs it once and prints, per sample, how the emitted
# code's time compares with the reference evaluator and float64 with float32,
# beside the MACs per inference that `meander cost --json` counts; then, from
# the same run, the emitted float32 code against the project's hand-written
# baselines (Eigen fixed-size matrices, Boost.Odeint; baseline_<sample>.cpp):
# time ratio, instructions per MAC under callgrind, and cycles per MAC and per
# activation on the emulated Cortex-M4F from `meander cost --json`; then the
# cost of each integration method on one field. Prints the targets beside the
# figures; asserts nothing.
#
#   tests/bench/ratios.sh [BUILD_DIR] [-- bench_infer options...]
#
# BUILD_DIR defaults to build-bench in the source tree; it is configured as a
# Release build with -O2 (no -march=native: code as a distribution builds it)
# when it has no cache yet. MEANDER_BENCH_JOBS sets the build's parallel jobs
# (default 2). MEANDER_BENCH_CALLGRIND=0 skips the callgrind runs (about a
# minute); without valgrind they are skipped too.
set -euo pipefail

root=$(cd "$(dirname "${BASH_SOURCE[0]}")/../.." && pwd)
build="$root/build-bench"
if [[ $# -gt 0 && "$1" != "--" ]]; then
  build=$1
  shift
fi
[[ $# -gt 0 && "$1" == "--" ]] && shift

if [[ ! -f "$build/CMakeCache.txt" ]]; then
  cmake -S "$root" -B "$build" -G Ninja -DCMAKE_BUILD_TYPE=Release "-DCMAKE_CXX_FLAGS_RELEASE=-O2 -DNDEBUG" >/dev/null
fi
cache() { sed -n "s/^$1:[A-Z]*=//p" "$build/CMakeCache.txt"; }
build_type=$(cache CMAKE_BUILD_TYPE)
if [[ "$build_type" != "Release" ]]; then
  echo "ratios.sh: note: $build is a '$build_type' build; timings are for that build type" >&2
fi
cmake --build "$build" --target bench_infer meander -j "${MEANDER_BENCH_JOBS:-2}" >/dev/null
compiler="$(cache CMAKE_CXX_COMPILER) $(cache CMAKE_CXX_FLAGS) $(cache "CMAKE_CXX_FLAGS_$(echo "$build_type" | tr a-z A-Z)")"

bench="$build/tests/bench/bench_infer"
if [[ ! -x "$bench" ]]; then
  echo "ratios.sh: $bench was not built (is libbenchmark-dev installed?)" >&2
  exit 1
fi

work=$(mktemp -d)
trap 'rm -rf "$work"' EXIT

echo "running bench_infer (about a minute)..." >&2
"$bench" --benchmark_format=json "$@" >"$work/bench.json"

for desc in "$root"/samples/*/*.mnd; do
  sample=$(basename "$desc" .mnd)
  # Streaming models have no infer: not benchmarked (see CMakeLists.txt).
  sed -e 's/#.*//' "$desc" | grep -Eq '^[[:space:]]*state[[:space:]]' && continue
  "$build/meander" cost --json --precision float32 --input "$(dirname "$desc")/inputs.csv" "$desc" >"$work/cost_$sample.json"
done

# Instructions per inference under callgrind: only what runs inside
# counted_calls (bench_infer --calls), 8 passes over the sample's rows.
if [[ "${MEANDER_BENCH_CALLGRIND:-1}" != 0 ]] && command -v valgrind >/dev/null; then
  echo "counting instructions under callgrind..." >&2
  for baseline in $(python3 -c 'import json, sys
for b in json.load(open(sys.argv[1]))["benchmarks"]:
    if b["name"].startswith("baseline/") and b.get("run_type", "iteration") == "iteration": print(b["name"].split("/")[1], int(b["rows"]))' "$work/bench.json" | tr ' ' ':'); do
    sample=${baseline%%:*}
    calls=$((${baseline##*:} * 8))
    for code in "infer/$sample/float32" "baseline/$sample"; do
      out="$work/callgrind_$(echo "$code" | tr / _)"
      valgrind --tool=callgrind --collect-atstart=no --toggle-collect='*counted_calls*' \
        --callgrind-out-file="$out.out" "$bench" --calls="$code:$calls" >/dev/null 2>"$out.log"
      printf '%s %s\n' "$calls" "$(sed -n 's/^totals: *\([0-9]*\).*/\1/p' "$out.out")" >"$out.txt"
    done
  done
fi

python3 - "$work" "$compiler" <<'EOF'
import glob, json, os, sys

work, compiler = sys.argv[1], " ".join(sys.argv[2].split())
with open(os.path.join(work, "bench.json")) as f:
    runs = {b["name"]: b for b in json.load(f)["benchmarks"] if b.get("run_type", "iteration") == "iteration"}
scale = {"ns": 1.0, "us": 1e3, "ms": 1e6, "s": 1e9}

def ns(name):
    b = runs.get(name)
    if b is None or b.get("error_occurred"):
        return None
    return b["cpu_time"] * scale[b["time_unit"]]

def m4f_measured(cost):
    """(cycles per inference, cycles per MAC, cycles per activation) on the
    emulated Cortex-M4F from cost's measured figures, or None when absent."""
    for m in cost.get("measured") or []:
        if isinstance(m, dict) and m.get("core") == "cortex-m4f":
            return (m.get("cycles", {}).get("median"), m.get("dense_cycles_per_mac"), m.get("cycles_per_activation"))
    return None

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

# --- the hand-written baselines ---------------------------------------------
costs = {}
for path in sorted(glob.glob(os.path.join(work, "cost_*.json"))):
    with open(path) as f:
        costs[os.path.basename(path)[len("cost_"):-len(".json")]] = json.load(f)
based = [s for s in costs if f"baseline/{s}" in runs]

def macs_of(sample, evals):
    total = costs[sample]["total"]
    return None if evals is None else total["macs_outside_fields"] + total["macs_per_field_eval"] * evals

def fmt_or(v, spec, missing="-"):
    return missing if v is None else format(v, spec)

if based:
    print()
    print(f"emitted float32 against the hand-written baseline (Eigen fixed-size, Boost.Odeint), {compiler}")
    print("per inference, CPU time on this host; target: base/emit >= 1.50")
    head = ("sample", "baseline ns", "emitted ns", "base/emit", "target", "evals base", "evals emit",
            "same as eval", "max|d| base", "max|d| emit")
    print("{:<14}{:>12}{:>12}{:>11}{:>8}{:>12}{:>12}{:>14}{:>13}{:>13}".format(*head))
    for s in based:
        b, e = runs[f"baseline/{s}"], runs.get(f"infer/{s}/float32", {})
        tb, te = ns(f"baseline/{s}"), ns(f"infer/{s}/float32")
        r = None if tb is None or not te else tb / te
        rows = int(b.get("rows", 0))
        same = "{:.0f}/{:.0f} of {}".format(b.get("rows_same_evals", 0), e.get("rows_same_evals", 0), rows)
        print("{:<14}{:>12}{:>12}{:>11}{:>8}{:>12}{:>12}{:>14}{:>13}{:>13}".format(
            s, fixed(tb, 0), fixed(te, 0), fmt_or(r, ".2f"), "met" if r is not None and r >= 1.5 else "not met",
            fixed(b.get("row_field_evals"), 2), fixed(e.get("row_field_evals"), 2), same,
            fmt_or(b.get("max_abs_diff"), ".2e"), fmt_or(e.get("max_abs_diff"), ".2e")))
    print("  evals: field evaluations per inference over one pass of the rows; same as eval: rows whose")
    print("  count equals `meander eval`'s (baseline/emitted); max|d|: largest |output - eval| over the rows")

    print()
    print("instructions per MAC under valgrind --tool=callgrind (inside the calls only, 8 passes over the rows)")
    head = ("sample", "MACs", "Ir emitted", "Ir/MAC emit", "Ir baseline", "Ir/MAC base")
    print("{:<14}{:>10}{:>13}{:>13}{:>13}{:>13}".format(*head))
    for s in based:
        cells = []
        for code, key in ((f"infer/{s}/float32", "emit"), (f"baseline/{s}", "base")):
            path = os.path.join(work, "callgrind_" + code.replace("/", "_") + ".txt")
            evals = runs[code].get("row_field_evals") if code in runs else None
            macs = macs_of(s, evals)
            ir = None
            if os.path.exists(path):
                calls, total = (open(path).read().split() + ["", ""])[:2]
                if calls and total:
                    ir = int(total) / int(calls)
            cells.append((macs, ir))
        (m_e, ir_e), (m_b, ir_b) = cells
        print("{:<14}{:>10}{:>13}{:>13}{:>13}{:>13}".format(
            s, fixed(m_e, 0), fmt_or(ir_e, ".0f", "not counted"), fmt_or(None if ir_e is None or not m_e else ir_e / m_e, ".2f"),
            fmt_or(ir_b, ".0f", "not counted"), fmt_or(None if ir_b is None or not m_b else ir_b / m_b, ".2f")))
    print("  MACs: cost's MACs outside the fields plus MACs per field evaluation times each code's own evaluations")

    print()
    print("emulated Cortex-M4F, from `meander cost --json` (targets: <= 5 cycles/MAC in the dense loops,")
    print("<= 60 cycles per activation)")
    head = ("sample", "cycles median", "cycles/MAC", "target", "cycles/activation", "target")
    print("{:<14}{:>18}{:>12}{:>8}{:>19}{:>8}".format(*head))
    for s in sorted(costs):
        m = m4f_measured(costs[s])
        if m is None:
            print("{:<14}{:>18}".format(s, "not measured"))
            continue
        cyc, per_mac, per_act = m
        print("{:<14}{:>18}{:>12}{:>8}{:>19}{:>8}".format(
            s, fmt_or(cyc, ".0f"), fmt_or(per_mac, ".2f"), "met" if per_mac is not None and per_mac <= 5 else "not met",
            fmt_or(per_act, ".1f"), "met" if per_act is not None and per_act <= 60 else "not met"))

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
