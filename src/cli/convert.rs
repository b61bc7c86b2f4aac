//! `horosphere convert IN OUT`: re-encode a GIFTI file, or convert a mesh
//! between formats.
//!
//! In: a GIFTI file (any encoding, byte order, index order). Out: the same
//! content (every data array, metadata, label table and coordinate
//! transform, unchanged) written with the chosen encoding and byte order,
//! row-major, atomically. When either side is OBJ, PLY or OFF, the mesh
//! (positions and faces) is converted through the format dispatch. Format: "GIFTI Surface Data Format
//! Version 1.0" (NIfTI Data Format Working Group, 2011).

use clap::{Args, ValueEnum};
use horosphere::io::gifti::{self, ByteOrder, Encoding, WriteOptions};
use horosphere::Result;
use std::path::{Path, PathBuf};
use std::process::ExitCode;

/// Encoding of the written data arrays.
#[derive(Debug, Clone, Copy, ValueEnum)]
pub enum EncodingArg {
    /// Numbers as text.
    Ascii,
    /// Raw bytes in Base64.
    Base64,
    /// zlib-compressed bytes in Base64 (GZipBase64Binary).
    Gzip,
}

/// Flags of `convert`.
#[derive(Debug, Args)]
pub struct ConvertArgs {
    /// Input file (.gii, or a mesh in .obj, .ply, .off).
    pub input: PathBuf,
    /// Output file; replaced atomically. GIFTI to GIFTI keeps every array.
    pub output: PathBuf,
    /// Encoding of the data arrays in the output.
    #[arg(long, value_enum, default_value = "gzip")]
    pub encoding: EncodingArg,
    /// Write binary data big-endian (default little-endian).
    #[arg(long)]
    pub big_endian: bool,
}

fn is_gifti(p: &Path) -> bool {
    p.file_name()
        .and_then(|n| n.to_str())
        .is_some_and(|n| n.to_ascii_lowercase().ends_with(".gii"))
}

/// Run `convert`.
pub fn run(args: &ConvertArgs) -> Result<ExitCode> {
    if !(is_gifti(&args.input) && is_gifti(&args.output)) {
        let mesh = horosphere::io::read_mesh(&args.input)?;
        horosphere::io::write_mesh(&args.output, &mesh)?;
        return Ok(ExitCode::SUCCESS);
    }
    let opts = WriteOptions {
        encoding: match args.encoding {
            EncodingArg::Ascii => Encoding::Ascii,
            EncodingArg::Base64 => Encoding::Base64Binary,
            EncodingArg::Gzip => Encoding::GZipBase64Binary,
        },
        byte_order: if args.big_endian {
            ByteOrder::BigEndian
        } else {
            ByteOrder::LittleEndian
        },
        ..WriteOptions::default()
    };
    let g = gifti::read(&args.input)?;
    gifti::write(&args.output, &g, &opts)?;
    Ok(ExitCode::SUCCESS)
}
