#!/usr/bin/env bash
# Shows that two builds of armspace give the same reports: the demo (with
# correlation and spec) and synthetic sets of 100 images of each style, each
# measured by both binaries. Usage:
#   scripts/compare_reports.sh OLD_BINARY NEW_BINARY [WORKDIR] [--new FIELD ...]
# OLD_BINARY is typically a build of the commit before a refactoring
# (git worktree add /tmp/old REV && cargo build --release there).
# Seeds: 9101 (clean) and 9102 (etched); both binaries render nothing, the
# sets are drawn once by OLD_BINARY.
set -euo pipefail
old=$1; new=$2; work=${3:-$(mktemp -d)}; shift 2; [ $# -gt 0 ] && shift
here=$(cd "$(dirname "$0")/.." && pwd)
export SOURCE_DATE_EPOCH=1764720000
mkdir -p "$work"
status=0
for style in clean etched; do
  seed=$([ $style = clean ] && echo 9101 || echo 9102)
  set_dir="$work/set-$style"
  [ -f "$set_dir/truth.json" ] || "$old" synth "$set_dir" --seed $seed --count 100 --style $style >/dev/null
done
run() { # bin tag
  local bin=$1 tag=$2
  rm -rf "$work/overlays"; mkdir -p "$work/overlays"
  ( cd "$here" && "$bin" measure fixtures/demo --scale-bar 200um --alloy al-si-coarsening \
      --freezing-range 50K --spec fixtures/demo-spec.json --out "$work/demo-$tag.json" \
      --csv "$work/demo-$tag.csv" --overlay "$work/overlays" 2>/dev/null || true )
  rm -rf "$work/overlays-$tag"; mv "$work/overlays" "$work/overlays-$tag"
  for style in clean etched; do
    "$bin" measure "$work/set-$style" --um-per-px 0.5 --out "$work/$style-$tag.json" 2>/dev/null || true
  done
}
run "$old" old
run "$new" new
for r in demo clean etched; do
  python3 "$here/scripts/compare_reports.py" "$work/$r-old.json" "$work/$r-new.json" "$@" || status=1
done
diff <(grep -v '^#' "$work/demo-old.csv") <(grep -v '^#' "$work/demo-new.csv") >/dev/null \
  && echo "identical: demo CSV rows" || { echo "demo CSV rows differ"; status=1; }
for f in "$work"/overlays-old/*; do
  cmp -s "$f" "$work/overlays-new/$(basename "$f")" || { echo "overlay differs: $(basename "$f")"; status=1; }
done
[ $status = 0 ] && echo "identical: demo overlays ($(ls "$work/overlays-old" | wc -l) pictures)"
exit $status
