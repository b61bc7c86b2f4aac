//! Fuzz smoke test: the CI stand-in for the libFuzzer runs in `fuzz/`
//! (docs/fuzzing.md).
//!
//! 1. Every seed (`fuzz/seeds/<target>/`), every kept crash reproducer
//!    (`tests/data/fuzz-regressions/<target>/`) and, when present locally,
//!    the fuzzers' own corpus (`fuzz/corpus/<target>/`, not committed) is
//!    replayed through its reader: the reader returns Ok or an error and
//!    keeps its promise (`horosphere::fuzzing::feed` asserts it).
//! 2. A deterministic mutation loop (our own SplitMix64, fixed seeds): a few
//!    thousand bit flips, truncations, insertions, deletions and chunk
//!    copies of the seeds per reader, each run under `catch_unwind`; any
//!    panic fails the test and names the seed and mutation index, and the
//!    input is saved for `cargo fuzz tmin`.
//! 3. The seed files on disk are the ones our writers make today
//!    (regenerate with `HOROSPHERE_WRITE_SEEDS=1 cargo test --test fuzz_smoke`).

use horosphere::fuzzing::{feed, seeds, Target};
use horosphere::synth::rng::SplitMix64;
use std::panic::{catch_unwind, AssertUnwindSafe};
use std::path::{Path, PathBuf};

const MUTATIONS_PER_TARGET: usize = 5000;

fn repo() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
}

fn files_in(dir: &Path) -> Vec<PathBuf> {
    let mut v: Vec<PathBuf> = match std::fs::read_dir(dir) {
        Ok(rd) => rd
            .filter_map(|e| e.ok().map(|e| e.path()))
            .filter(|p| p.is_file())
            .collect(),
        Err(_) => Vec::new(),
    };
    v.sort();
    v
}

/// Run `feed` and turn a panic into an error message.
fn run(target: Target, data: &[u8]) -> Result<(), String> {
    catch_unwind(AssertUnwindSafe(|| feed(target, data))).map_err(|e| {
        e.downcast_ref::<String>()
            .cloned()
            .or_else(|| e.downcast_ref::<&str>().map(|s| s.to_string()))
            .unwrap_or_else(|| "non-string panic".into())
    })
}

#[test]
fn corpora_and_regressions_replay_without_panic() {
    let mut total = 0usize;
    let mut failures = Vec::new();
    for t in Target::ALL {
        let seeds_dir = repo().join("fuzz/seeds").join(t.name());
        let seed_files = files_in(&seeds_dir);
        assert!(
            !seed_files.is_empty(),
            "no seeds in {}; regenerate with HOROSPHERE_WRITE_SEEDS=1",
            seeds_dir.display()
        );
        let mut all = seed_files;
        all.extend(files_in(
            &repo().join("tests/data/fuzz-regressions").join(t.name()),
        ));
        all.extend(files_in(&repo().join("fuzz/corpus").join(t.name())));
        for f in all {
            // A running fuzzer may remove corpus files it has reduced.
            let Ok(bytes) = std::fs::read(&f) else {
                continue;
            };
            if let Err(m) = run(t, &bytes) {
                failures.push(format!("{}: {m}", f.display()));
            }
            total += 1;
        }
    }
    assert!(
        failures.is_empty(),
        "panics on replay:\n{}",
        failures.join("\n")
    );
    assert!(total >= 8 * 2, "replayed only {total} files");
}

#[test]
fn seed_files_match_our_writers() {
    let write = std::env::var_os("HOROSPHERE_WRITE_SEEDS").is_some();
    for t in Target::ALL {
        let dir = repo().join("fuzz/seeds").join(t.name());
        for (name, bytes) in seeds(t) {
            let path = dir.join(&name);
            if write {
                std::fs::create_dir_all(&dir).unwrap();
                std::fs::write(&path, &bytes).unwrap();
            }
            let on_disk = std::fs::read(&path)
                .unwrap_or_else(|e| panic!("{}: {e}; regenerate the seeds", path.display()));
            assert_eq!(
                on_disk,
                bytes,
                "{} differs from what the writers make",
                path.display()
            );
            // A seed is a valid input: the reader must accept it.
            assert!(run(t, &bytes).is_ok());
        }
    }
}

