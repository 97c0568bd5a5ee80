"""Writes the bad-input corpus, fixtures/bad/, and its README.md table.

    pip install numpy==2.4.6 tifffile==2026.3.3 pillow==13.0.0
    python3 scripts/make_bad_fixtures.py

Dependencies: Python 3.9 or later, numpy, tifffile and Pillow (the versions
above wrote the committed files; other versions may encode the good images
with other bytes, but every case is the same). Everything is deterministic:
no random numbers, no time stamps (tifffile is asked for no DateTime tag and
no description; Pillow writes none).

The corpus is meant to be small on disk: a bomb is a small file that claims
a huge size or inflates to one. Cases that cannot be committed (a 50 MB text
file, a FIFO, an unreadable file, non-UTF-8 and newline file names, a
symlink loop) are made by tests/bad_inputs.rs at run time.

Every image is made from one good micrograph: a 256 x 256 crop of the demo's
6 mm step (fixtures/demo/plate-CVF-SP4-step06mm.png, 1.25 um per pixel,
about 18 um SDAS), written as images/good.png. What each file is, what is
wrong with it and what armspace does with it is in fixtures/bad/README.md,
which this script writes from the CASES table below; the facts of each
format are cited beside the code that breaks it.
"""
import io
import json
import pathlib
import shutil
import struct
import zlib

import numpy as np
import tifffile
from PIL import Image

ROOT = pathlib.Path(__file__).resolve().parent.parent
OUT = ROOT / "fixtures" / "bad"
IMAGES = OUT / "images"
TEXT = OUT / "text"

# Every case: (file, what is wrong, what armspace does). The tests in
# tests/bad_inputs.rs assert the third column; keep the two in step.
CASES = []


def case(folder, name, data, wrong, expected):
    path = folder / name
    path.write_bytes(data)
    CASES.append((f"{folder.name}/{name}", wrong, expected))


# ---- the good micrograph -----------------------------------------------------

demo = Image.open(ROOT / "fixtures" / "demo" / "plate-CVF-SP4-step06mm.png")
assert demo.mode == "L", demo.mode
crop = np.asarray(demo.crop((0, 0, 256, 256)), dtype=np.uint8)


def png_bytes(img, **kw):
    buf = io.BytesIO()
    img.save(buf, format="PNG", optimize=False, compress_level=9, **kw)
    return buf.getvalue()


def pil_bytes(img, fmt, **kw):
    buf = io.BytesIO()
    img.save(buf, format=fmt, **kw)
    return buf.getvalue()


def tiff_bytes(arr, **kw):
    buf = io.BytesIO()
    kw.setdefault("photometric", "minisblack")
    tifffile.imwrite(buf, arr, metadata=None, datetime=None, software=None, **kw)
    return buf.getvalue()


GOOD_PNG = png_bytes(Image.fromarray(crop))
GOOD_JPG = pil_bytes(Image.fromarray(crop), "JPEG", quality=92)
GOOD_TIF = tiff_bytes(crop)
GOOD_BMP = pil_bytes(Image.fromarray(crop), "BMP")
# A 64 x 64 corner of the same crop, in every format: the base of the cases
# that break a header or cut the data short, so that they stay small.
small = np.ascontiguousarray(crop[:64, :64])
SMALL_PNG = png_bytes(Image.fromarray(small))
SMALL_JPG = pil_bytes(Image.fromarray(small), "JPEG", quality=92)
SMALL_TIF = tiff_bytes(small)
SMALL_BMP = pil_bytes(Image.fromarray(small), "BMP")


# ---- PNG chunks (ISO/IEC 15948 = PNG 2nd edition, section 5) -----------------

PNG_SIG = b"\x89PNG\r\n\x1a\n"


def chunks(data):
    """(type, payload) of every chunk after the signature."""
    assert data.startswith(PNG_SIG)
    at, out = len(PNG_SIG), []
    while at < len(data):
        (n,) = struct.unpack(">I", data[at : at + 4])
        out.append((data[at + 4 : at + 8], data[at + 8 : at + 8 + n]))
        at += 12 + n
    return out


def chunk(kind, payload, crc=None):
    """A chunk: length, type, data, CRC-32 of type and data (PNG 5.3)."""
    if crc is None:
        crc = zlib.crc32(kind + payload) & 0xFFFFFFFF
    return struct.pack(">I", len(payload)) + kind + payload + struct.pack(">I", crc)


def png_from(parts):
    return PNG_SIG + b"".join(chunk(k, p) for k, p in parts)


def ihdr(width, height, depth=8, colour=0):
    # PNG 11.2.2: width, height, bit depth, colour type, compression,
    # filter, interlace.
    return struct.pack(">IIBBBBB", width, height, depth, colour, 0, 0, 0)


