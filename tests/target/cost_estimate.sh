#!/usr/bin/env bash
# The static cycle estimate of `meander cost` against the cycles it measures on
# the emulated Cortex-M4F, M3 and M7, for one sample:
#
#   cost_estimate.sh SAMPLE.mnd WORK_DIR [COST_ARGS...]
#
# COST_ARGS go to `meander cost` (`--weights-as int16`: the integer layers'
# figure).
# Runs `meander cost --json` over the first 8 rows of the sample's inputs.csv
# (the Cortex-M3 measures 8 rows at most, so every core and the estimate's
# median see the same rows) and fails when, on any core, the estimate's median
# differs from the measured median by more than 20% of the measured one; for a
# streaming model (rows are observations of the sequence file) also when the
# estimate of the observation measured at the largest gap differs from its
# measured cycles by more than 20%. The
# measured figure is the outside value here: every executed instruction priced
# with the core's manual (compiler/cycle_prices.hpp), not the estimate's table.
# It prints both, so a run of it over every sample is also how the estimate's
# figures (compiler/cost.cpp, make_figures) are recalibrated.
#
# Environment: MEANDER (the meander binary, default: meander on PATH).
# Exit status: 0 pass, 1 fail, 77 the cross tools or qemu are missing.
set -u -o pipefail
[ $# -ge 2 ] || { echo "usage: cost_estimate.sh SAMPLE.mnd WORK_DIR [COST_ARGS...]" >&2; exit 2; }
mnd=$1
work=$2
shift 2
meander=${MEANDER:-meander}
inputs=$(dirname "$mnd")/inputs.csv
for tool in arm-none-eabi-g++ arm-none-eabi-nm arm-none-eabi-addr2line qemu-system-arm; do
    command -v "$tool" > /dev/null 2>&1 || { echo "SKIP: $tool is not installed (scripts/install-target-tools installs it)"; exit 77; }
done
case "$work" in ""|/) echo "cost_estimate.sh: refusing WORK_DIR '$work'" >&2; exit 2 ;; esac
rm -rf "$work" && mkdir -p "$work" || exit 1
# The header line and the first 8 data rows.
head -n 9 "$inputs" > "$work/rows.csv"
echo "+ $meander cost $mnd --input $work/rows.csv --json $*"
"$meander" cost "$mnd" --input "$work/rows.csv" --json "$@" > "$work/cost.json" || { echo "FAIL: meander cost failed"; exit 1; }
/usr/bin/python3 - "$work/cost.json" <<'PY'
import json, sys
j = json.load(open(sys.argv[1]))
measured = {m["core"]: m for m in j.get("measured", [])}
if not measured:
    print("SKIP: no measured cycles:", j.get("measured_skipped", "?"))
    sys.exit(77)
bad = 0
at_gap = {m["core"]: m["cycles"] for m in j.get("measured_at_largest_gap", [])}
for c in j["cycles"]:
    m = measured.get(c["core"])
    if m is None:
        continue
    pairs = [("median", c.get("median"), m["cycles"]["median"])]
    if j.get("streaming"):
        pairs.append(("at the largest gap", c.get("at_largest_gap"), at_gap.get(c["core"])))
    for what, est, got in pairs:
        if est is None or got is None:
            print(f'{c["core"]:<11} {what}: no estimate or no measurement')
            bad += 1
            continue
        ratio = est / got
        ok = abs(est - got) <= 0.2 * got
        bad += not ok
        print(f'{c["core"]:<11} {what}: measured {got:>10.0f} (rows {m["rows"]})  estimate {est:>10.0f}  ratio {ratio:.3f}'
              f'  dense cycles/MAC {m["dense_cycles_per_mac"]:.2f}  activations {m["activation_cycles"]}'
              f'  other per row {m["other_cycles_mean"]:.0f}  {"ok" if ok else "OFF BY MORE THAN 20%"}')
if bad:
    print("FAIL: the estimate strays over 20% from the measured median")
    sys.exit(1)
print("PASS: cost-estimate")
PY