/// Fragments that tend to sit on a parser's edge.
const TOKENS: &[&[u8]] = &[
    b"-1",
    b"0",
    b"4294967295",
    b"18446744073709551616",
    b"nan",
    b"inf",
    b"-0",
    b"1e999",
    b"\n",
    b" ",
    b"\t",
    b",",
    b"\"",
    b"<",
    b">",
    b"&amp;",
    b"&x;",
    b"<!ENTITY",
    b"]]>",
    b"=",
    b"[",
    b"]",
    b"Dim0=\"99999999999\"",
    b"Dimensionality=\"6\"",
    b"ExternalFileBinary",
    b"GZipBase64Binary",
    b"BigEndian",
    b"ColumnMajorOrder",
    b"NIFTI_TYPE_FLOAT64",
    b"NIFTI_TYPE_UINT8",
    b"element vertex 2000000000\n",
    b"property list uint int vertex_indices\n",
    b"binary_big_endian",
    b"f 1 2 3\n",
    b"v 1 2 3\n",
    b"~",
    b"+",
    b"n/a",
];

fn mutate(rng: &mut SplitMix64, seed: &[u8]) -> Vec<u8> {
    let mut d = seed.to_vec();
    let rounds = 1 + (rng.next_u64() % 4) as usize;
    for _ in 0..rounds {
        let len = d.len();
        let at = |rng: &mut SplitMix64, n: usize| (rng.next_u64() % (n as u64 + 1)) as usize;
        match rng.next_u64() % 7 {
            0 if len > 0 => {
                let i = at(rng, len - 1);
                d[i] ^= 1 << (rng.next_u64() % 8);
            }
            1 => {
                let i = at(rng, len);
                d.truncate(i);
            }
            2 => {
                let i = at(rng, len);
                let b = (rng.next_u64() & 0xff) as u8;
                d.insert(i, b);
            }
            3 => {
                let i = at(rng, len);
                let tok = TOKENS[(rng.next_u64() % TOKENS.len() as u64) as usize];
                d.splice(i..i, tok.iter().copied());
            }
            4 if len > 0 => {
                let i = at(rng, len - 1);
                let n = 1 + (rng.next_u64() % 16) as usize;
                let j = (i + n).min(len);
                d.drain(i..j);
            }
            5 if len > 0 => {
                let i = at(rng, len - 1);
                let n = 1 + (rng.next_u64() % 64) as usize;
                let j = (i + n).min(len);
                let chunk: Vec<u8> = d[i..j].to_vec();
                let k = at(rng, len);
                d.splice(k..k, chunk);
            }
            _ if len > 0 => {
                let i = at(rng, len - 1);
                d[i] = (rng.next_u64() & 0xff) as u8;
            }
            _ => d.push(b'0'),
        }
    }
    d
}

fn mutation_loop(t: Target) {
    let seed_list = seeds(t);
    let mut rng = SplitMix64::new(0x5eed_0000 + t as u64);
    let mut failures = Vec::new();
    for k in 0..MUTATIONS_PER_TARGET {
        let (name, seed) = &seed_list[k % seed_list.len()];
        let input = mutate(&mut rng, seed);
        if let Err(m) = run(t, &input) {
            let out = std::env::temp_dir().join(format!("horosphere-fuzz-smoke-{}-{k}", t.name()));
            let _ = std::fs::write(&out, &input);
            failures.push(format!(
                "{} seed {name} mutation {k}: {m} (input saved to {})",
                t.name(),
                out.display()
            ));
        }
    }
    assert!(failures.is_empty(), "panics:\n{}", failures.join("\n"));
}

#[test]
fn mutations_gifti() {
    mutation_loop(Target::Gifti);
}

#[test]
fn mutations_obj() {
    mutation_loop(Target::Obj);
}

#[test]
fn mutations_ply() {
    mutation_loop(Target::Ply);
}

#[test]
fn mutations_off() {
    mutation_loop(Target::Off);
}

#[test]
fn mutations_manifest() {
    mutation_loop(Target::Manifest);
}

#[test]
fn mutations_landmarks() {
    mutation_loop(Target::Landmarks);
}

#[test]
fn mutations_participants() {
    mutation_loop(Target::Participants);
}

