#!/usr/bin/env bash
# armspace against the obvious numpy/scipy/scikit-image pipeline
# (scripts/python_pipeline.py: FFT tiles and line intercepts on an Otsu
# threshold) on the same synthetic fields: CPU seconds of each and the
# ratio, and for armspace's value and the pipeline's FFT, intercept and
# mean values the fields with a value and the median and 90th percentile
# |relative error| against the generator's truth. Not a test:
# the figures go into BENCHMARKS.md.
# Usage:
#   scripts/compare_python.sh BINARY SEED...
# BINARY must be built with `--features synth` (it draws the fields).
# COUNT fields per style and seed (default 10); STYLES (default
# "clean etched cut lace binary"). Needs python3 with numpy, scipy,
# scikit-image and pillow, and /usr/bin/time. armspace is run once per
# image with the calibration of the truth record and --jobs 1 (as
# scripts/accuracy.sh does); the Python pipeline once per set, in one
# process (its imports counted once a set). CPU seconds are user + system,
# children included.
set -euo pipefail
bin=$(realpath "$1"); shift
here=$(cd "$(dirname "$0")" && pwd)
count=${COUNT:-10}
styles=${STYLES:-clean etched cut lace binary}
work=$(mktemp -d "${TMPDIR:-/tmp}/armspace-vs-python.XXXXXX")
trap 'rm -rf "$work"' EXIT
sets=()
for style in $styles; do
  for seed in "$@"; do
    d=$work/$style-$seed
    "$bin" synth "$d" --seed "$seed" --count "$count" --style "$style" >/dev/null
    mkdir -p "$d/reports"
    python3 -c "
import json, sys
for r in json.load(open('$d/truth.json'))['images']:
    print(r['file'], repr(r['um_per_px']))" >"$d/list.txt"
    sets+=("$d")
  done
done
cpu() { # file -> user+system seconds
  awk '{print $1 + $2}' "$1"
}
a_cpu=0; p_cpu=0
for d in "${sets[@]}"; do
  /usr/bin/time -f '%U %S' -o "$d/time-armspace.txt" bash -c '
    while read -r file um; do
      "$1" measure "$2/$file" --um-per-px "$um" --jobs 1 --out "$2/reports/$file.json" >/dev/null 2>&1 || true
    done <"$2/list.txt"' _ "$bin" "$d"
  /usr/bin/time -f '%U %S' -o "$d/time-python.txt" python3 "$here/python_pipeline.py" "$d" "$d/python.json"
  a_cpu=$(python3 -c "print($a_cpu + $(cpu "$d/time-armspace.txt"))")
  p_cpu=$(python3 -c "print($p_cpu + $(cpu "$d/time-python.txt"))")
done
python3 - "$a_cpu" "$p_cpu" "${sets[@]}" <<'EOF'
import json, pathlib, sys
a_cpu, p_cpu = float(sys.argv[1]), float(sys.argv[2])
rows = {}
for d in map(pathlib.Path, sys.argv[3:]):
    style = d.name.rsplit("-", 1)[0]
    truth = json.loads((d / "truth.json").read_text())
    py = json.loads((d / "python.json").read_text())
    for rec in truth["images"]:
        t = rec["sdas_um"]
        rep = json.loads((d / "reports" / (rec["file"] + ".json")).read_text())
        a = rep["images"][0]["sdas_um"].get("value_unrounded")
        p = py[rec["file"]]
        keys = ("armspace", "py-fft", "py-icpt", "py-mean")
        r = rows.setdefault(style, {"n": 0, **{k: [] for k in keys}})
        r["n"] += 1
        vals = (a, p["fft_um"], p["intercept_um"], p["value_um"])
        for k, v in zip(keys, vals):
            if v is not None:
                r[k].append(abs(v / t - 1) * 100)
def q(v, f):
    v = sorted(v)
    return v[min(len(v) - 1, int(f * len(v)))] if v else float("nan")
print(f"{'style':<10} {'tool':<9} {'valued':>8} {'median|err|':>12} {'p90|err|':>9}")
for style, r in rows.items():
    for k in ("armspace", "py-fft", "py-icpt", "py-mean"):
        e = r[k]
        print(f"{style:<10} {k:<9} {len(e):>4}/{r['n']:<3} {q(e, 0.5):>11.1f}% {q(e, 0.9):>8.1f}%")
print(f"CPU seconds: armspace {a_cpu:.1f}, python {p_cpu:.1f}; python / armspace = {p_cpu / a_cpu:.2f}")
EOF
