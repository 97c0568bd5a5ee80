"""Reference power spectrum of a committed tile, computed with numpy.fft.

    python3 scripts/spectrum_reference.py

Writes fixtures/spectrum/tile64.png (a 64 x 64 8-bit tile: two gratings, a
ramp and seeded noise) and fixtures/spectrum/tile64_power.json: the power
spectrum |F(u, v)|^2, row-major [v][u], unshifted, of the tile's grey values
(8-bit value / 255) after removing the Hann-weighted mean and multiplying by
the separable periodic Hann window (scipy.signal.get_window("hann", 64)).
This is the quantity armspace's methods::spectrum::SpectrumAnalyser::power
computes.
"""
import json
import pathlib

import numpy as np
from PIL import Image
from scipy.signal import get_window

N = 64
out = pathlib.Path(__file__).resolve().parent.parent / "fixtures" / "spectrum"
out.mkdir(parents=True, exist_ok=True)

rng = np.random.default_rng(20261202)
y, x = np.mgrid[0:N, 0:N].astype(np.float64)
tile = (
    120
    + 50 * np.cos(2 * np.pi * (x * np.cos(0.5) - y * np.sin(0.5)) / 9.3)
    + 20 * np.cos(2 * np.pi * y / 4.1)
    + 0.6 * x
    + rng.normal(0, 8, (N, N))
)
tile8 = np.clip(np.rint(tile), 0, 255).astype(np.uint8)
Image.fromarray(tile8, mode="L").save(out / "tile64.png")

g = tile8.astype(np.float64) / 255.0
w1 = get_window("hann", N)  # periodic Hann: 0.5 - 0.5 cos(2 pi k / N)
w = np.outer(w1, w1)
mean = (w * g).sum() / w.sum()
power = np.abs(np.fft.fft2((g - mean) * w)) ** 2
json.dump(
    {
        "source": "numpy.fft.fft2 " + np.__version__ + ", scipy.signal.get_window('hann', 64)",
        "n": N,
        "power": [[float(v) for v in row] for row in power],
    },
    open(out / "tile64_power.json", "w"),
)
print("max power", power.max(), "total", power.sum())