/// A gzip bomb: a few kilobytes of compressed zeros that inflate to 64 MiB,
/// in an array declaring 4 float32 values. The reader must stop after
/// the declared 16 bytes + 1, refuse the array, and do so quickly.
#[test]
fn gzip_bomb_is_refused_quickly() {
    use std::io::Write;
    let mut enc = flate2::write::ZlibEncoder::new(Vec::new(), flate2::Compression::best());
    let zeros = vec![0u8; 1 << 20];
    for _ in 0..64 {
        enc.write_all(&zeros).unwrap();
    }
    let z = enc.finish().unwrap();
    assert!(z.len() < 100_000, "compressed bomb is {} bytes", z.len());
    use base64::Engine;
    let b64 = base64::engine::general_purpose::STANDARD.encode(&z);
    let xml = format!(
        "<?xml version=\"1.0\" encoding=\"UTF-8\"?>\n<GIFTI Version=\"1.0\" NumberOfDataArrays=\"1\">\n\
         <DataArray Intent=\"NIFTI_INTENT_SHAPE\" DataType=\"NIFTI_TYPE_FLOAT32\" ArrayIndexingOrder=\"RowMajorOrder\" \
         Dimensionality=\"1\" Dim0=\"4\" Encoding=\"GZipBase64Binary\" Endian=\"LittleEndian\" ExternalFileName=\"\" ExternalFileOffset=\"\">\n\
         <Data>{b64}</Data>\n</DataArray>\n</GIFTI>\n"
    );
    let e = horosphere::io::gifti::parse(xml.as_bytes(), Path::new("bomb.shape.gii"))
        .expect_err("bomb accepted");
    let msg = e.to_string();
    assert!(msg.contains("bomb.shape.gii"), "{msg}");
    assert!(msg.contains("DataArray"), "{msg}");
    assert!(msg.contains("larger than the 16 bytes"), "{msg}");
    // The message names the declared size: inflation stopped one byte past
    // it instead of reading the 64 MiB (no timing: speed is benchmarked,
    // not tested).
}

/// A huge declared size with tiny data must be refused without reserving
/// memory for the declared size (an allocation of 2^60 bytes would abort).
#[test]
fn huge_declared_dimensions_do_not_allocate() {
    for enc in ["ASCII", "Base64Binary", "GZipBase64Binary"] {
        let xml = format!(
            "<?xml version=\"1.0\"?>\n<GIFTI Version=\"1.0\" NumberOfDataArrays=\"1\">\n\
             <DataArray Intent=\"NIFTI_INTENT_SHAPE\" DataType=\"NIFTI_TYPE_FLOAT32\" ArrayIndexingOrder=\"RowMajorOrder\" \
             Dimensionality=\"2\" Dim0=\"1073741824\" Dim1=\"1073741824\" Encoding=\"{enc}\" Endian=\"LittleEndian\">\n\
             <Data>eJwDAAAAAAE=</Data>\n</DataArray>\n</GIFTI>\n"
        );
        let e = horosphere::io::gifti::parse(xml.as_bytes(), Path::new("huge.shape.gii"))
            .expect_err("accepted");
        let msg = e.to_string();
        assert!(
            msg.contains("huge.shape.gii") && msg.contains("DataArray"),
            "{enc}: {msg}"
        );
    }
}

#[test]
fn mutations_nifti() {
    mutation_loop(Target::Nifti);
}

/// The libFuzzer mutations rarely make a valid gzip stream, so here the
/// plain seeds are mutated first and then compressed: the bounded inflation
/// and every header check are reached through gzip too.
#[test]
fn mutations_nifti_inside_gzip() {
    use std::io::Write;
    let seed_list: Vec<(String, Vec<u8>)> = seeds(Target::Nifti)
        .into_iter()
        .filter(|(n, _)| n.ends_with(".nii"))
        .collect();
    let mut rng = SplitMix64::new(0x5eed_0200);
    let mut failures = Vec::new();
    for k in 0..1000 {
        let (name, seed) = &seed_list[k % seed_list.len()];
        let input = mutate(&mut rng, seed);
        let mut e = flate2::write::GzEncoder::new(Vec::new(), flate2::Compression::fast());
        e.write_all(&input).unwrap();
        let gz = e.finish().unwrap();
        if let Err(m) = run(Target::Nifti, &gz) {
            failures.push(format!("seed {name} mutation {k} (gzip): {m}"));
        }
    }
    assert!(failures.is_empty(), "panics:\n{}", failures.join("\n"));
}

