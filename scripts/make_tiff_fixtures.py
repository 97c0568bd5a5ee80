"""Writes the loader's TIFF fixtures with tifffile, a writer independent of
armspace's own image stack.

    python3 scripts/make_tiff_fixtures.py

fixtures/loader/ramp16.tif       64 x 48, uint16, value (x * 1021 + y * 37) mod 65536
fixtures/loader/two_pages16.tif  two 40 x 40 uint16 pages (page 0: 1000, page 1: 60000)
fixtures/loader/rgb16.tif        32 x 32 x 3 uint16, R = 65535, G = 0, B = 0
"""
import pathlib

import numpy as np
import tifffile

out = pathlib.Path(__file__).resolve().parent.parent / "fixtures" / "loader"
out.mkdir(parents=True, exist_ok=True)

y, x = np.mgrid[0:48, 0:64]
ramp = ((x * 1021 + y * 37) % 65536).astype(np.uint16)
tifffile.imwrite(out / "ramp16.tif", ramp, photometric="minisblack")

pages = np.stack([np.full((40, 40), 1000, np.uint16), np.full((40, 40), 60000, np.uint16)])
tifffile.imwrite(out / "two_pages16.tif", pages, photometric="minisblack")

rgb = np.zeros((32, 32, 3), np.uint16)
rgb[..., 0] = 65535
tifffile.imwrite(out / "rgb16.tif", rgb, photometric="rgb")
print("wrote", sorted(p.name for p in out.iterdir()))
