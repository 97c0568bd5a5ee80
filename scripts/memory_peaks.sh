#!/usr/bin/env bash
# Peak memory (maximum resident set size, /usr/bin/time -v) and time of
# `armspace measure` on 64-megapixel fields, and of the cases a budget or
# the file-size rule must stop before decoding. Not a test: the numbers go
# into DEVELOPERS.md ("Memory"), before and after a change.
# Usage:
#   scripts/memory_peaks.sh BINARY [WORKDIR]
# BINARY must be built with `--features synth` (it draws the fields).
# Fields (each two 8000 x 4000 synthetic halves of one style stacked into
# an 8000 x 8000 8-bit PNG; python3 with numpy and pillow joins them):
#   coarse: columnar, etched, sdas 24 px, primary 150 px, seeds 6401 + 6402
#   fine:   columnar, etched, sdas 7 px, primary 60 px, seeds 6411 + 6412
#   finest: columnar, etched, sdas 4.5 px, primary 30 px, seeds 6421 + 6422
#           (a structure-tensor window under 8 px at the scales tried)
#   flat:   20000 x 20000 PNG, black with a grey line every 97 rows (~0.4 MB)
#   forged: the coarse field's size claimed by a 64 x 64 JPEG's header
# Needs /usr/bin/time (apt-get install time). Uses about 2 GB at most.
set -euo pipefail
bin=$(realpath "$1"); work=${2:-$(mktemp -d)}
mkdir -p "$work"; cd "$work"
field() { # name sdas primary seed1 seed2
  local name=$1 sdas=$2 primary=$3 s1=$4 s2=$5
  [ -f "$name.png" ] && return
  local spec='"width": 8000, "height": 4000, "morphology": "columnar", "style": "etched", "sdas_px": '$sdas', "um_per_px": 0.5, "primary_angle_deg": 30.0, "primary_spacing_px": '$primary', "spacing_jitter": 0.1, "missing_arm_fraction": 0.05, "invert": false, "noise_sd": 0.03, "blur_sigma_px": 1.0, "illumination": 0.1, "scale_bar": null'
  echo '{"images": [{"file": "top.png", "spec": {'"$spec"', "seed": '$s1'}}, {"file": "bottom.png", "spec": {'"$spec"', "seed": '$s2'}}]}' >"$name-fields.json"
  rm -rf "$name-halves"
  "$bin" synth "$name-halves" --fields "$name-fields.json" >/dev/null 2>&1
  python3 -c "
from PIL import Image
import numpy as np
a = np.array(Image.open('$name-halves/top.png')); b = np.array(Image.open('$name-halves/bottom.png'))
Image.fromarray(np.vstack([a, b])).save('$name.png')"
}
field coarse 24.0 150.0 6401 6402
field fine 7.0 60.0 6411 6412
field finest 4.5 30.0 6421 6422
[ -f flat.png ] || python3 -c "
from PIL import Image
import numpy as np
a = np.zeros((20000, 20000), np.uint8); a[::97, :] = 40
Image.fromarray(a).save('flat.png', optimize=True)"
[ -f forged.jpg ] || python3 -c "
from PIL import Image
import io
b = io.BytesIO(); Image.new('L', (64, 64), 90).save(b, 'JPEG'); d = bytearray(b.getvalue())
i = d.index(b'\xff\xc0'); d[i+5:i+9] = (8000).to_bytes(2, 'big') * 2
open('forged.jpg', 'wb').write(d)"
peak() { # label args...
  local label=$1; shift
  /usr/bin/time -v "$bin" measure "$@" --um-per-px 0.5 --out "$work/$label.json" 2>"$work/$label.log" || true
  printf '%-28s %10s kB  %s\n' "$label" \
    "$(grep 'Maximum resident' "$work/$label.log" | awk '{print $NF}')" \
    "$(grep 'Elapsed' "$work/$label.log" | awk '{print $NF}')"
}
echo "label                        peak RSS      wall time"
peak coarse-64MP coarse.png
peak fine-64MP fine.png
peak finest-64MP finest.png
peak coarse-64MP-overlay coarse.png --overlay "$work/overlays"
peak flat-400MP-PNG flat.png
peak forged-JPEG forged.jpg
peak two-64MP-jobs2-budget-2G coarse.png fine.png --jobs 2 --memory-budget 2G
