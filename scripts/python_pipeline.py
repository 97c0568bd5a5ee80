"""The obvious numpy/scipy/scikit-image pipeline for the secondary arm
spacing, as a baseline for armspace's speed and accuracy (not a reference
for correctness: it is what a lab might write in an afternoon).

    python3 scripts/python_pipeline.py SET_DIR OUT.json

SET_DIR is a folder made by `armspace synth` (its truth.json gives each
image's calibration, um_per_px, as a lab would type it). For each image:

1. Grey levels as floats in 0..1 (Pillow, numpy); the illumination
   flattened by subtracting a Gaussian blur whose sigma is an eighth of
   the shorter side (scipy.ndimage.gaussian_filter).
2. FFT: tiles of 128 px every 64 px, mean removed, separable Hann window
   (scipy.signal.get_window), power spectrum (numpy.fft.fft2) whitened by
   the squared radius; the peak of the radially averaged power between
   periods of 3 px and a third of the tile, refined by a
   parabola through the radial profile; a tile counts when its peak is at
   least 4 times the median power of its ring band. The image's FFT value
   is the median of the counted tiles' periods.
3. Line intercept: the flattened image smoothed (sigma 1 px), thresholded by
   Otsu's method (skimage.filters.threshold_otsu), specks under 9 px removed
   (skimage.morphology.remove_small_objects); test lines every 16 px in
   four directions (0, 45, 90 and 135 degrees); the spacing on a line is its
   length over half its phase changes; the direction with the most changes
   per length (the one across the arms) gives the value, the mean over its
   lines.
4. The image's value: the mean of the two when both exist, else the one.

Writes {"file": {"fft_um", "intercept_um", "value_um"}} for every image.
"""
import json
import pathlib
import sys

import numpy as np
from PIL import Image
from scipy import ndimage
from scipy.signal import get_window
from skimage.filters import threshold_otsu
from skimage.morphology import remove_small_objects

TILE = 128
STEP = 64


def grey(path):
    im = Image.open(path)
    a = np.asarray(im)
    if a.ndim == 3:
        a = a[..., :3].mean(axis=2)
    a = a.astype(np.float64)
    top = 65535.0 if a.max() > 255 else 255.0
    return a / top


def flatten(a):
    return a - ndimage.gaussian_filter(a, sigma=min(a.shape) / 8.0)


def fft_period(a):
    win = get_window("hann", TILE)
    w2 = np.outer(win, win)
    f = np.fft.fftfreq(TILE)
    fy, fx = np.meshgrid(f, f, indexing="ij")
    radius = np.hypot(fx, fy) * TILE
    r_min, r_max = 3.0, TILE / 3.0
    band = (radius >= TILE / r_max) & (radius <= TILE / r_min)
    bins = np.round(radius).astype(int)
    periods = []
    for y in range(0, a.shape[0] - TILE + 1, STEP):
        for x in range(0, a.shape[1] - TILE + 1, STEP):
            t = a[y : y + TILE, x : x + TILE]
            t = (t - t.mean()) * w2
            # Whitened: power times radius squared (the spectrum of a
            # gradient), so that the falling 1/f^2 background of shading and
            # trunks does not outweigh the arms' peak (common practice, no
            # single source).
            p = np.abs(np.fft.fft2(t)) ** 2 * radius**2
            prof = np.bincount(bins[band], weights=p[band], minlength=TILE)
            cnt = np.bincount(bins[band], minlength=TILE)
            prof = np.where(cnt > 0, prof / np.maximum(cnt, 1), 0.0)
            k = int(np.argmax(prof))
            if k <= 0 or k + 1 >= len(prof) or prof[k] <= 0:
                continue
            if prof[k] < 4.0 * np.median(p[band]):
                continue
            y0, y1, y2 = prof[k - 1], prof[k], prof[k + 1]
            den = y0 - 2 * y1 + y2
            off = 0.5 * (y0 - y2) / den if den != 0 else 0.0
            r = k + float(np.clip(off, -0.5, 0.5))
            if r > 0:
                periods.append(TILE / r)
    return float(np.median(periods)) if periods else None


def intercept_period(a):
    s = ndimage.gaussian_filter(a, 1.0)
    phase = s > threshold_otsu(s)
    phase = remove_small_objects(phase, max_size=8)
    phase = ~remove_small_objects(~phase, max_size=8)
    h, w = phase.shape
    best = None
    for angle in (0, 45, 90, 135):
        t = np.deg2rad(angle)
        ux, uy = np.cos(t), np.sin(t)
        spacings, changes, length = [], 0, 0.0
        # Lines through points spaced 16 px along the normal.
        nx, ny = -uy, ux
        cx, cy = w / 2.0, h / 2.0
        reach = np.hypot(w, h) / 2.0
        for off in np.arange(-reach, reach, 16.0):
            s = np.arange(-reach, reach, 0.5)
            xs = cx + off * nx + s * ux
            ys = cy + off * ny + s * uy
            ok = (xs >= 0) & (xs <= w - 1) & (ys >= 0) & (ys <= h - 1)
            if ok.sum() < 64:
                continue
            v = phase[np.round(ys[ok]).astype(int), np.round(xs[ok]).astype(int)]
            c = int(np.count_nonzero(v[1:] != v[:-1]))
            ln = 0.5 * (ok.sum() - 1)
            changes += c
            length += ln
            if c >= 4:
                spacings.append(ln / (c / 2.0))
        if length > 0 and spacings:
            density = changes / length
            if best is None or density > best[0]:
                best = (density, float(np.mean(spacings)))
    return best[1] if best else None


def main():
    folder = pathlib.Path(sys.argv[1])
    truth = json.loads((folder / "truth.json").read_text())
    out = {}
    for rec in truth["images"]:
        um = rec["um_per_px"]
        a = flatten(grey(folder / rec["file"]))
        f = fft_period(a)
        i = intercept_period(a)
        vals = [v for v in (f, i) if v is not None]
        out[rec["file"]] = {
            "fft_um": f * um if f is not None else None,
            "intercept_um": i * um if i is not None else None,
            "value_um": float(np.mean(vals)) * um if vals else None,
        }
    pathlib.Path(sys.argv[2]).write_text(json.dumps(out, indent=1))


if __name__ == "__main__":
    main()
