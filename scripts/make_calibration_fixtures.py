"""Writes TIFFs with resolution tags for the calibration tests, with tifffile.

    python3 scripts/make_calibration_fixtures.py

fixtures/calibration/res_2um.tif    200 x 160 uint8 grating (period 12 px),
                                    XResolution = YResolution = 5000 / cm,
                                    ResolutionUnit = 3: 2 um per pixel
fixtures/calibration/res_72dpi.tif  the same image at 72 pixels per inch
"""
import pathlib

import numpy as np
import tifffile

out = pathlib.Path(__file__).resolve().parent.parent / "fixtures" / "calibration"
out.mkdir(parents=True, exist_ok=True)
y, x = np.mgrid[0:160, 0:200]
img = (128 + 80 * np.cos(2 * np.pi * x / 12.0)).astype(np.uint8)
tifffile.imwrite(out / "res_2um.tif", img, resolution=(5000, 5000), resolutionunit="CENTIMETER")
tifffile.imwrite(out / "res_72dpi.tif", img, resolution=(72, 72), resolutionunit="INCH")
for p in sorted(out.iterdir()):
    with tifffile.TiffFile(p) as t:
        tags = t.pages[0].tags
        print(p.name, tags["XResolution"].value, tags["ResolutionUnit"].value)