/// `read_volume` (a file, the one path the commands use) reaches the same
/// in-memory parser: our own volumes read back exactly, plain and gzip, and
/// a refusal names the file.
#[test]
fn nifti_files_read_back() {
    use horosphere::volume::nifti::{parse_volume, read_volume};
    let dir = std::env::temp_dir().join(format!("horosphere-fuzz-nifti-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    for (name, bytes) in seeds(Target::Nifti) {
        let p = dir.join(&name);
        std::fs::write(&p, &bytes).unwrap();
        let from_file = read_volume(&p).expect("our own NIfTI file reads back");
        let in_memory = parse_volume(&bytes, &p).expect("in memory");
        assert_eq!(from_file.dims, [3, 4, 5], "{name}");
        assert_eq!(from_file.values.len(), 60, "{name}");
        assert_eq!(from_file.values, in_memory.values, "{name}");
        assert_eq!(from_file.affine.m, in_memory.affine.m, "{name}");
    }
    // The gzip seed holds the same volume as the plain float32 one.
    let plain = read_volume(&dir.join("float32-oblique.nii")).unwrap();
    let gz = read_volume(&dir.join("float32-oblique.nii.gz")).unwrap();
    assert_eq!(plain.values, gz.values);
    assert_eq!(plain.affine.m, gz.affine.m);
    assert!((plain.affine.m[1][1] - 1.1).abs() < 1e-6);
    // Truncated gzip file: refused, naming the file.
    let gz_bytes = std::fs::read(dir.join("float32-oblique.nii.gz")).unwrap();
    let p = dir.join("cut.nii.gz");
    std::fs::write(&p, &gz_bytes[..gz_bytes.len() / 2]).unwrap();
    let e = read_volume(&p).unwrap_err().to_string();
    assert!(e.contains("cut.nii.gz"), "{e}");
    let _ = std::fs::remove_dir_all(&dir);
}

/// A 3x4x5 uint8 header (412 bytes declared) followed by 64 MiB of zeros,
/// gzip-compressed: inflation stops at 413 bytes and the file is refused
/// quickly.
#[test]
fn nifti_gzip_bomb_is_refused_quickly() {
    use std::io::Write;
    let (_, seed) = seeds(Target::Nifti)
        .into_iter()
        .find(|(n, _)| n == "uint8.nii")
        .unwrap();
    let mut enc = flate2::write::GzEncoder::new(Vec::new(), flate2::Compression::best());
    enc.write_all(&seed).unwrap();
    let zeros = vec![0u8; 1 << 20];
    for _ in 0..64 {
        enc.write_all(&zeros).unwrap();
    }
    let z = enc.finish().unwrap();
    assert!(z.len() < 100_000, "compressed bomb is {} bytes", z.len());
    let e = horosphere::volume::nifti::parse_volume(&z, Path::new("bomb.nii.gz"))
        .expect_err("bomb accepted");
    let msg = e.to_string();
    assert!(msg.contains("bomb.nii.gz"), "{msg}");
    assert!(msg.contains("larger than the 412 bytes"), "{msg}");
}

/// Dimensions 30000^3 of float64 (216 TB) declared with 480 bytes of data,
/// plain and gzip: refused from the header (more than 2^30 voxels), and
/// 1000^3 from the data length, without reserving the declared size (which
/// would abort).
#[test]
fn nifti_huge_declared_dimensions_do_not_allocate() {
    use std::io::Write;
    let (_, seed) = seeds(Target::Nifti)
        .into_iter()
        .find(|(n, _)| n == "float64-4d-one-volume.nii")
        .unwrap();
    // (side, file stem, what the refusal must say): over the voxel cap the
    // header is refused; under it (1000^3 float64, 8 GB declared) the data
    // length is.
    let cases = [
        (30000u16, "huge", ["header dim", "27000000000000 voxels"]),
        (1000u16, "big", ["data", "8000000000"]),
    ];
    for (side, stem, expect) in cases {
        let mut bytes = seed.clone();
        for k in 0..3 {
            bytes[42 + 2 * k..44 + 2 * k].copy_from_slice(&side.to_le_bytes());
        }
        let mut e = flate2::write::GzEncoder::new(Vec::new(), flate2::Compression::fast());
        e.write_all(&bytes).unwrap();
        let gz = e.finish().unwrap();
        for (name, b) in [
            (format!("{stem}.nii"), &bytes),
            (format!("{stem}.nii.gz"), &gz),
        ] {
            let msg = horosphere::volume::nifti::parse_volume(b, Path::new(&name))
                .expect_err("accepted")
                .to_string();
            assert!(msg.contains(&name), "{msg}");
            for x in expect {
                assert!(msg.contains(x), "{name}: {msg}");
            }
        }
    }
}
