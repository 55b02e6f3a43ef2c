#!/usr/bin/env bash
# Runs each libFuzzer target of tests/fuzz for a bounded time from its seed corpus and prints what it did.
#   tests/fuzz/run_fuzzers.sh BUILD_DIR [SECONDS_PER_TARGET] [OUT_DIR]
# BUILD_DIR was configured with -DPITCHWIRE_FUZZ=ON and clang; the targets are built here if needed. New
# inputs go to OUT_DIR/corpus-TARGET (the seed corpus in the repository is only read); a crash leaves its
# input as OUT_DIR/crash-TARGET-* and fails the run: add it to the seed corpus and fix the code.
set -euo pipefail
here="$(cd "$(dirname "${BASH_SOURCE[0]}")" && pwd)"
build="${1:?usage: run_fuzzers.sh BUILD_DIR [SECONDS] [OUT_DIR]}"
seconds="${2:-30}"
out="${3:-$build/fuzz-out}"
targets=(decode_request band_limit config audio_file)
cmake --build "$build" -j "${PITCHWIRE_JOBS:-$(nproc)}" --target "${targets[@]/#/fuzz_}" >/dev/null
mkdir -p "$out"
status=0
printf '%-16s %12s %10s %8s %s\n' target executions exec/s corpus result
for t in "${targets[@]}"; do
  mkdir -p "$out/corpus-$t"
  log="$out/fuzz-$t.log"
  if "$build/tests/fuzz/fuzz_$t" -max_total_time="$seconds" -print_final_stats=1 -timeout=10 -rss_limit_mb=2048 \
       -artifact_prefix="$out/crash-$t-" "$out/corpus-$t" "$here/corpus/$t" >"$log" 2>&1; then
    result=clean
  else
    result="FAILED (see $log)"
    status=1
  fi
  runs=$(sed -n 's/^stat::number_of_executed_units: *//p' "$log" | tail -1)
  rate=$(sed -n 's/^stat::average_exec_per_sec: *//p' "$log" | tail -1)
  corpus=$(find "$out/corpus-$t" "$here/corpus/$t" -type f | wc -l)
  printf '%-16s %12s %10s %8s %s\n' "$t" "${runs:-?}" "${rate:-?}" "$corpus" "$result"
done
exit $status
