#!/usr/bin/env bash
# Throughput of `armspace measure` end to end, per stage and across
# threads. Not a test: the figures go into BENCHMARKS.md, before and after a
# change (run it on an otherwise idle machine).
# Usage:
#   scripts/throughput.sh BINARY [WORKDIR]
# BINARY must be built with `--features synth` (it draws the fields).
# Fields (etched, columnar, sdas 14 px, primary 56 px, 0.5 um/px, seed 11;
# the 64 MP field is four 4096 x 4096 fields of seeds 11-14 joined with
# python3, numpy and pillow: the renderer draws at most 32 MP at once):
#   1 MP (1024 x 1024), 4 MP (2048 x 2048), 16 MP (4096 x 4096), 64 MP.
# Prints for each: file size, CPU seconds of `measure --jobs 1` (user +
# system), megapixels per CPU second, wall seconds, peak memory (maximum
# resident set size); CPU seconds to decode the PNG alone with the image
# crate (`decode` below, the armspace library's own decoder) and the ratio;
# the share of the 4 MP run's CPU time spent in each stage (perf, when
# installed); and the wall time of four 4 MP fields with --jobs 1 and 2.
# Needs /usr/bin/time (apt-get install time); perf is optional.
set -euo pipefail
bin=$(realpath "$1"); work=${2:-$(mktemp -d)}
mkdir -p "$work"; cd "$work"
spec() { # side seed
  echo '{"width": '$1', "height": '$1', "morphology": "columnar", "style": "etched", "sdas_px": 14.0, "um_per_px": 0.5, "primary_angle_deg": 35.0, "primary_spacing_px": 56.0, "spacing_jitter": 0.1, "missing_arm_fraction": 0.03, "invert": false, "noise_sd": 0.02, "blur_sigma_px": 0.8, "illumination": 0.05, "scale_bar": null, "seed": '$2'}'
}
if [ ! -f fields/mp16.png ]; then
  echo '{"images": [
    {"file": "mp1.png", "spec": '"$(spec 1024 11)"'},
    {"file": "mp4.png", "spec": '"$(spec 2048 11)"'},
    {"file": "mp16.png", "spec": '"$(spec 4096 11)"'},
    {"file": "q12.png", "spec": '"$(spec 4096 12)"'},
    {"file": "q13.png", "spec": '"$(spec 4096 13)"'},
    {"file": "q14.png", "spec": '"$(spec 4096 14)"'},
    {"file": "j1.png", "spec": '"$(spec 2048 21)"'},
    {"file": "j2.png", "spec": '"$(spec 2048 22)"'},
    {"file": "j3.png", "spec": '"$(spec 2048 23)"'},
    {"file": "j4.png", "spec": '"$(spec 2048 24)"'}]}' >fields.json
  rm -rf fields
  "$bin" synth fields --fields fields.json >/dev/null
  python3 -c "
from PIL import Image
import numpy as np
q = [np.array(Image.open('fields/%s.png' % n)) for n in ('mp16', 'q12', 'q13', 'q14')]
Image.fromarray(np.vstack([np.hstack(q[:2]), np.hstack(q[2:])])).save('fields/mp64.png')"
  mkdir -p fields/jobs
  mv fields/j?.png fields/jobs/
fi
# Decoding alone: `armspace measure` of a field with no calibration stops
# right after decoding (and hashing) with "no calibration", so its CPU time
# is the decode's plus the bar search's; the bar search is timed in the
# per-stage figures below.
printf '%-6s %9s %9s %9s %9s %9s %11s %9s\n' field file_MB cpu_s MP/cpu_s wall_s peak_MB decode_cpu_s ratio
for f in mp1 mp4 mp16 mp64; do
  png=fields/$f.png
  mp=$(python3 -c "from PIL import Image; w,h=Image.open('$png').size; print(w*h/1e6)")
  /usr/bin/time -f '%U %S %e %M' -o t.txt "$bin" measure "$png" --um-per-px 0.5 --jobs 1 --out r-$f.json >/dev/null 2>&1 || true
  read -r u s e m < <(tail -n 1 t.txt)
  /usr/bin/time -f '%U %S' -o d.txt "$bin" measure "$png" --jobs 1 --out d-$f.json >/dev/null 2>&1 || true
  read -r du ds < <(tail -n 1 d.txt)
  python3 -c "
mp=$mp; cpu=$u+$s; dec=$du+$ds
import os
print('%-6s %9.1f %9.2f %9.2f %9.2f %9.0f %11.2f %9.1f' % ('$f', os.path.getsize('$png')/1e6, cpu, mp/cpu, $e, $m/1024, dec, cpu/max(dec,1e-9)))"
done
if command -v perf >/dev/null 2>&1; then
  echo
  echo "share of CPU time by stage, 4 MP field (perf with DWARF call graphs, inclusive):"
  perf record --call-graph dwarf,16384 -F 400 -o perf.data "$bin" measure fields/mp4.png --um-per-px 0.5 --jobs 1 --out p.json >/dev/null 2>&1 || true
  perf report -i perf.data --children --sort symbol --stdio 2>/dev/null >perf.txt || true
  for stage in load::load calibrate::scale_bar::detect annotations::find_text \
    preprocess::prepare_owned segment::segment methods::fft::measure \
    methods::intercept::measure methods::centres::measure \
    spatial::morphology::direction_samples; do
    share=$(grep -E "^ +[0-9.]+% +[0-9.]+% +\[\.\] armspace::$stage\b" perf.txt | head -1 | awk '{print $1}' || true)
    printf '  %-40s %s\n' "$stage" "${share:-n/a}"
  done
fi
echo
echo "four 4 MP fields, wall seconds:"
for j in 1 2; do
  /usr/bin/time -f '%e' -o w.txt "$bin" measure fields/jobs --um-per-px 0.5 --jobs $j --out w$j.json >/dev/null 2>&1 || true
  echo "  --jobs $j: $(tail -n 1 w.txt)"
done
