#!/usr/bin/env bash
# Accuracy of `armspace measure` on synthetic evaluation sets.
#
#   scripts/accuracy.sh [-n COUNT] [-s "STYLES"] SEED...
#
# For every style and seed: renders COUNT fields (`armspace synth --style`)
# into a temporary folder, measures each image alone with the calibration
# of its truth record (`--um-per-px`), and prints per style and seed, and
# per style over all seeds, for every method in the report and for the
# combined value: the fields with a value, the median and 90th-percentile
# |relative error|, the signed median error, and (style cut) how many values
# lie nearer the row spacing than the arm spacing, and the coverage: of the
# values with a 95 % interval, how many intervals hold the truth. Featureless
# fields have no truth: their line counts the fields that got any value.
#
# Defaults: COUNT=8, STYLES="cut dense lace binary featureless".
# Set KEEP=1 to keep the temporary folder (its path is printed).
# Set ARMSPACE_BIN=PATH to measure with another build of armspace (the sets
# are still drawn and scored by this tree's): a before/after comparison.
set -euo pipefail

count=8
styles="cut dense lace binary featureless"
while getopts "n:s:" opt; do
    case $opt in
        n) count=$OPTARG ;;
        s) styles=$OPTARG ;;
        *) echo "usage: $0 [-n COUNT] [-s \"STYLES\"] SEED..." >&2; exit 2 ;;
    esac
done
shift $((OPTIND - 1))
if [ $# -eq 0 ]; then
    echo "usage: $0 [-n COUNT] [-s \"STYLES\"] SEED..." >&2
    exit 2
fi

root=$(cd "$(dirname "$0")/.." && pwd)
cd "$root"
cargo build --release --locked --features synth --bin armspace --example accuracy_eval >&2
target=${CARGO_TARGET_DIR:-$root/target}
# ARMSPACE_BIN measures with another build (for a before/after comparison
# on the same sets); the sets are drawn and scored by this tree's build.
gen_bin=$target/release/armspace
bin=${ARMSPACE_BIN:-$gen_bin}
eval_bin=$target/release/examples/accuracy_eval

work=$(mktemp -d "${TMPDIR:-/tmp}/armspace-accuracy.XXXXXX")
if [ "${KEEP:-0}" = 1 ]; then
    echo "sets kept in $work" >&2
else
    trap 'rm -rf "$work"' EXIT
fi

dirs=()
for style in $styles; do
    for seed in "$@"; do
        dir=$work/$style-$seed
        "$gen_bin" synth "$dir" --seed "$seed" --count "$count" --style "$style" >&2
        mkdir -p "$dir/reports"
        while IFS=$'\t' read -r file um; do
            # exit status 2 (no value) is a result here, not a failure
            "$bin" measure "$dir/$file" --um-per-px "$um" \
                --out "$dir/reports/$file.json" >/dev/null 2>&1 || true
            if [ ! -s "$dir/reports/$file.json" ]; then
                echo "no report for $dir/$file" >&2
                exit 1
            fi
        done < <("$eval_bin" list "$dir/truth.json")
        dirs+=("$dir")
    done
done
"$eval_bin" summarise "${dirs[@]}"
