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
    let row_bytes = |w: u64| (w * per_pixel * bps).div_ceil(8);
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
        blocks.extend(
            offs.iter()
                .zip(&counts)
                .map(|(&o, &c)| (o, c, tl * row_bytes(tw))),
        );
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
            blocks.push((o, c, rows * row_bytes(width)));
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
