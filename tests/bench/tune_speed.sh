#!/usr/bin/env bash
# Times `meander tune` on 20,000 input rows per sample, from one paired run:
# the whole step sweep on one thread (what tune did before the sweep stopped
# early and the rows ran on threads) against the default. Prints wall and CPU
# seconds and the ratio; asserts nothing. The rows are the sample's inputs.csv
# rows drawn at random, each value scaled by 1 + 2% Gaussian noise (seeded), so
# they stay in the range the model was trained on.
#
#   tests/bench/tune_speed.sh [BUILD_DIR] [ROWS]
set -euo pipefail

root=$(cd "$(dirname "${BASH_SOURCE[0]}")/../.." && pwd)
build=${1:-$root/build}
rows=${2:-20000}
meander="$build/meander"
[[ -x "$meander" ]] || { echo "tune_speed.sh: $meander not built" >&2; exit 1; }

work=$(mktemp -d)
trap 'rm -rf "$work"' EXIT

timed() {  # prints "wall user+sys" seconds of the command
    /usr/bin/time -o "$work/time" -f "%e %U %S" "$@" >/dev/null 2>&1
    awk '{ printf "%.2f %.2f", $1, $2 + $3 }' "$work/time"
}

printf "%-14s %8s  %22s  %22s  %7s\n" sample rows "whole sweep, 1 thread" "default" "ratio"
for desc in "$root"/samples/*/*.mnd; do
    sample=$(basename "$desc" .mnd)
    dir=$(dirname "$desc")
    grep -q '^state ' "$desc" && continue  # streaming models tune over sequences
    python3 - "$dir/inputs.csv" "$work/$sample.csv" "$rows" <<'PY'
import csv, random, sys
src, dst, n = sys.argv[1], sys.argv[2], int(sys.argv[3])
rows = list(csv.reader(open(src)))
head, body = rows[0], [[float(v) for v in r] for r in rows[1:]]
rng = random.Random(20261202)
with open(dst, "w") as f:
    f.write(",".join(head) + "\n")
    for _ in range(n):
        r = rng.choice(body)
        f.write(",".join("%.6g" % (v * (1 + 0.02 * rng.gauss(0, 1))) for v in r) + "\n")
PY
    read -r w0 c0 <<<"$(timed "$meander" tune "$desc" --input "$work/$sample.csv" --whole-sweep --threads 1)"
    read -r w1 c1 <<<"$(timed "$meander" tune "$desc" --input "$work/$sample.csv")"
    printf "%-14s %8d  %10s s %8s cpu  %10s s %8s cpu  %6.1fx\n" "$sample" "$rows" "$w0" "$c0" "$w1" "$c1" \
        "$(awk -v a="$w0" -v b="$w1" 'BEGIN { print (b > 0 ? a / b : 0) }')"
done
echo "(wall seconds on $(nproc) cores; the machine's other load counts in wall time)"
