"""Reference Otsu thresholds of committed 8-bit images, from scikit-image.

    python3 scripts/otsu_reference.py

Writes three small 8-bit greyscale PNGs to fixtures/otsu/ and
fixtures/otsu/reference.json with, for each image, what
skimage.filters.threshold_otsu returns:

* "uint8": threshold_otsu(image) on the uint8 array. For integer images
  scikit-image histograms every integer level from the minimum to the
  maximum (one bin per level, bin width 1 level = 1/255 of full scale) and
  returns a level; it is reported here divided by 255, the scale armspace's
  loader gives 8-bit files.
* "float": threshold_otsu(image / 255.0, nbins=256) on the float image:
  256 equal bins between the minimum and the maximum, the returned value the
  centre of the last bin of the lower class. "float_min", "float_max" are the
  range, so the bin width is (max - min) / 256.

Images (seeded, reproducible):
* bimodal.png, 96 x 96: two Gaussian populations of unequal weight (70 / 30 %)
  in blobs, plus noise;
* arms.png, 96 x 96: a synth-like row of secondary arms (a comb of bars of
  period 9.5 px on a trunk, rotated 30 deg), blurred, uneven illumination,
  noise;
* skewed.png, 64 x 64: a dark majority with a small bright phase (15 %) and a
  long tail of specks, where the range choice matters.
"""
import json
import pathlib

import numpy as np
from PIL import Image
from scipy.ndimage import gaussian_filter
from skimage.filters import threshold_otsu

out = pathlib.Path(__file__).resolve().parent.parent / "fixtures" / "otsu"
out.mkdir(parents=True, exist_ok=True)
rng = np.random.default_rng(20261202)


def bimodal():
    n = 96
    field = gaussian_filter(rng.normal(0, 1, (n, n)), 4)
    phase = field > np.quantile(field, 0.70)
    img = np.where(phase, 170.0, 80.0) + rng.normal(0, 18, (n, n))
    return img


def arms():
    n = 96
    y, x = np.mgrid[0:n, 0:n].astype(np.float64)
    a = np.deg2rad(30.0)
    u = x * np.cos(a) - y * np.sin(a)  # along the trunk
    v = x * np.sin(a) + y * np.cos(a)  # across the trunk
    period = 9.5
    arm = (np.mod(u, period) < 0.45 * period) & (np.abs(np.mod(v, 40.0) - 20.0) > 3.0)
    trunk = np.abs(np.mod(v, 40.0) - 20.0) <= 3.5
    phase = (arm | trunk).astype(np.float64)
    img = 60.0 + 120.0 * gaussian_filter(phase, 1.2)
    img += 25.0 * (x / n)  # uneven illumination
    img += rng.normal(0, 10, (n, n))
    return img


def skewed():
    n = 64
    field = gaussian_filter(rng.normal(0, 1, (n, n)), 3)
    phase = field > np.quantile(field, 0.85)
    img = np.where(phase, 150.0, 60.0) + rng.normal(0, 12, (n, n))
    specks = rng.random((n, n)) < 0.004
    img[specks] = 250.0
    return img


ref = {
    "source": "skimage.filters.threshold_otsu, scikit-image "
    + __import__("skimage").__version__,
    "images": {},
}
for name, make in [("bimodal", bimodal), ("arms", arms), ("skewed", skewed)]:
    img8 = np.clip(np.rint(make()), 0, 255).astype(np.uint8)
    Image.fromarray(img8, mode="L").save(out / f"{name}.png", optimize=True)
    f = img8.astype(np.float64) / 255.0
    t8 = float(threshold_otsu(img8))
    tf = float(threshold_otsu(f, nbins=256))
    ref["images"][f"{name}.png"] = {
        "uint8": t8 / 255.0,
        "uint8_level": t8,
        "float": tf,
        "float_min": float(f.min()),
        "float_max": float(f.max()),
        "foreground_fraction_uint8": float((img8 > t8).mean()),
    }
(out / "reference.json").write_text(json.dumps(ref, indent=2) + "\n")
print(json.dumps(ref, indent=2))
