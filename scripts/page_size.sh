#!/usr/bin/env bash
# Size of the HTML page of a batch (issue: a page of 200 images under 30 MB).
# Renders COUNT synthetic fields (default 200; etched and clean alternate,
# 400-1000 px, seed SEED, default 2026), measures them with --html and
# prints the page's size, per image and in all.
#   scripts/page_size.sh [COUNT] [SEED]
set -euo pipefail
cd "$(dirname "$0")/.."
count=${1:-200}
seed=${2:-2026}
cargo build --release --features synth --quiet
bin=target/release/armspace
work=$(mktemp -d)
trap 'rm -rf "$work"' EXIT
"$bin" synth "$work/fields" --seed "$seed" --count "$count" >/dev/null
um=$(python3 -c "import json,sys; t=json.load(open(sys.argv[1])); print(t['images'][0]['um_per_px'])" "$work/fields/truth.json")
"$bin" measure "$work/fields" --um-per-px "$um" --out "$work/report.json" --html "$work/page.html" >/dev/null 2>&1 || true
bytes=$(stat -c %s "$work/page.html")
python3 - "$bytes" "$count" <<'P'
import sys
b, n = int(sys.argv[1]), int(sys.argv[2])
print(f"page of {n} images: {b/1e6:.1f} MB, {b/n/1e3:.0f} kB per image (target: 200 images under 30 MB)")
P
