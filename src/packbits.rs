//! A check of the PackBits-compressed data of a TIFF's first page.
//!
//! PackBits (TIFF 6.0, section 9) has no check value: a damaged control
//! byte only changes how many bytes the following runs give, and decoders
//! pad or cut the result to the image's size without a word, so a damaged
//! file decodes to a picture with shifted or invented rows. The structure
//! itself shows the damage: every strip (or tile) must decode to exactly the
//! bytes its rows need, and its compressed bytes must be used up by then.
//! A changed literal byte (one grey level) cannot be seen; neither can it
//! shift anything.

use std::io::Cursor;

/// TIFF Compression value of PackBits.
const PACKBITS: u16 = 32773;

/// Decoded length of one PackBits stream, stopping at `want` bytes: `Ok`
/// with the number of compressed bytes left over, or `Err` when the stream
/// ends short of `want` or a run goes past it.
fn decoded_length(data: &[u8], want: usize) -> Result<usize, String> {
    let (mut i, mut out) = (0usize, 0usize);
    while out < want {
        let Some(&h) = data.get(i) else {
            return Err(format!(
                "its compressed data ends after {out} of the {want} bytes it must give"
            ));
        };
        let h = h as i8;
        i += 1;
        match h {
            // n + 1 literal bytes follow.
            0..=127 => {
                let n = h as usize + 1;
                if i + n > data.len() {
                    return Err(format!(
                        "a literal run of {n} bytes runs past the end of its compressed data"
                    ));
                }
                i += n;
                out += n;
            }
            // No operation.
            -128 => {}
            // The next byte, 1 - n times.
            _ => {
                if i >= data.len() {
                    return Err("a repeat run lacks its byte".into());
                }
                i += 1;
                out += (1 - h as isize) as usize;
            }
        }
        if out > want {
            return Err(format!(
                "a run goes past the {want} bytes it must give (to {out})"
            ));
        }
    }
    Ok(data.len() - i)
}

