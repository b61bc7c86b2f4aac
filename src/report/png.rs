//! A small PNG encoder for 8-bit RGB images.
//!
//! In: an [`Image`] (width, height, RGB bytes row by row). Out: the bytes
//! of a PNG file (W3C Portable Network Graphics Specification, 2nd ed.,
//! 2003 / ISO/IEC 15948): the signature, an `IHDR` chunk (bit depth 8,
//! colour type 2, no interlace), one `IDAT` chunk holding the zlib stream
//! (RFC 1950/1951, written by `flate2`) of the filtered scanlines, and
//! `IEND`; each chunk ends with the CRC-32 of ISO 3309 / ITU-T V.42
//! (reflected polynomial `0xEDB88320`, as in the PNG specification's
//! sample code). What stays true: the same image gives the same bytes
//! (fixed compression level, filter choice by a fixed rule: the
//! minimum-sum-of-absolute-differences heuristic of the specification,
//! ties to the lower filter type); no ancillary chunks (no time stamp).

use crate::error::{Error, Result};
use std::io::Write;

/// An 8-bit RGB image, rows top to bottom.
#[derive(Debug, Clone, PartialEq)]
pub struct Image {
    pub width: usize,
    pub height: usize,
    /// `3 * width * height` bytes.
    pub rgb: Vec<u8>,
}

impl Image {
    /// An image filled with one colour.
    pub fn filled(width: usize, height: usize, colour: [u8; 3]) -> Image {
        let mut rgb = Vec::with_capacity(3 * width * height);
        for _ in 0..width * height {
            rgb.extend_from_slice(&colour);
        }
        Image { width, height, rgb }
    }

    /// The colour at `(x, y)` (`None` outside).
    pub fn get(&self, x: usize, y: usize) -> Option<[u8; 3]> {
        if x >= self.width || y >= self.height {
            return None;
        }
        let i = 3 * (y * self.width + x);
        Some([self.rgb[i], self.rgb[i + 1], self.rgb[i + 2]])
    }

    /// Set the colour at `(x, y)`; outside is ignored.
    pub fn set(&mut self, x: usize, y: usize, c: [u8; 3]) {
        if x < self.width && y < self.height {
            let i = 3 * (y * self.width + x);
            self.rgb[i..i + 3].copy_from_slice(&c);
        }
    }

    /// Fill the rectangle `[x0, x1) x [y0, y1)` (clipped).
    pub fn fill_rect(&mut self, x0: usize, y0: usize, x1: usize, y1: usize, c: [u8; 3]) {
        for y in y0..y1.min(self.height) {
            for x in x0..x1.min(self.width) {
                self.set(x, y, c);
            }
        }
    }

    /// Copy `src` with its top-left corner at `(x0, y0)` (clipped).
    pub fn blit(&mut self, src: &Image, x0: usize, y0: usize) {
        for y in 0..src.height {
            for x in 0..src.width {
                if let Some(c) = src.get(x, y) {
                    self.set(x0 + x, y0 + y, c);
                }
            }
        }
    }
}

/// CRC-32 lookup table (reflected polynomial 0xEDB88320).
fn crc_table() -> [u32; 256] {
    let mut t = [0u32; 256];
    for (n, slot) in t.iter_mut().enumerate() {
        let mut c = n as u32;
        for _ in 0..8 {
            c = if c & 1 != 0 {
                0xEDB8_8320 ^ (c >> 1)
            } else {
                c >> 1
            };
        }
        *slot = c;
    }
    t
}

/// CRC-32 of `bytes` (the checksum of PNG chunks, zip and gzip).
pub fn crc32(bytes: &[u8]) -> u32 {
    let t = crc_table();
    let mut c = 0xFFFF_FFFFu32;
    for &b in bytes {
        c = t[((c ^ u32::from(b)) & 0xFF) as usize] ^ (c >> 8);
    }
    c ^ 0xFFFF_FFFF
}

