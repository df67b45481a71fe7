#!/usr/bin/env bash
# Installs what is missing, builds, and runs the whole test suite twice: a plain optimised
# build and one under AddressSanitizer + UndefinedBehaviorSanitizer (a report fails its test).
# Then builds the libFuzzer harnesses with clang and runs each for 20 s from its seed corpus
# (a crash, leak, timeout or sanitizer report fails it). Ends with one line "N passed, N failed".
set -uo pipefail
cd "$(dirname "$0")/.."
scripts/setup.sh --with-fuzz || exit 1
status=0
run_suite() {  # folder, extra meson options...
  local dir=$1; shift
  if [ ! -d "$dir" ]; then
    meson setup "$dir" "$@" >/dev/null || return 1
  fi
  ninja -C "$dir" >/dev/null || { ninja -C "$dir"; return 1; }
  meson test -C "$dir" --print-errorlogs --num-processes 2 || return 1
}
run_suite build-test || status=1
ASAN_OPTIONS=detect_leaks=1:abort_on_error=0 UBSAN_OPTIONS=halt_on_error=1:print_stacktrace=1 \
  run_suite build-test-san -Db_sanitize=address,undefined || status=1
# The fuzzers: only their targets are built in this folder, and only the 'fuzzrun' suite runs.
run_fuzz() {
  local dir=build-test-fuzz
  if [ ! -d "$dir" ]; then
    CC=clang meson setup "$dir" -Dfuzz=true -Db_sanitize=address,undefined -Db_lundef=false >/dev/null || return 1
  fi
  local targets=(tests/fuzz/volume/fuzz_brv tests/fuzz/scene/fuzz_scene tests/fuzz/obj/fuzz_obj)
  ninja -C "$dir" "${targets[@]}" >/dev/null || { ninja -C "$dir" "${targets[@]}"; return 1; }
  meson test -C "$dir" --suite fuzzrun --no-rebuild --print-errorlogs --num-processes 2 || return 1
}
run_fuzz || status=1
python3 - build-test build-test-san build-test-fuzz <<'PY'
import json, os, sys
passed = failed = 0
for d in sys.argv[1:]:
    p = os.path.join(d, 'meson-logs', 'testlog.json')
    if not os.path.exists(p):
        failed += 1
        continue
    for line in open(p):
        r = json.loads(line).get('result')
        if r == 'OK': passed += 1
        elif r in ('SKIP',): pass
        else: failed += 1
print(f"{passed} passed, {failed} failed")
PY
exit $status
