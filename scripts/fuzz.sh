#!/usr/bin/env bash
# Runs each fuzz target for a bounded time and says what it found.
#
#   scripts/fuzz.sh [SECONDS] [TARGET...]
#
# SECONDS per target (default 60); all targets when none is named. Needs a
# nightly toolchain and cargo-fuzz (`cargo install cargo-fuzz`); CI needs
# neither. One fuzzing process with one job at a time, at low priority.
# Each target starts from its committed corpus (fuzz/seeds/TARGET: seeds and
# the inputs earlier runs found) plus the working corpus it grows
# (fuzz/corpus/TARGET, not committed); a failing input is written to
# fuzz/artifacts/TARGET/ and the run's log to fuzz/logs/TARGET.log. The
# build is sanitizer-free (safe Rust; release with debug assertions and
# overflow checks), in fuzz/target, apart from the main build.
set -euo pipefail
root="$(cd "$(dirname "$0")/.." && pwd)"
secs="${1:-60}"
shift || true
all=(decode_calibrate spec profile correlations manual_lines units)
if [ "$#" -gt 0 ]; then targets=("$@"); else targets=("${all[@]}"); fi
case "$secs" in ''|*[!0-9]*) echo "fuzz.sh: SECONDS must be a whole number, got '$secs'" >&2; exit 2;; esac
if ! cargo +nightly fuzz --version >/dev/null 2>&1; then
  echo "fuzz.sh: needs a nightly toolchain and cargo-fuzz (cargo install cargo-fuzz)" >&2
  exit 2
fi

cd "$root/fuzz"
unset CARGO_TARGET_DIR
export CARGO_BUILD_JOBS="${CARGO_BUILD_JOBS:-1}"
tdir="$root/fuzz/target"
# cargo fuzz build takes one target or none (all of them).
if [ "${#targets[@]}" -eq 1 ]; then one=("${targets[0]}"); else one=(); fi
mkdir -p logs
if ! nice -n 10 cargo +nightly fuzz build -s none --target-dir "$tdir" "${one[@]}" >logs/build.log 2>&1; then
  cat logs/build.log >&2
  exit 2
fi
bin="$tdir/x86_64-unknown-linux-gnu/release"
found=0
printf '%-18s %8s %12s %9s  %s\n' target seconds executions corpus result
for t in "${targets[@]}"; do
  mkdir -p "corpus/$t" "artifacts/$t" "seeds/$t"
  log="logs/$t.log"
  # With -jobs the fuzzing process writes its log as fuzz-0.log in the
  # folder it runs in: one folder per target, so that runs do not mix.
  work="logs/$t.run"
  rm -rf "$work" && mkdir -p "$work"
  # The text targets' dictionary: their keywords and numbers at the edges
  # of f64 (fuzz/dicts/), which random mutation seldom spells.
  dict=()
  if [ -f "dicts/$t.dict" ]; then
    cat "dicts/$t.dict" dicts/numbers.dict >"$work/all.dict"
    dict=(-dict="$root/fuzz/$work/all.dict")
  fi
  start=$(date +%s)
  status=0
  (cd "$work" && nice -n 10 "$bin/$t" -artifact_prefix="$root/fuzz/artifacts/$t/" \
    -max_total_time="$secs" -jobs=1 -workers=1 -timeout=20 -print_final_stats=1 \
    "${dict[@]}" "$root/fuzz/corpus/$t" "$root/fuzz/seeds/$t") >"$log" 2>&1 || status=$?
  cat "$work"/fuzz-*.log >>"$log" 2>/dev/null || true
  rm -rf "$work"
  took=$(( $(date +%s) - start ))
  execs=$(grep -o 'stat::number_of_executed_units: *[0-9]*' "$log" | tail -1 | grep -o '[0-9]*$' || true)
  corpus=$(ls "corpus/$t" | wc -l)
  # Inputs written by this run (earlier runs' stay until removed).
  new=$(find "artifacts/$t" -type f -newermt "@$start" -printf '%f ' 2>/dev/null || true)
  if [ -n "$new" ] || grep -q 'ERROR: libFuzzer\|panicked at' "$log"; then
    result="FOUND: ${new}(see fuzz/$log)"
    found=1
  elif [ "$status" -ne 0 ]; then
    result="failed to run (status $status, see fuzz/$log)"
    found=1
  else
    result="nothing found"
  fi
  printf '%-18s %8s %12s %9s  %s\n' "$t" "$took" "${execs:-?}" "$corpus" "$result"
done
exit "$found"