fn chunk(out: &mut Vec<u8>, kind: &[u8; 4], data: &[u8]) {
    out.extend_from_slice(&(data.len() as u32).to_be_bytes());
    let start = out.len();
    out.extend_from_slice(kind);
    out.extend_from_slice(data);
    let crc = crc32(&out[start..]);
    out.extend_from_slice(&crc.to_be_bytes());
}

/// The Paeth predictor of the PNG specification.
fn paeth(a: u8, b: u8, c: u8) -> u8 {
    let p = i16::from(a) + i16::from(b) - i16::from(c);
    let pa = (p - i16::from(a)).abs();
    let pb = (p - i16::from(b)).abs();
    let pc = (p - i16::from(c)).abs();
    if pa <= pb && pa <= pc {
        a
    } else if pb <= pc {
        b
    } else {
        c
    }
}

/// Filter one scanline with filter type `ft` (0 None, 1 Sub, 2 Up,
/// 3 Average, 4 Paeth); `prev` is the previous raw line (zeros for the first).
fn filter_line(ft: u8, line: &[u8], prev: &[u8], out: &mut Vec<u8>) {
    const BPP: usize = 3;
    out.push(ft);
    for i in 0..line.len() {
        let x = line[i];
        let a = if i >= BPP { line[i - BPP] } else { 0 };
        let b = prev[i];
        let c = if i >= BPP { prev[i - BPP] } else { 0 };
        let pred = match ft {
            0 => 0,
            1 => a,
            2 => b,
            3 => ((u16::from(a) + u16::from(b)) / 2) as u8,
            _ => paeth(a, b, c),
        };
        out.push(x.wrapping_sub(pred));
    }
}

