#!/usr/bin/env python3
"""Writes the seed corpus of the fuzz targets (fuzz/seeds/<target>/).

Small valid inputs of each kind, so that the fuzzer starts inside the
formats: grey BMP and uncompressed TIFF micrographs with a scale bar (raw
pixel formats, whose mutations reach the pixels; a PNG's checksums stop
most), a spec, profiles, a user correlation file, hand-measured lines and
command-line values. Needs Pillow and numpy. The inputs the fuzzers found
(fuzz/seeds/<target>/found-*) are not written here: they are kept as found.
"""
import json
import os

import numpy as np
from PIL import Image

ROOT = os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "fuzz", "seeds")


def put(target, name, data):
    d = os.path.join(ROOT, target)
    os.makedirs(d, exist_ok=True)
    mode = "wb" if isinstance(data, bytes) else "w"
    with open(os.path.join(d, name), mode) as f:
        f.write(data)


def field(w, h, seed):
    rng = np.random.default_rng(seed)
    base = 0.45 + 0.1 * rng.random((h, w))
    return base


def save(target, name, a, fmt, bits=8):
    if bits == 16:
        img = Image.fromarray((a * 65535).round().astype(np.uint16))
    else:
        img = Image.fromarray((a * 255).round().astype(np.uint8), "L")
    path = os.path.join(ROOT, target, name)
    os.makedirs(os.path.dirname(path), exist_ok=True)
    img.save(path, fmt)


# Images: a dark bar on a textured field; a light bar on a dark backing box.
a = field(128, 64, 1)
a[50:54, 70:110] = 0.0
save("decode_calibrate", "dark-bar.bmp", a, "BMP")
save("decode_calibrate", "dark-bar.tif", a, "TIFF")
b = field(128, 64, 2)
b[38:60, 10:70] = 0.02
b[47:50, 20:60] = 1.0
save("decode_calibrate", "light-bar-on-box.bmp", b, "BMP")
save("decode_calibrate", "light-bar-on-box-16bit.tif", b, "TIFF", bits=16)

spec = {
    "format": "armspace.spec/1",
    "title": "seed",
    "rule": "guarded",
    "statistic": "value",
    "limit_um": 40,
    "zones": [
        {"name": "thin", "pattern": "*-thin.*", "limit_um": 25, "rule": "simple"},
        {"name": "thick", "pattern": "zone/*.tif", "limit_um": 75, "statistic": "max_local"},
    ],
}
put("spec", "spec.json", json.dumps(spec, indent=1))

put(
    "profile",
    "profiles.json",
    json.dumps(
        {
            "profiles": {
                "x20": 0.345,
                "x50": {"um_per_px": 0.138, "rel_uncertainty": 0.004, "note": "stage micrometer"},
            }
        },
        indent=1,
    ),
)

source = {"authors": "seed", "year": 2026, "title": "seed", "published_in": "fuzz seeds"}
corr = {
    "format": "armspace.correlations/1",
    "correlations": [
        {
            "id": "seed-cr",
            "alloy_family": "Al-Si-Cu foundry alloys",
            "form": "cooling_rate",
            "sdas_unit": "um",
            "variable_unit": "K/min",
            "coefficient": {"value": 77.09, "power": {"Cu": {"exponent": -0.1989}}},
            "exponent": 0.252,
            "composition_wt_pct": {"Cu": {"min": 1.0, "max": 4.0}},
            "fitted_range": {"min": 0.01, "max": 1},
            "scatter_pct": 12,
            "source": source,
        },
        {
            "id": "seed-time",
            "alloy_family": "Al-Cu",
            "form": "solidification_time",
            "sdas_unit": "mm",
            "variable_unit": "min",
            "coefficient": {"value": 0.01, "linear": {"Si": 0.001}},
            "exponent": 0.33,
            "fitted_sdas_um": {"min": 5, "max": 150},
            "source": source,
        },
        {
            "id": "seed-coarsening",
            "alloy_family": "Al-Cu",
            "form": "coarsening",
            "sdas_unit": "um",
            "variable_unit": "s",
            "coarsening": {
                "solute": "Cu",
                "prefactor": {"value": 5.5},
                "gibbs_thomson_K_m": {"value": 2.36e-07},
                "diffusivity_m2_per_s": {"value": 2.4e-09},
                "liquidus_slope_K_per_wt_pct": {"value": -3.377},
                "partition_coefficient": {"value": 0.1702},
                "c0_wt_pct": {"value": 4.5},
                "ce_wt_pct": {"value": 33.2},
                "melting_point_degC": {"value": 660.32},
                "eutectic_temperature_degC": {"value": 548.2},
                "max_solubility_wt_pct": {"value": 5.65},
            },
            "source": source,
        },
    ],
}
put("correlations", "user.json", json.dumps(corr, indent=1))

# The first byte picks the convention (even: centre to centre).
put("manual_lines", "centre-to-centre.csv", "\x00length_um,arms,operator\n212.5,6,A\n180,5,B\n# c\n90,4,A\n")
put("manual_lines", "length-over-count.csv", "\x01length_um,arms\n100,5\n132,6\n")

for i, v in enumerate(["50um", "0.1 mm", "500nm", "100\u00b5m", "Si=7,Cu=0.5wt%", "60K", "25degC", "K/min", "0.345"]):
    put("units", f"value-{i}.txt", v)
