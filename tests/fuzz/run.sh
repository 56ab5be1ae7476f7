#!/usr/bin/env bash
# Runs one libFuzzer harness: run.sh BINARY NAME SECONDS WORKDIR [SEED]
# SEED fixes libFuzzer's random choices (ctest passes 1, so a CI run explores
# the same inputs each time up to its time limit); without it each run differs.
# The committed corpus tests/fuzz/corpus/NAME is read, not written; inputs the
# search adds go to WORKDIR/corpus, and a crashing input to WORKDIR/crash-*
# (turn it into a unit test and a corpus file: tests/fuzz/README.md).
set -euo pipefail
here="$(cd "$(dirname "$0")" && pwd)"
binary=$1 name=$2 seconds=$3 work=$4 seed=${5:-0}
mkdir -p "$work/corpus"
export UBSAN_OPTIONS="${UBSAN_OPTIONS:-print_stacktrace=1:halt_on_error=1}"
exec "$binary" -seed="$seed" -max_total_time="$seconds" -timeout=20 -rss_limit_mb=2048 -max_len=65536 \
  -dict="$here/$name.dict" -artifact_prefix="$work/" -print_final_stats=1 \
  "$work/corpus" "$here/corpus/$name"