/// The PNG file bytes of `img`.
pub fn encode(img: &Image) -> Result<Vec<u8>> {
    if img.width == 0 || img.height == 0 || img.rgb.len() != 3 * img.width * img.height {
        return Err(Error::Invalid(format!(
            "PNG image {}x{} with {} bytes; expected a non-empty image with 3 bytes per pixel",
            img.width,
            img.height,
            img.rgb.len()
        )));
    }
    let stride = 3 * img.width;
    let mut raw = Vec::with_capacity((stride + 1) * img.height);
    let zeros = vec![0u8; stride];
    let mut trial = Vec::with_capacity(stride + 1);
    for y in 0..img.height {
        let line = &img.rgb[y * stride..(y + 1) * stride];
        let prev = if y == 0 {
            &zeros[..]
        } else {
            &img.rgb[(y - 1) * stride..y * stride]
        };
        let mut best: Option<(u64, Vec<u8>)> = None;
        for ft in 0..5u8 {
            trial.clear();
            filter_line(ft, line, prev, &mut trial);
            let score: u64 = trial[1..]
                .iter()
                .map(|&v| u64::from((v as i8).unsigned_abs()))
                .sum();
            if best.as_ref().is_none_or(|(s, _)| score < *s) {
                best = Some((score, trial.clone()));
            }
        }
        if let Some((_, l)) = best {
            raw.extend_from_slice(&l);
        }
    }
    let mut z = flate2::write::ZlibEncoder::new(Vec::new(), flate2::Compression::new(6));
    z.write_all(&raw)
        .and_then(|_| z.flush())
        .map_err(|e| Error::Invalid(format!("PNG compression: {e}")))?;
    let idat = z
        .finish()
        .map_err(|e| Error::Invalid(format!("PNG compression: {e}")))?;
    let mut out = Vec::with_capacity(idat.len() + 64);
    out.extend_from_slice(&[0x89, b'P', b'N', b'G', 0x0D, 0x0A, 0x1A, 0x0A]);
    let mut ihdr = Vec::with_capacity(13);
    ihdr.extend_from_slice(&(img.width as u32).to_be_bytes());
    ihdr.extend_from_slice(&(img.height as u32).to_be_bytes());
    ihdr.extend_from_slice(&[8, 2, 0, 0, 0]);
    chunk(&mut out, b"IHDR", &ihdr);
    chunk(&mut out, b"IDAT", &idat);
    chunk(&mut out, b"IEND", &[]);
    Ok(out)
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::io::Read;

    /// An independent minimal decoder: chunk walk with CRC check, inflate
    /// with flate2's decoder, undo the five filters.
    fn decode(bytes: &[u8]) -> Image {
        assert_eq!(
            &bytes[..8],
            &[0x89, b'P', b'N', b'G', 0x0D, 0x0A, 0x1A, 0x0A]
        );
        let mut i = 8;
        let (mut w, mut h) = (0usize, 0usize);
        let mut idat = Vec::new();
        let mut kinds = Vec::new();
        while i < bytes.len() {
            let len = u32::from_be_bytes(bytes[i..i + 4].try_into().unwrap()) as usize;
            let kind = &bytes[i + 4..i + 8];
            let data = &bytes[i + 8..i + 8 + len];
            let crc = u32::from_be_bytes(bytes[i + 8 + len..i + 12 + len].try_into().unwrap());
            assert_eq!(crc, crc32(&bytes[i + 4..i + 8 + len]), "chunk CRC");
            kinds.push(String::from_utf8_lossy(kind).into_owned());
            match kind {
                b"IHDR" => {
                    w = u32::from_be_bytes(data[0..4].try_into().unwrap()) as usize;
                    h = u32::from_be_bytes(data[4..8].try_into().unwrap()) as usize;
                    assert_eq!(&data[8..13], &[8, 2, 0, 0, 0]);
                }
                b"IDAT" => idat.extend_from_slice(data),
                _ => {}
            }
            i += 12 + len;
        }
        assert_eq!(kinds, ["IHDR", "IDAT", "IEND"]);
        let mut raw = Vec::new();
        flate2::read::ZlibDecoder::new(&idat[..])
            .read_to_end(&mut raw)
            .unwrap();
        let stride = 3 * w;
        assert_eq!(raw.len(), (stride + 1) * h);
        let mut rgb = vec![0u8; stride * h];
        for y in 0..h {
            let ft = raw[y * (stride + 1)];
            for x in 0..stride {
                let f = raw[y * (stride + 1) + 1 + x];
                let a = if x >= 3 { rgb[y * stride + x - 3] } else { 0 };
                let b = if y > 0 { rgb[(y - 1) * stride + x] } else { 0 };
                let c = if x >= 3 && y > 0 {
                    rgb[(y - 1) * stride + x - 3]
                } else {
                    0
                };
                let p = match ft {
                    0 => 0,
                    1 => a,
                    2 => b,
                    3 => ((a as u16 + b as u16) / 2) as u8,
                    4 => paeth(a, b, c),
                    _ => panic!("bad filter {ft}"),
                };
                rgb[y * stride + x] = f.wrapping_add(p);
            }
        }
        Image {
            width: w,
            height: h,
            rgb,
        }
    }

    #[test]
    fn crc32_check_value() {
        // The standard check value of CRC-32/ISO-HDLC for "123456789".
        assert_eq!(crc32(b"123456789"), 0xCBF4_3926);
        // CRC of the IEND chunk type, as found in every PNG file.
        assert_eq!(crc32(b"IEND"), 0xAE42_6082);
    }

    #[test]
    fn png_decodes_back_to_the_same_pixels() {
        let (w, h) = (37, 23);
        let mut img = Image::filled(w, h, [10, 20, 30]);
        let mut s = 12345u32;
        for y in 0..h {
            for x in 0..w {
                s = s.wrapping_mul(1_103_515_245).wrapping_add(12345);
                let noise = (s >> 16) as u8;
                let c = if (x + y) % 3 == 0 {
                    [noise, (x * 7) as u8, (y * 11) as u8]
                } else {
                    [(x * 5) as u8, (y * 3) as u8, 200]
                };
                img.set(x, y, c);
            }
        }
        let bytes = encode(&img).unwrap();
        assert_eq!(decode(&bytes), img);
        assert_eq!(encode(&img).unwrap(), bytes, "same bytes every time");
    }

    #[test]
    fn bad_image_is_an_error() {
        let img = Image {
            width: 2,
            height: 2,
            rgb: vec![0; 5],
        };
        assert!(encode(&img).is_err());
    }
}