/// Checks the PackBits data of a TIFF's first page. `Ok` for any other
/// compression, or when the tags needed to check are missing (the decoder
/// then judges the file).
pub fn check_tiff(bytes: &[u8]) -> Result<(), String> {
    use tiff::tags::Tag;
    let Ok(mut d) = tiff::decoder::Decoder::new(Cursor::new(bytes)) else {
        return Ok(());
    };
    let mut tag_u64 = |t: Tag| -> Option<Vec<u64>> {
        d.find_tag(t)
            .ok()
            .flatten()
            .and_then(|v| v.into_u64_vec().ok())
    };
    let compression = tag_u64(Tag::Compression).and_then(|v| v.first().copied());
    if compression != Some(PACKBITS as u64) {
        return Ok(());
    }
    let (Some(width), Some(height)) = (
        tag_u64(Tag::ImageWidth).and_then(|v| v.first().copied()),
        tag_u64(Tag::ImageLength).and_then(|v| v.first().copied()),
    ) else {
        return Ok(());
    };
    let spp = tag_u64(Tag::SamplesPerPixel)
        .and_then(|v| v.first().copied())
        .unwrap_or(1);
    let bps = tag_u64(Tag::BitsPerSample)
        .and_then(|v| v.first().copied())
        .unwrap_or(1);
    // Planar configuration 2 stores each sample in strips of its own.
    let planar = tag_u64(Tag::PlanarConfiguration)
        .and_then(|v| v.first().copied())
        .unwrap_or(1);
    let per_pixel = if planar == 2 { 1 } else { spp };
    // Sizes from the tags, which the tiff crate takes up to 2^32 - 1
    // whatever the image's size: products checked (a block that cannot be
    // decoded to its size is refused below).
    let row_bytes =
        |w: u64| -> Option<u64> { Some(w.checked_mul(per_pixel)?.checked_mul(bps)?.div_ceil(8)) };
    let too_large =
        || "a PackBits tile or strip size in the tags is larger than any file can hold".to_string();
    // (compressed offset, compressed length, decoded length) of each block.
    let mut blocks: Vec<(u64, u64, u64)> = Vec::new();
    if let (Some(offs), Some(counts)) = (tag_u64(Tag::TileOffsets), tag_u64(Tag::TileByteCounts)) {
        let (Some(tw), Some(tl)) = (
            tag_u64(Tag::TileWidth).and_then(|v| v.first().copied()),
            tag_u64(Tag::TileLength).and_then(|v| v.first().copied()),
        ) else {
            return Ok(());
        };
        // Every tile holds a whole tile's rows, also at the image's edges.
        let tile = row_bytes(tw)
            .and_then(|r| r.checked_mul(tl))
            .ok_or_else(too_large)?;
        blocks.extend(offs.iter().zip(&counts).map(|(&o, &c)| (o, c, tile)));
    } else if let (Some(offs), Some(counts)) =
        (tag_u64(Tag::StripOffsets), tag_u64(Tag::StripByteCounts))
    {
        let rps = tag_u64(Tag::RowsPerStrip)
            .and_then(|v| v.first().copied())
            .unwrap_or(height)
            .clamp(1, height.max(1));
        let strips_per_plane = height.div_ceil(rps).max(1);
        for (k, (&o, &c)) in offs.iter().zip(&counts).enumerate() {
            let first_row = (k as u64 % strips_per_plane) * rps;
            let rows = rps.min(height.saturating_sub(first_row));
            let strip = row_bytes(width)
                .and_then(|r| r.checked_mul(rows))
                .ok_or_else(too_large)?;
            blocks.push((o, c, strip));
        }
    } else {
        return Ok(());
    }
    for (k, &(o, c, want)) in blocks.iter().enumerate() {
        let (o, c) = (o as usize, c as usize);
        let Some(data) = o.checked_add(c).and_then(|end| bytes.get(o..end)) else {
            return Err(format!(
                "PackBits block {} of {} lies past the end of the file",
                k + 1,
                blocks.len()
            ));
        };
        match decoded_length(data, want as usize) {
            // One byte may pad a block to an even length; anything more is
            // data the rows were not meant to take.
            Ok(left) if left <= 1 || data[data.len() - left..].iter().all(|&b| b == 0x80) => {}
            Ok(left) => {
                return Err(format!(
                    "PackBits block {} of {} gives its {want} bytes with {left} compressed bytes unused",
                    k + 1,
                    blocks.len()
                ))
            }
            Err(e) => return Err(format!("PackBits block {} of {}: {e}", k + 1, blocks.len())),
        }
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::decoded_length;

    #[test]
    fn the_worked_example_of_the_tiff_specification() {
        // TIFF 6.0, section 9, its sample of packed data (as recalled, from
        // memory; the length is checked by hand: 3 + 3 + 4 + 4 + 10): the
        // packed bytes
        // FE AA 02 80 00 2A FD AA 03 80 00 2A 22 F7 AA unpack to
        // AA AA AA 80 00 2A AA AA AA AA 80 00 2A 22 AA AA AA AA AA AA AA AA
        // AA AA (24 bytes).
        let packed = [
            0xFE, 0xAA, 0x02, 0x80, 0x00, 0x2A, 0xFD, 0xAA, 0x03, 0x80, 0x00, 0x2A, 0x22, 0xF7,
            0xAA,
        ];
        assert_eq!(decoded_length(&packed, 24), Ok(0));
        assert!(decoded_length(&packed, 25)
            .unwrap_err()
            .contains("ends after 24"));
        assert!(decoded_length(&packed, 20)
            .unwrap_err()
            .contains("goes past"));
        // A damaged control byte (0x02 -> 0x05) shifts everything after it.
        let mut bad = packed;
        bad[2] = 0x05;
        assert!(decoded_length(&bad, 24).is_err());
    }
}

#[cfg(test)]
mod tile_size_tests {
    use super::check_tiff;

    /// A little-endian TIFF of one 64 x 64 page of `spp` 8-bit samples a
    /// pixel, PackBits-compressed, whose tile tags claim `tile` px a side
    /// (TIFF 6.0 allows LONG tile sizes; the tiff crate takes them whatever
    /// the image's size).
    fn tiff_with_tiles(tile: u32, spp: u32) -> Vec<u8> {
        let entries: [(u16, u16, u32, u32); 10] = [
            (256, 4, 1, 64),                           // ImageWidth
            (257, 4, 1, 64),                           // ImageLength
            (258, 3, 1, 8),                            // BitsPerSample
            (259, 3, 1, 32773),                        // Compression: PackBits
            (262, 3, 1, if spp == 3 { 2 } else { 1 }), // Photometric
            (277, 3, 1, spp),                          // SamplesPerPixel
            (322, 4, 1, tile),                         // TileWidth
            (323, 4, 1, tile),                         // TileLength
            (324, 4, 1, 200),                          // TileOffsets
            (325, 4, 1, 2),                            // TileByteCounts
        ];
        let mut b = vec![b'I', b'I', 42, 0, 8, 0, 0, 0];
        b.extend_from_slice(&(entries.len() as u16).to_le_bytes());
        for (tag, ty, n, v) in entries {
            b.extend_from_slice(&tag.to_le_bytes());
            b.extend_from_slice(&ty.to_le_bytes());
            b.extend_from_slice(&n.to_le_bytes());
            if ty == 3 {
                b.extend_from_slice(&(v as u16).to_le_bytes());
                b.extend_from_slice(&[0, 0]);
            } else {
                b.extend_from_slice(&v.to_le_bytes());
            }
        }
        b.extend_from_slice(&[0, 0, 0, 0]);
        b.resize(200, 0);
        // One literal byte run: the start of a tile's data.
        b.extend_from_slice(&[0x00, 0x10]);
        b
    }

    #[test]
    fn absurd_tile_sizes_are_an_error_not_an_overflow() {
        // (2^32 - 1)^2 px of 3 bytes overflows 64 bits.
        let e = check_tiff(&tiff_with_tiles(u32::MAX, 3)).unwrap_err();
        assert!(e.contains("larger than any file can hold"), "{e}");
        // One sample a pixel fits in 64 bits: the data is then too short.
        let e = check_tiff(&tiff_with_tiles(u32::MAX, 1)).unwrap_err();
        assert!(e.contains("ends after"), "{e}");
        // A plain 64 px tile of 2 compressed bytes is short: refused.
        let e = check_tiff(&tiff_with_tiles(64, 1)).unwrap_err();
        assert!(e.contains("ends after"), "{e}");
    }
}
