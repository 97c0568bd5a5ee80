#!/usr/bin/env bash
# Shows that two builds of armspace give the same reports: the demo (with
# correlation and spec) and synthetic sets of 100 images of each style, each
# measured by both binaries, and the scale bars `calibrate` finds in them.
# Usage:
#   scripts/compare_reports.sh OLD_BINARY NEW_BINARY [WORKDIR] [--new FIELD ...]
# COUNT (default 100) images per style; STYLES (default all seven).
# OLD_BINARY is typically a build of the commit before a refactoring
# (git worktree add /tmp/old REV && cargo build --release there).
# Seeds: 9101 clean, 9102 etched, 9103 cut, 9104 dense, 9105 lace, 9106
# binary, 9107 featureless; the sets are drawn once, by OLD_BINARY (which
# must be built with the generator, `--features synth` since it is a feature).
set -euo pipefail
old=$1; new=$2; work=${3:-$(mktemp -d)}; shift 2; [ $# -gt 0 ] && shift
here=$(cd "$(dirname "$0")/.." && pwd)
export SOURCE_DATE_EPOCH=1764720000
mkdir -p "$work"
status=0
count=${COUNT:-100}
styles=${STYLES:-clean etched cut dense lace binary featureless}
seed_of() { case $1 in clean) echo 9101;; etched) echo 9102;; cut) echo 9103;; dense) echo 9104;;
  lace) echo 9105;; binary) echo 9106;; featureless) echo 9107;; esac; }
for style in $styles; do
  set_dir="$work/set-$style"
  [ -f "$set_dir/truth.json" ] || "$old" synth "$set_dir" --seed "$(seed_of $style)" --count "$count" --style $style >/dev/null
done
run() { # bin tag
  local bin=$1 tag=$2
  rm -rf "$work/overlays"; mkdir -p "$work/overlays"
  ( cd "$here" && "$bin" measure fixtures/demo --scale-bar 200um --alloy al-si-coarsening \
      --freezing-range 50K --spec fixtures/demo-spec.json --out "$work/demo-$tag.json" \
      --csv "$work/demo-$tag.csv" --overlay "$work/overlays" 2>/dev/null || true )
  rm -rf "$work/overlays-$tag"; mv "$work/overlays" "$work/overlays-$tag"
  for style in $styles; do
    "$bin" measure "$work/set-$style" --um-per-px 0.5 --out "$work/$style-$tag.json" 2>/dev/null || true
    # The bar lengths differ between fields: 100 um is a placeholder; what is
    # compared is where each bar was found and measured.
    "$bin" calibrate "$work/set-$style" --scale-bar 100um >"$work/$style-bars-$tag.json" 2>/dev/null || true
  done
}
run "$old" old
run "$new" new
for r in demo $styles $(for s in $styles; do echo "$s-bars"; done); do
  python3 "$here/scripts/compare_reports.py" "$work/$r-old.json" "$work/$r-new.json" "$@" || status=1
done
diff <(grep -v '^#' "$work/demo-old.csv") <(grep -v '^#' "$work/demo-new.csv") >/dev/null \
  && echo "identical: demo CSV rows" || { echo "demo CSV rows differ"; status=1; }
for f in "$work"/overlays-old/*; do
  cmp -s "$f" "$work/overlays-new/$(basename "$f")" || { echo "overlay differs: $(basename "$f")"; status=1; }
done
[ $status = 0 ] && echo "identical: demo overlays ($(ls "$work/overlays-old" | wc -l) pictures)"
exit $status