def zeros_stream(n_bytes, chunk_size=1 << 20):
    """A zlib stream inflating to n_bytes zero bytes (filter type 0 rows of
    level 0 when used as PNG image data)."""
    c = zlib.compressobj(9)
    out = []
    block = bytes(min(chunk_size, n_bytes))
    left = n_bytes
    while left:
        k = min(left, len(block))
        out.append(c.compress(block[:k]))
        left -= k
    out.append(c.flush())
    return b"".join(out)


def write_images():
    shutil.rmtree(IMAGES, ignore_errors=True)
    IMAGES.mkdir(parents=True)
    measured = "measured: SDAS about 18 um (the good image's value)"

    case(IMAGES, "good.png", GOOD_PNG, "nothing: the good micrograph (256 x 256 crop of the demo's 6 mm step)", measured)

    # -- truncated and corrupt PNG ------------------------------------------
    parts = chunks(GOOD_PNG)
    assert [k for k, _ in parts][0] == b"IHDR"  # PNG 5.6: IHDR first
    n = len(GOOD_PNG)
    for name, cut, why, expected in [
        ("png-cut-at-4", 4, "the signature cut after 4 of its 8 bytes", "error: not a supported image: not a known image format (too little is left to tell); exit 3"),
        ("png-cut-at-8", 8, "the signature alone", "error: damaged or truncated (header unreadable); exit 3"),
        ("png-cut-at-20", 20, "cut inside IHDR", "error: damaged or truncated (header unreadable); exit 3"),
        ("png-cut-at-33", 33, "signature and IHDR only: no image data", "error: damaged or truncated (header unreadable); exit 3"),
        ("png-cut-before-iend", n - 12, f"everything but the 12-byte IEND chunk ({n - 12} of {n} bytes)", "error: damaged or truncated: unexpected end of file (every row is there, the file is still incomplete); exit 3"),
    ]:
        case(IMAGES, f"{name}.png", GOOD_PNG[:cut], f"PNG {why}", expected)
    half = len(SMALL_PNG) // 2
    case(IMAGES, "png-small-cut-in-half.png", SMALL_PNG[:half], f"64 x 64 PNG cut in the middle of the image data ({half} of {len(SMALL_PNG)} bytes)", "error: damaged or truncated; exit 3")

    # The header-level damage is done to the 64 x 64 corner (small files).
    parts = chunks(SMALL_PNG)
    bad_crc = bytearray(SMALL_PNG)
    bad_crc[8 + 8 + 13] ^= 0xFF  # first byte of IHDR's CRC
    case(IMAGES, "png-bad-ihdr-crc.png", bytes(bad_crc), "PNG whose IHDR CRC is wrong", "error: damaged or truncated (CRC); exit 3")

    idat = b"".join(p for k, p in parts if k == b"IDAT")
    broken = bytearray(idat)
    for i in range(len(broken) // 3, len(broken) // 3 + 64):
        broken[i] ^= 0x5A
    others = [(k, p) for k, p in parts if k not in (b"IDAT", b"IEND")]
    case(
        IMAGES,
        "png-corrupt-deflate.png",
        png_from(others + [(b"IDAT", bytes(broken)), (b"IEND", b"")]),
        "PNG whose compressed image data is scrambled (chunk CRCs recomputed, so only the deflate stream is wrong)",
        "error: damaged or truncated; exit 3",
    )
    # RFC 1950 section 2.2: a zlib stream ends with the Adler-32 of the
    # uncompressed data (here the filtered rows, PNG 10.1).
    raw = b"".join(b"\0" + small[y].tobytes() for y in range(64))
    z = zlib.compress(raw, 9)
    case(
        IMAGES,
        "png-wrong-adler32.png",
        png_from([(b"IHDR", ihdr(64, 64)), (b"IDAT", z[:-4] + bytes(b ^ 0xFF for b in z[-4:])), (b"IEND", b"")]),
        "PNG whose zlib check value (Adler-32) is wrong; the deflate data and every chunk CRC are intact",
        "error: damaged: fails its check value (zlib Adler-32); exit 3",
    )
    stored = bytearray(zlib.compress(raw, 0))  # one stored block: 2-byte zlib header, 5-byte block header
    assert len(raw) < 65535 and stored[2] & 0x06 == 0  # RFC 1951 3.2.4: BTYPE 00, stored
    for y in range(20, 28):
        for x in range(1, 65):  # pixel bytes only; filter bytes (x = 0) kept
            stored[7 + y * 65 + x] ^= 0xFF
    case(
        IMAGES,
        "png-altered-pixels.png",
        png_from([(b"IHDR", ihdr(64, 64)), (b"IDAT", bytes(stored)), (b"IEND", b"")]),
        "PNG whose pixel bytes (rows 20-27, stored uncompressed) were inverted after writing; chunk CRCs recomputed, Adler-32 of the original",
        "error: damaged: fails its check value (zlib Adler-32); exit 3 (before armspace checked it, such a file was measured as if intact)",
    )
    case(
        IMAGES,
        "png-bit-depth-7.png",
        png_from([(b"IHDR", ihdr(64, 64, depth=7))] + [(k, p) for k, p in parts if k != b"IHDR"]),
        "PNG with bit depth 7 (PNG 11.2.2 allows 1, 2, 4, 8, 16)",
        "error: damaged or truncated (header); exit 3",
    )
    case(
        IMAGES,
        "png-zero-width.png",
        png_from([(b"IHDR", ihdr(0, 64))] + [(k, p) for k, p in parts if k != b"IHDR"]),
        "PNG with width 0 (PNG 11.2.2: zero is invalid)",
        "error: damaged or truncated (header); exit 3",
    )

    # -- truncated and corrupt JPEG (ITU-T T.81) ----------------------------
    assert GOOD_JPG[:2] == b"\xff\xd8"  # T.81 B.1.1.3: SOI first
    sos = GOOD_JPG.index(b"\xff\xda")
    n = len(GOOD_JPG)
    for name, cut, why, expected in [
        ("jpeg-cut-at-2", 2, "SOI marker alone", "error: not a supported image: not a known image format (too little is left to tell); exit 3"),
        ("jpeg-cut-before-scan", sos, f"all tables and the frame header, no scan ({sos} bytes)", "error: damaged or truncated (header unreadable); exit 3"),
        ("jpeg-cut-before-eoi", n - 2, f"everything but the 2-byte EOI marker ({n - 2} of {n} bytes)", "measured: every block is there, only the end marker is missing; within 5 % of good.png (JPEG is lossy)"),
    ]:
        case(IMAGES, f"{name}.jpg", GOOD_JPG[:cut], f"JPEG {why}", expected)
    s_sos = SMALL_JPG.index(b"\xff\xda")
    half = s_sos + (len(SMALL_JPG) - s_sos) // 2
    case(IMAGES, "jpeg-small-cut-in-scan.jpg", SMALL_JPG[:half], f"64 x 64 JPEG cut in the middle of the scan ({half} of {len(SMALL_JPG)} bytes)", "error: damaged or truncated (the JPEG ends early); exit 3")
    dqt = SMALL_JPG.index(b"\xff\xdb")
    (seg,) = struct.unpack(">H", SMALL_JPG[dqt + 2 : dqt + 4])
    no_dqt = SMALL_JPG[:dqt] + SMALL_JPG[dqt + 2 + seg :]
    assert b"\xff\xdb" not in no_dqt[: s_sos - seg]
    case(IMAGES, "jpeg-no-quant-table.jpg", no_dqt, "JPEG without its quantisation table (DQT, T.81 B.2.4.1)", "error: damaged or truncated; exit 3")

    # -- truncated and corrupt TIFF (TIFF 6.0, section 2) -------------------
    n = len(GOOD_TIF)
    assert GOOD_TIF[:4] == b"II*\0"  # TIFF 6.0 p. 13: byte order, 42
    (ifd,) = struct.unpack("<I", SMALL_TIF[4:8])
    for name, cut, why in [
        ("tiff-cut-at-4", 4, "byte order and magic number only"),
        ("tiff-cut-at-8", 8, "the 8-byte header alone (its first IFD offset points past the end)"),
        ("tiff-cut-last-byte", n - 1, f"the last byte missing ({n - 1} of {n} bytes)"),
    ]:
        case(IMAGES, f"{name}.tif", GOOD_TIF[:cut], f"TIFF {why}", "error: damaged or truncated; exit 3")
    half = len(SMALL_TIF) // 2
    case(IMAGES, "tiff-small-cut-in-half.tif", SMALL_TIF[:half], f"64 x 64 TIFF cut in the middle of the pixel data ({half} of {len(SMALL_TIF)} bytes)", "error: damaged or truncated; exit 3")
    far = bytearray(SMALL_TIF)
    far[4:8] = struct.pack("<I", 0xFFFFFFF0)
    case(IMAGES, "tiff-ifd-offset-past-end.tif", bytes(far), "TIFF whose first IFD offset points far past the end of the file", "error: damaged or truncated; exit 3")
    many = bytearray(SMALL_TIF)
    many[ifd : ifd + 2] = struct.pack("<H", 0xFFFF)
    case(IMAGES, "tiff-ifd-65535-entries.tif", bytes(many), "TIFF whose IFD claims 65535 entries (the file holds a few)", "error: damaged or truncated; exit 3")

    # -- truncated and corrupt BMP ------------------------------------------
    n = len(GOOD_BMP)
    assert GOOD_BMP[:2] == b"BM"
    for cut, why in [
        (14, "the file header alone"),
        (54, "file and info headers, no palette or pixels"),
    ]:
        case(IMAGES, f"bmp-cut-at-{cut}.bmp", GOOD_BMP[:cut], f"BMP {why}", "error: damaged or truncated; exit 3")
    half = len(SMALL_BMP) // 2
    case(IMAGES, "bmp-small-cut-in-half.bmp", SMALL_BMP[:half], f"64 x 64 BMP cut in the middle of the pixel data ({half} of {len(SMALL_BMP)} bytes)", "error: damaged or truncated; exit 3")
    bpp = bytearray(SMALL_BMP)
    bpp[28:30] = struct.pack("<H", 7)  # biBitCount of BITMAPINFOHEADER (Microsoft's Windows GDI documentation)
    case(IMAGES, "bmp-7-bits-per-pixel.bmp", bytes(bpp), "BMP with 7 bits per pixel (1, 4, 8, 16, 24, 32 are defined)", "error: damaged or truncated (header); exit 3")

    # -- empty files ----------------------------------------------------------
    for ext in ["png", "jpg", "tif", "bmp"]:
        case(IMAGES, f"empty.{ext}", b"", "an empty file", "error: not a supported image: the file is empty; exit 3")

    # -- wrong extensions -----------------------------------------------------
    case(IMAGES, "png-named.jpg", GOOD_PNG, "a PNG named .jpg", "measured: the format is read from the content; same value as good.png")
    case(IMAGES, "jpeg-named.tif", GOOD_JPG, "a JPEG named .tif", "measured: the format is read from the content; within 5 % of good.png (JPEG is lossy)")
    case(IMAGES, "text-named.bmp", b"Sample 4411-C, step 6 mm: etched 20 s\n", "a text file named .bmp", "error: not a supported image: not a known image format; exit 3")
    case(IMAGES, "gif-named.png", pil_bytes(Image.fromarray(small), "GIF"), "a GIF named .png", "error: not a supported image: Gif files are not supported; exit 3")
    case(IMAGES, "pdf-named.tiff", b"%PDF-1.4\n%\xe2\xe3\xcf\xd3\n1 0 obj\n<< >>\nendobj\ntrailer\n<< >>\n%%EOF\n", "a PDF named .tiff", "error: not a supported image: not a known image format; exit 3")

    # -- bombs ------------------------------------------------------------------
    case(
        IMAGES,
        "bomb-png-50000x50000.png",
        png_from([(b"IHDR", ihdr(50000, 50000)), (b"IDAT", zeros_stream(16 * 50001)), (b"IEND", b"")]),
        "PNG header claiming 50000 x 50000 pixels (2500 megapixels), 16 rows of data",
        "error: over the limit of 400 megapixels, from the header, before decoding; exit 3",
    )
    side = 8000
    case(
        IMAGES,
        "bomb-deflate-8000x8000.png",
        png_from([(b"IHDR", ihdr(side, side)), (b"IDAT", zeros_stream(side * (side + 1))), (b"IEND", b"")]),
        "deflate bomb: about 62 kB inflating to a complete 8000 x 8000 image (64 MB of zeros)",
        "error from the header, before decoding: about 1000 pixels a byte of the file, more than a micrograph compresses to (with --max-megapixels 50: over the limit); exit 3",
    )
    case(
        IMAGES,
        "bomb-deflate-extra.png",
        png_from([(b"IHDR", ihdr(64, 64)), (b"IDAT", zeros_stream(64 << 20)), (b"IEND", b"")]),
        "deflate bomb: a 64 x 64 PNG whose image data inflates to 64 MiB (the image needs 4160 bytes)",
        "no value (the 64 x 64 picture is flat), in bounded time and memory; exit 3",
    )
    # A baseline grey image (TIFF 6.0, sections 2 and 4), 1 strip of 16
    # bytes, while its tags claim 100000 x 100000 pixels.
    case(
        IMAGES,
        "bomb-tiff-100000x100000.tif",
        tiff_header_bomb(100000, 100000),
        "TIFF whose tags claim 100000 x 100000 pixels (10000 megapixels), 16 bytes of data",
        "error: over the limit of 400 megapixels, before decoding; exit 3",
    )
    sof = SMALL_JPG.index(b"\xff\xc0")
    big = bytearray(SMALL_JPG)
    big[sof + 5 : sof + 9] = struct.pack(">HH", 65000, 65000)  # T.81 B.2.2: Y, X
    case(IMAGES, "bomb-jpeg-65000x65000.jpg", bytes(big), "JPEG frame header claiming 65000 x 65000 pixels", "error: over the limit of 400 megapixels, before decoding; exit 3")
    bmp = bytearray(SMALL_BMP)
    bmp[18:26] = struct.pack("<ii", 100000, 100000)  # biWidth, biHeight
    case(IMAGES, "bomb-bmp-100000x100000.bmp", bytes(bmp), "BMP header claiming 100000 x 100000 pixels", "error: damaged or truncated: header unreadable: Image too large (the BMP decoder's own limit of 65535 px a side, met before armspace's pixel limit), before decoding; exit 3")

    # -- too small ----------------------------------------------------------
    one = np.full((1, 1), 128, np.uint8)
    case(IMAGES, "one-pixel.tif", tiff_bytes(one), "a 1 x 1 TIFF", "error: too small to measure (at least 32x32); exit 3")
    case(IMAGES, "one-pixel.jpg", pil_bytes(Image.fromarray(one), "JPEG", quality=92), "a 1 x 1 JPEG", "error: too small to measure; exit 3")
    case(IMAGES, "one-pixel.bmp", pil_bytes(Image.fromarray(one), "BMP"), "a 1 x 1 BMP", "error: too small to measure; exit 3")
    case(IMAGES, "thin-3x900.png", png_bytes(Image.fromarray(np.tile(crop[:3, :225], (1, 4)))), "a 3 x 900 PNG (3 rows)", "error: too small to measure; exit 3")
    case(IMAGES, "thin-900x3.tif", tiff_bytes(np.tile(crop[:225, :3], (4, 1))), "a 900 x 3 TIFF (3 columns)", "error: too small to measure; exit 3")

    # -- 12-bit data in 16-bit files -----------------------------------------
    twelve = np.round(crop.astype(np.float64) * 4095 / 255).astype(np.uint16)
    case(IMAGES, "twelve-bit-low.tif", tiff_bytes(twelve, compression="zlib"), "12-bit samples (0-4095) in a 16-bit grey TIFF", "measured: same SDAS as good.png (grey levels are normalised)")
    case(IMAGES, "twelve-bit-high.png", png_bytes(Image.fromarray(twelve << 4)), "12-bit samples shifted to the top of a 16-bit PNG (low 4 bits zero)", "measured: same SDAS as good.png")

    # -- float TIFF (TIFF 6.0 SampleFormat 3, IEEE floats) -------------------
    f = (crop.astype(np.float32) / 255.0)
    few = f.copy()
    flat = few.reshape(-1)
    flat[0:600:6] = np.nan
    flat[1:600:6] = np.inf
    flat[2:600:6] = -np.inf
    case(IMAGES, "float-nan-inf-few.tif", tiff_bytes(few, compression="zlib"), "float32 TIFF, 300 of 65536 samples NaN, +Inf or -Inf (0.46 %)", "measured with the warning 'NaN or infinite samples were set to the median grey level'")
    many = f[:64, :64].copy().reshape(-1)
    many[::10] = np.nan
    many[5::10] = np.inf
    case(IMAGES, "float-nan-inf-many.tif", tiff_bytes(many.reshape(64, 64)), "float32 TIFF, 20 % of samples NaN or +Inf", "error: damaged: too few usable pixels; exit 3")
    case(IMAGES, "float-all-nan.tif", tiff_bytes(np.full((64, 64), np.nan, np.float32)), "float32 TIFF, every sample NaN", "error: damaged: too few usable pixels; exit 3")
    case(IMAGES, "float64-wide-range.tif", tiff_bytes((crop.astype(np.float64) * 1e6 - 3e7), compression="zlib"), "float64 TIFF with samples from -3e7 to 2.25e8", "measured: same SDAS as good.png (floats are mapped linearly onto 0-1)")

    # -- colour layouts --------------------------------------------------------
    pal = Image.fromarray(crop).convert("P", palette=Image.Palette.ADAPTIVE, colors=256)
    case(IMAGES, "palette.png", png_bytes(pal), "palette PNG (colour type 3) of the grey micrograph", "measured: same SDAS as good.png")
    colormap = np.tile(np.arange(256, dtype=np.uint16) * 257, (3, 1))
    case(IMAGES, "palette.tif", tiff_bytes(crop, photometric="palette", colormap=colormap, compression="zlib"), "palette TIFF (PhotometricInterpretation 3) of the grey micrograph", "error: not a supported image: Photometric interpretation RGBPalette ... is unsupported (README lists grey, RGB and RGBA TIFF); exit 3")
    cmyk = np.zeros((256, 256, 4), np.uint8)
    cmyk[..., 3] = 255 - crop  # the picture in the black channel
    case(IMAGES, "cmyk.jpg", pil_bytes(Image.fromarray(cmyk, "CMYK"), "JPEG", quality=92), "CMYK JPEG, the picture in the K channel", "measured (the decoder converts CMYK to RGB): within 5 % of good.png (JPEG is lossy)")
    case(IMAGES, "cmyk.tif", tiff_bytes(cmyk, photometric="separated", compression="zlib"), "CMYK TIFF (PhotometricInterpretation 5), the picture in the K channel", "measured: same SDAS as good.png")
    la = np.stack([crop, np.full_like(crop, 255)], axis=-1)
    case(IMAGES, "grey-alpha.png", png_bytes(Image.fromarray(la, "LA")), "grey + alpha PNG, alpha opaque", "measured: same SDAS as good.png (alpha ignored)")
    case(IMAGES, "grey-alpha.tif", tiff_bytes(la, extrasamples=[2], compression="zlib"), "grey + alpha TIFF (ExtraSamples 2), alpha opaque", "measured: same SDAS as good.png (alpha ignored)")
    only = np.stack([np.zeros_like(crop), crop], axis=-1)
    case(IMAGES, "alpha-only.png", png_bytes(Image.fromarray(only, "LA")), "grey + alpha PNG whose grey is all 0: the picture is in the alpha channel only", "error: the picture is only in the alpha (transparency) channel, which is not measured; exit 3")
    rgba = np.zeros((256, 256, 4), np.uint8)
    rgba[..., 3] = crop
    case(IMAGES, "alpha-only-rgba.png", png_bytes(Image.fromarray(rgba, "RGBA")), "RGBA PNG, colour all black, the picture in the alpha channel only", "error: the picture is only in the alpha (transparency) channel; exit 3")

    # -- TIFF structures -----------------------------------------------------
    two = np.stack([crop, np.full_like(crop, 17)])
    case(IMAGES, "multi-page.tif", tiff_bytes(two, compression="zlib"), "two-page TIFF: the micrograph, then a flat page", "measured (first page) with the warning 'multi-page TIFF: only the first page is measured'")
    case(IMAGES, "tiled.tif", tiff_bytes(crop, tile=(64, 64), compression="zlib"), "tiled TIFF (64 x 64 tiles, TIFF 6.0 section 15)", "measured: same SDAS as good.png")
    case(IMAGES, "bigtiff.tif", tiff_bytes(crop, bigtiff=True, compression="zlib"), "BigTIFF (version 43, 64-bit offsets)", "measured: same SDAS as good.png")


def tiff_header_bomb(width, height):
    """A little-endian baseline grey TIFF whose tags claim width x height
    8-bit pixels in one strip of 16 bytes (TIFF 6.0: section 2 for the
    header and IFD, section 4 for the grey image's tags)."""
    entries = [
        (256, 4, 1, width),  # ImageWidth, LONG
        (257, 4, 1, height),  # ImageLength, LONG
        (258, 3, 1, 8),  # BitsPerSample
        (259, 3, 1, 1),  # Compression: none
        (262, 3, 1, 1),  # PhotometricInterpretation: BlackIsZero
        (273, 4, 1, 0),  # StripOffsets, filled below
        (277, 3, 1, 1),  # SamplesPerPixel
        (278, 4, 1, height),  # RowsPerStrip
        (279, 4, 1, 16),  # StripByteCounts
    ]
    ifd_size = 2 + 12 * len(entries) + 4
    data_at = 8 + ifd_size
    out = b"II*\0" + struct.pack("<I", 8) + struct.pack("<H", len(entries))
    for tag, typ, count, value in entries:
        if tag == 273:
            value = data_at
        packed = struct.pack("<H", value) + b"\0\0" if typ == 3 else struct.pack("<I", value)
        out += struct.pack("<HHI", tag, typ, count) + packed
    return out + struct.pack("<I", 0) + bytes(16)


# ---- malformed text files -----------------------------------------------------

SPEC = {"format": "armspace.spec/1", "title": "bad-input corpus", "limit_um": 45}


def deep(levels, inner="1"):
    return "[" * levels + inner + "]" * levels


def write_text():
    shutil.rmtree(TEXT, ignore_errors=True)
    TEXT.mkdir(parents=True)
    t = lambda s: s.encode()  # noqa: E731
    usage = "exit 2, before any image is measured"

    case(TEXT, "spec-good.json", t(json.dumps(SPEC)), "nothing: a valid spec (limit 45 um)", "accepted; good.png passes")
    case(TEXT, "spec-wrong-type.json", t('{"format": "armspace.spec/1", "limit_um": "45"}'), "spec whose limit_um is a string", f"error naming the file: invalid type: string \"45\", expected f64; {usage}")
    case(TEXT, "spec-missing-format.json", t('{"limit_um": 45}'), "spec without \"format\"", f"error naming the file: missing field `format`; {usage}")
    case(TEXT, "spec-no-limit.json", t('{"format": "armspace.spec/1"}'), "spec with neither limit_um nor zones", f"error naming the file: no limit; {usage}")
    case(TEXT, "spec-deep-nesting.json", t('{"format": "armspace.spec/1", "limit_um": 45, "zones": ' + deep(10000) + "}"), "spec with 10000 nested arrays as its zones", f"error naming the file: invalid type: sequence, expected a string (the spec's typed fields refuse the nesting at its first level, before serde_json's recursion limit of 128); {usage}")
    case(TEXT, "spec-huge-number.json", t('{"format": "armspace.spec/1", "limit_um": 1e400}'), "spec whose limit_um is 1e400 (beyond f64)", f"error naming the file: number out of range; {usage}")
    case(TEXT, "spec-absurd-number.json", t('{"format": "armspace.spec/1", "limit_um": 1e300}'), "spec whose limit_um is 1e300 um", f"error naming the file: limit_um must be a positive number of um; {usage}")
    case(TEXT, "spec-binary.json", GOOD_PNG[:64], "a PNG's first bytes named as a spec", f"error naming the file: not UTF-8 text; {usage}")

    case(TEXT, "profiles-good.json", t('{"profiles": {"x20": 1.25}}'), "nothing: a valid profile file (x20: 1.25 um/px)", "accepted; good.png measured")
    case(TEXT, "profiles-wrong-type.json", t('{"profiles": {"x20": "1.25"}}'), "profile whose value is a string", f"error naming the file and the profile: is the text \"1.25\", not a number; {usage}")
    case(TEXT, "profiles-missing-field.json", t('{"profiles": {"x20": {"rel_uncertainty": 0.01}}}'), "profile object without um_per_px", f"error naming the file and the profile: missing field `um_per_px`; {usage}")
    case(TEXT, "profiles-deep-nesting.json", t('{"profiles": {"x20": ' + deep(10000) + "}}"), "profile file with 10000 nested arrays", f"error naming the file: recursion limit exceeded; {usage}")
    case(TEXT, "profiles-huge-number.json", t('{"profiles": {"x20": 1e400}}'), "profile value 1e400 (beyond f64)", f"error naming the file: number out of range; {usage}")
    case(TEXT, "profiles-absurd-number.json", t('{"profiles": {"x20": 1e300}}'), "profile value 1e300 um/px", f"error naming the file: outside the plausible range; {usage}")

    # An invented in-house fit (lambda2 = 10 t_f^0.33, um and s), in the user
    # file format of DEVELOPERS.md ("Adding a correlation").
    entry = {
        "id": "lab-fit",
        "alloy_family": "Al-Si",
        "alloys": "invented test alloy",
        "form": "solidification_time",
        "sdas_unit": "um",
        "variable_unit": "s",
        "coefficient": {"value": 10.0},
        "exponent": 0.33,
        "fitted_range": {"min": 1, "max": 1000},
        "source": {"authors": "bad-input corpus", "year": 2026, "title": "invented", "published_in": "fixtures/bad"},
    }
    good = {"format": "armspace.correlations/1", "correlations": [entry]}
    case(TEXT, "correlations-good.json", t(json.dumps(good, indent=1)), "nothing: one valid user correlation 'lab-fit' (invented: lambda2 = 10 t_f^0.33)", "accepted")

    def corr(name, change, wrong, expected):
        e = json.loads(json.dumps(entry))
        change(e)
        case(TEXT, name, t(json.dumps({"format": "armspace.correlations/1", "correlations": [e]}, indent=1)), wrong, expected)

    corr("correlations-wrong-type.json", lambda e: e.update(exponent="0.4"), "correlation whose exponent is a string", f"error naming the file and the entry: invalid type; {usage}")
    corr("correlations-missing-field.json", lambda e: e.pop("source"), "correlation without \"source\"", f"error naming the file and the entry: missing \"source\"; {usage}")
    corr("correlations-huge-number.json", lambda e: e.update(exponent="@1e400@"), "correlation whose exponent is 1e400", f"error naming the file: number out of range; {usage}")
    corr("correlations-absurd-number.json", lambda e: e["coefficient"].update(value="@1e300@"), "correlation whose coefficient is 1e300 (lambda2 = 1e300 t_f^0.33)", "file accepted; measure: no interpretation (warning interpretation.none: no finite positive solidification time), exit 0; interpret: exit 2")
    case(TEXT, "correlations-deep-nesting.json", t('{"format": "' + "armspace.correlations/1" + '", "correlations": ' + deep(10000, "{}") + "}"), "correlation file with 10000 nested arrays", f"error naming the file: recursion limit exceeded; {usage}")

    case(TEXT, "lines-good.csv", t("length_um,arms\n100,5\n132,6\n90,5\n84,4\n95,5\n"), "nothing: five hand-measured lines", "accepted; exit 0")
    case(TEXT, "lines-wrong-type.csv", t("length_um,arms\n100,5\n12.5um,4\n"), "a length with its unit written in (12.5um)", "error naming the file and row 3: length_um '12.5um' is not a number; exit 3")
    case(TEXT, "lines-missing-column.csv", t("length_um,count\n100,5\n"), "no arms column", "error naming the file: no 'arms' column; exit 3")
    case(TEXT, "lines-missing-value.csv", t("length_um,arms\n100,5\n90\n"), "a row without its arms value", "error naming the file and row 3: no arms value; exit 3")
    case(TEXT, "lines-json-nested.csv", t(deep(10000, "{}")), "deeply nested JSON given as the CSV of lines", "error naming the file: no 'length_um' column (the header quoted only in part); exit 3")
    case(TEXT, "lines-huge-number.csv", t("length_um,arms\n1e400,5\n90,5\n"), "a length of 1e400 (beyond f64; Rust reads it as infinity)", "error naming the file and row 2: not a finite number; exit 3")
    case(TEXT, "lines-absurd-number.csv", t("length_um,arms\n1e300,5\n90,5\n"), "a length of 1e300 um", "error naming the file and row 2: longer than any micrograph's field (100 mm); exit 3")
    case(TEXT, "lines-huge-arms.csv", t("length_um,arms\n100,99999999999\n90,5\n"), "an arm count of 99999999999 (beyond 32 bits)", "error naming the file and row 2: beyond the largest count read (4294967295); exit 3")

    # The '@...@' placeholders above stand for numbers json.dumps cannot write.
    for p in TEXT.glob("correlations-*.json"):
        s = p.read_text()
        if "@" in s:
            p.write_text(s.replace('"@', "").replace('@"', ""))


def write_readme():
    rows = "\n".join(f"| `{f}` | {w} | {e} |" for f, w, e in CASES)
    (OUT / "README.md").write_text(
        f"""# Bad inputs

Written by `python3 scripts/make_bad_fixtures.py` (numpy, tifffile, Pillow;
deterministic), and checked by `tests/bad_inputs.rs`, which also makes at
run time the cases that cannot be committed: a 50 MB spec, profile,
correlation and lines file, a file over the 64 MiB limit of text inputs, a
FIFO, an unreadable file, non-UTF-8 and newline file names, and symlink
loops. Every image is made from `images/good.png`, a 256 x 256 crop of the
demo's 6 mm step (1.25 um per pixel, about 18 um SDAS).

"Exit 3" and "exit 2" are the statuses of README.md: 3 when an image could
not be measured (the others are still in the report), 2 for a bad spec,
profile or correlation file, found before any image is measured. A bad
file of hand-measured lines makes `stats` exit 3.

| file | what is wrong | what armspace does |
|---|---|---|
{rows}
""" + README_NOTES
    )


README_NOTES = """
## Made by the tests at run time

| case | what is wrong | what armspace does |
|---|---|---|
| 50 MB spec, profile, correlation and lines files | a 50 MB string of the wrong type, an unterminated string, a 50 MB profile name or correlation id, a 50 MB CSV field | error naming the file, the message under 1000 bytes (quotes are cut to their start and end, "[... N characters left out ...]"); exit 2 (exit 3 for `stats`) |
| 50 MB spec padded with white space | nothing: white space is JSON | accepted |
| text files of 64 MiB + 1 byte (sparse) | over the bound on text inputs | refused from the size, unread: "is 67.1 MB, too large for a ... (at most 64 MB)" |
| `caf\\xe9.png` (not UTF-8), `two\\nlines.png` | odd file names | measured; the report writes the byte that is not UTF-8 as U+FFFD (its SHA-256 still tells the file), the newline is kept (escaped in JSON, quoted in the CSV) |
| an image and a folder of mode 000 | unreadable | a failed entry "cannot read: Permission denied" and a skipped folder "folder cannot be read"; the superuser reads both (then they are measured) |
| a FIFO named `pipe.png` | a special file | skipped unread |
| `loop.png -> loop.png`, `ring-a.png <-> ring-b.png` | links in a loop | skipped in a folder, a failed entry when named: "a link that cannot be followed: Too many levels of symbolic links" |
| `z-second-link.png -> good.png`, `sub/up -> ..` | a second way to an image or folder | each image and folder once: "the same file as", "a link back to" |
| a spec, profile or correlation file behind a loop of links | | exit 2 naming it |

## Changed with this corpus

Behaviour the corpus found wrong, and changed: a PNG whose compressed data
fails its zlib check value (Adler-32) was measured as if intact (the PNG
decoder skips the check for speed), and is now refused as damaged; a
picture held only in the alpha channel was measured as a flat field ("no
reliable periodicity") and is now refused, saying so; a grey + alpha TIFF
was refused and is now read; a valid TIFF in a layout the decoder does
not take (a palette) was called "damaged or truncated" and is now "not a
supported image"; a link loop was called "a link to nothing" (in a folder)
or "path does not exist" (named), and is now named as a link that cannot
be followed; a profile of the wrong form said "data did not match any
variant of untagged enum Entry" and now names the profile and the form it
needs; a CSV length of 1e400 said "must be positive", 1e300 gave a mean of
1.25e299 um with an interval from -inf to inf (exit 0), and an arm count
beyond 32 bits was "not a whole number": each now says what is wrong; a
correlation coefficient of 1e300 gave a solidification time of 0 s with
--extrapolate and now gives none, with the reason; numbers like 1e300 are
written so in messages, not as 301 digits; and quotes of input text in
messages are cut, so that a 50 MB file cannot give a 50 MB message.
"""


if __name__ == "__main__":
    OUT.mkdir(parents=True, exist_ok=True)
    write_images()
    write_text()
    write_readme()
    total = sum(p.stat().st_size for p in OUT.rglob("*") if p.is_file())
    print(f"wrote {len(CASES)} cases, {total / 1e6:.2f} MB, into {OUT}")
