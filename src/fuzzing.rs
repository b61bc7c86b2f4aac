//! Entry points shared by the fuzz targets (`fuzz/`, cargo-fuzz + libFuzzer)
//! and the fuzz smoke test (`tests/fuzz_smoke.rs`).
//!
//! In: a [`Target`] (one per reader) and arbitrary bytes. Out: nothing; the
//! reader runs on the bytes held in memory and, when it accepts them, the
//! result is checked against the reader's promise (a validated mesh has
//! finite coordinates and in-range indices, a GIFTI array's data length
//! equals the product of its dimensions, a table's rows have the header's
//! width; a NIfTI volume has as many values as its three dimensions say,
//! finite values unless its datatype is a float type, and a finite,
//! invertible affine). A broken promise is a panic, so the fuzzer reports it as a crash
//! exactly like a panic inside a reader.
//!
//! [`seeds`] builds small valid inputs from our own writers (every GIFTI
//! encoding, PLY in each byte order, ...) so that the fuzzers start from
//! files the readers accept. Commands and figures: docs/fuzzing.md; what the
//! readers refuse: docs/security.md.
//!
//! Coverage-guided fuzzing follows Zalewski's american fuzzy lop (2014) and
//! LLVM libFuzzer (Serebryany, "Continuous fuzzing with libFuzzer and
//! AddressSanitizer", IEEE SecDev 2016).

use crate::cohort::manifest::Manifest;
use crate::io::gifti::{self, ByteOrder, DataArray, Encoding, Gifti, IndexOrder, WriteOptions};
use crate::mesh::TriMesh;
use std::path::Path;

/// One reader under test.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Target {
    /// GIFTI (all encodings; mesh, shape and label views of the result).
    Gifti,
    /// Wavefront OBJ.
    Obj,
    /// PLY, ASCII and binary.
    Ply,
    /// OFF.
    Off,
    /// Cohort manifest TOML.
    Manifest,
    /// Landmark CSV.
    Landmarks,
    /// Participants TSV with a model formula (first line) and the design built from both.
    Participants,
    /// NIfTI-1 volume, plain or gzip (`volume::nifti::parse_volume`).
    Nifti,
}

impl Target {
    /// Every target, in the order the fuzz crate lists them.
    pub const ALL: [Target; 8] = [
        Target::Gifti,
        Target::Obj,
        Target::Ply,
        Target::Off,
        Target::Manifest,
        Target::Landmarks,
        Target::Participants,
        Target::Nifti,
    ];

    /// The fuzz target's name (the binary in `fuzz/` and its seed folder `fuzz/seeds/<name>`).
    pub fn name(self) -> &'static str {
        match self {
            Target::Gifti => "gifti",
            Target::Obj => "obj",
            Target::Ply => "ply",
            Target::Off => "off",
            Target::Manifest => "manifest",
            Target::Landmarks => "landmarks",
            Target::Participants => "participants",
            Target::Nifti => "nifti",
        }
    }

    /// A file name with the reader's extension (errors name it; nothing is opened,
    /// except that a GIFTI `ExternalFileBinary` array looks for its data file
    /// beside it, in a folder that does not exist).
    pub fn file_name(self) -> &'static Path {
        Path::new(match self {
            Target::Gifti => "/nonexistent-horosphere-fuzz/fuzz.surf.gii",
            Target::Obj => "fuzz.obj",
            Target::Ply => "fuzz.ply",
            Target::Off => "fuzz.off",
            Target::Manifest => "fuzz-manifest.toml",
            Target::Landmarks => "fuzz_landmarks.csv",
            Target::Participants => "participants.tsv",
            Target::Nifti => "fuzz.nii.gz",
        })
    }
}

/// Check the promise of a validated mesh.
fn check_mesh(m: &TriMesh) {
    let n = m.positions.len();
    assert!(
        m.positions.iter().flatten().all(|c| c.is_finite()),
        "reader returned a non-finite coordinate"
    );
    assert!(
        m.faces.iter().flatten().all(|&i| (i as usize) < n),
        "reader returned a face index out of range"
    );
}

/// Run the reader of `target` on `data`; panics only when a reader panics or
/// breaks its promise (see the module documentation).
pub fn feed(target: Target, data: &[u8]) {
    let path = target.file_name();
    match target {
        Target::Gifti => {
            let _ = crate::io::MeshFormat::from_magic(data);
            if let Ok(g) = gifti::parse(data, path) {
                for a in &g.arrays {
                    assert_eq!(
                        gifti::element_count(&a.dims),
                        Some(a.data.len()),
                        "GIFTI array data length differs from its dimensions"
                    );
                }
                if let Ok(m) = g.to_mesh(path) {
                    check_mesh(&m);
                }
                let _ = g.to_shape(path);
                let _ = g.to_labels(path);
            }
        }
        Target::Obj | Target::Ply | Target::Off => {
            let _ = crate::io::MeshFormat::from_magic(data);
            let r = match target {
                Target::Obj => crate::io::obj::parse(path, data),
                Target::Ply => crate::io::ply::parse(path, data),
                _ => crate::io::off::parse(path, data),
            };
            if let Ok(m) = r {
                check_mesh(&m);
            }
        }
        Target::Manifest => {
            if let Ok(text) = std::str::from_utf8(data) {
                let _ = Manifest::parse(text, path);
            }
        }
        Target::Landmarks => {
            if let Ok(rows) = crate::align::landmarks::parse_landmarks(path, data) {
                assert!(!rows.is_empty(), "landmark reader accepted an empty table");
            }
        }
        Target::Participants => {
            let Ok(text) = std::str::from_utf8(data) else {
                return;
            };
            let (formula, table) = text.split_once('\n').unwrap_or((text, ""));
            let formula = crate::stats::formula::parse(formula);
            if let Ok(p) = crate::stats::design::parse_participants(path, table) {
                assert!(
                    p.rows.iter().all(|r| r.len() == p.header.len()),
                    "participants row width differs from the header"
                );
                if let Ok(f) = formula {
                    let units: Vec<String> = p.rows.iter().map(|r| r[0].clone()).collect();
                    if let Ok(d) = crate::stats::design::build(path, &p, &f, &units) {
                        assert_eq!(d.x.len(), d.rows * d.names.len(), "design size");
                        assert!(
                            d.x.iter().all(|v| v.is_finite()),
                            "design has non-finite value"
                        );
                    }
                }
            }
        }
        Target::Nifti => {
            use crate::volume::nifti::parse_volume_typed;
            let plain = parse_volume_typed(data, path);
            if let Ok((v, dtype)) = &plain {
                check_volume(v, *dtype);
            }
            // libFuzzer seldom keeps a gzip stream valid (CRC), so the same
            // bytes are also compressed here: the gzip path must give the
            // same volume, or refuse what the plain path refuses, or refuse
            // data beyond the declared size (plain files may carry it).
            if !data.starts_with(&[0x1f, 0x8b]) {
                match (&plain, parse_volume_typed(&gzip_fast(data), path)) {
                    (Ok((a, ta)), Ok((b, tb))) => {
                        assert_eq!(ta, &tb, "gzip changed the datatype");
                        assert_eq!(a.dims, b.dims, "gzip changed the dimensions");
                        assert!(
                            a.values
                                .iter()
                                .zip(&b.values)
                                .all(|(x, y)| x.to_bits() == y.to_bits()),
                            "gzip changed the values"
                        );
                        assert_eq!(a.affine.m, b.affine.m, "gzip changed the affine");
                    }
                    (Err(_), Err(_)) => {}
                    (Err(e), Ok(_)) => panic!("gzip accepted what plain refused: {e}"),
                    (Ok(_), Err(e)) => assert!(
                        e.to_string().contains("decompressed data is larger than"),
                        "gzip refused what plain accepted: {e}"
                    ),
                }
            }
        }
    }
}

/// Check the promise of an accepted NIfTI volume (module doc of
/// `volume::nifti`): three dimensions whose product is the value count;
/// finite values for integer datatypes (a float datatype may store NaN and
/// infinities, and its scaled values may overflow to infinity; those pass
/// through as stored); a finite, invertible affine whose inverse is finite.
fn check_volume(v: &crate::volume::Volume, dtype: nifti::NiftiType) {
    use nifti::NiftiType;
    assert!(
        v.dims.iter().all(|&d| d >= 1),
        "volume with a zero dimension"
    );
    assert_eq!(
        v.dims.iter().product::<usize>(),
        v.values.len(),
        "volume value count differs from its dimensions"
    );
    if !matches!(dtype, NiftiType::Float32 | NiftiType::Float64) {
        assert!(
            v.values.iter().all(|x| x.is_finite()),
            "integer datatype {dtype:?} gave a non-finite value"
        );
    }
    assert!(
        v.affine.check("fuzz").is_ok(),
        "accepted an affine that is non-finite or singular"
    );
    assert!(
        v.affine.det() != 0.0,
        "accepted an affine with zero determinant"
    );
    assert!(
        v.affine.inverse().m.iter().flatten().all(|x| x.is_finite()),
        "affine inverse is not finite"
    );
}

/// A small closed mesh (the icosahedron, 12 vertices) for the mesh seeds.
fn seed_mesh() -> TriMesh {
    crate::mesh::shapes::icosphere(0, 1.0)
}

fn gifti_bytes(
    g: &Gifti,
    encoding: Encoding,
    byte_order: ByteOrder,
    index_order: IndexOrder,
) -> Vec<u8> {
    let opts = WriteOptions {
        encoding,
        byte_order,
        index_order,
    };
    gifti::to_bytes(g, &opts).expect("in-memory GIFTI write")
}

/// Small valid inputs for `target`, from our own writers: `(file name, bytes)`.
pub fn seeds(target: Target) -> Vec<(String, Vec<u8>)> {
    let mesh = seed_mesh();
    let mut out: Vec<(String, Vec<u8>)> = Vec::new();
    let mut put = |name: &str, bytes: Vec<u8>| out.push((name.to_string(), bytes));
    match target {
        Target::Gifti => {
            let surf = Gifti::from_mesh(&mesh);
            let values: Vec<f32> = (0..12).map(|i| i as f32 * 0.25 - 1.0).collect();
            let shape = Gifti::from_shape(&values, &Default::default());
            let labels: Vec<i32> = (0..12).map(|i| i % 3).collect();
            let mut table = gifti::LabelTable::default();
            for k in 0..3 {
                table.labels.push(gifti::Label {
                    key: k,
                    name: format!("region{k}"),
                    rgba: Some([0.1 * k as f64, 0.5, 0.9, 1.0]),
                });
            }
            let label = Gifti::from_labels(&labels, &table);
            let encs = [
                ("ascii", Encoding::Ascii),
                ("base64", Encoding::Base64Binary),
                ("gzip", Encoding::GZipBase64Binary),
            ];
            for (en, e) in encs {
                put(
                    &format!("surf-{en}.surf.gii"),
                    gifti_bytes(&surf, e, ByteOrder::LittleEndian, IndexOrder::RowMajor),
                );
            }
            put(
                "surf-base64-big-column.surf.gii",
                gifti_bytes(
                    &surf,
                    Encoding::Base64Binary,
                    ByteOrder::BigEndian,
                    IndexOrder::ColumnMajor,
                ),
            );
            put(
                "shape-gzip.shape.gii",
                gifti_bytes(
                    &shape,
                    Encoding::GZipBase64Binary,
                    ByteOrder::LittleEndian,
                    IndexOrder::RowMajor,
                ),
            );
            put(
                "label-ascii.label.gii",
                gifti_bytes(
                    &label,
                    Encoding::Ascii,
                    ByteOrder::LittleEndian,
                    IndexOrder::RowMajor,
                ),
            );
            put(
                "label-base64.label.gii",
                gifti_bytes(
                    &label,
                    Encoding::Base64Binary,
                    ByteOrder::BigEndian,
                    IndexOrder::RowMajor,
                ),
            );
            // A float64 array (DataType NIFTI_TYPE_FLOAT64) in a hand-built file.
            let f64s = DataArray::new(
                gifti::Intent::from_name("NIFTI_INTENT_SHAPE"),
                vec![4],
                gifti::Data::F64(vec![0.5, -1.0, 2.0, 1e-300]),
            )
            .expect("valid array");
            let g = Gifti {
                version: "1.0".into(),
                meta: Default::default(),
                label_table: Default::default(),
                arrays: vec![f64s],
            };
            put(
                "f64-gzip.func.gii",
                gifti_bytes(
                    &g,
                    Encoding::GZipBase64Binary,
                    ByteOrder::LittleEndian,
                    IndexOrder::RowMajor,
                ),
            );
        }
        Target::Obj => {
            let mut b = Vec::new();
            crate::io::obj::write_to(&mut b, &mesh).expect("in-memory write");
            put("ico.obj", b);
            put(
                "quad-with-normals.obj",
                b"# a square\nv 0 0 0\nv 1 0 0\nv 1 1 0\nv 0 1 0\nvn 0 0 1\nvt 0 0\nf 1/1/1 2/1/1 3/1/1 4/1/1\nf -1 -2 -3\n".to_vec(),
            );
        }
        Target::Ply => {
            use crate::io::ply::PlyEncoding;
            for (n, e) in [
                ("ascii", PlyEncoding::Ascii),
                ("le", PlyEncoding::BinaryLittleEndian),
                ("be", PlyEncoding::BinaryBigEndian),
            ] {
                let mut b = Vec::new();
                crate::io::ply::write_to(&mut b, &mesh, e).expect("in-memory write");
                put(&format!("ico-{n}.ply"), b);
            }
            put(
                "quad-extra-props.ply",
                b"ply\nformat ascii 1.0\ncomment hand-made\nelement vertex 4\nproperty float x\nproperty float y\nproperty float z\nproperty uchar red\nelement face 1\nproperty list uchar int vertex_indices\nend_header\n0 0 0 1\n1 0 0 2\n1 1 0 3\n0 1 0 4\n4 0 1 2 3\n".to_vec(),
            );
        }
        Target::Off => {
            let mut b = Vec::new();
            crate::io::off::write_to(&mut b, &mesh).expect("in-memory write");
            put("ico.off", b);
            put(
                "quad-colour.off",
                b"COFF\n# a square\n4 1 0\n0 0 0 1 0 0 1\n1 0 0 0 1 0 1\n1 1 0 0 0 1 1\n0 1 0 1 1 1 1\n4 0 1 2 3\n".to_vec(),
            );
        }
        Target::Manifest => {
            put(
                "full.toml",
                include_bytes!("../pipelines/demo-cohort.toml").to_vec(),
            );
            put(
                "minimal.toml",
                b"format = \"horosphere-cohort-manifest\"\nversion = 1\n[study]\nroot = \"study\"\noutput = \"out\"\n[inputs]\nsurface = \"white\"\n".to_vec(),
            );
        }
        Target::Landmarks => {
            put(
                "by-vertex.csv",
                b"name,vertex\nbow-tip,7\nstern-tip,3\nmasthead,11\n".to_vec(),
            );
            put(
                "by-point.csv",
                b"name,x,y,z\nbow-tip,1.5,-2,30.25\n\"stern, tip\",0,0,-1e2\n".to_vec(),
            );
        }
        Target::Participants => {
            put(
                "group-age.tsv",
                b"y ~ group + age + sex\nparticipant_id\tgroup\tage\tsex\nsub-a1\tpatient\t67\tF\nsub-a2\tcontrol\t59\tM\nsub-a3\tpatient\t49\tM\nsub-a4\tcontrol\t71\tF\n".to_vec(),
            );
            put(
                "no-intercept.tsv",
                b"y ~ 0 + group\nparticipant_id\tgroup\nsub-a1\tx\nsub-a2\ty\nsub-a3\tn/a\n"
                    .to_vec(),
            );
        }
        Target::Nifti => {
            use crate::volume::affine::Affine;
            use crate::volume::nifti::{encode_nifti1, StoreType};
            let axis = Affine {
                m: [
                    [2.0, 0.0, 0.0, -3.0],
                    [0.0, 2.0, 0.0, -4.0],
                    [0.0, 0.0, 2.5, -5.0],
                ],
            };
            let oblique = Affine {
                m: [
                    [0.9, 0.1, 0.0, -10.0],
                    [-0.1, 1.1, 0.05, 4.0],
                    [0.0, 0.02, 1.3, 2.5],
                ],
            };
            let dims = [3usize, 4, 5];
            let values: Vec<f64> = (0..60).map(|i| (i % 7) as f64 * 0.5 - 1.0).collect();
            let counts: Vec<f64> = (0..60).map(|i| ((i * 37) % 251) as f64).collect();
            put(
                "uint8.nii",
                encode_nifti1(&dims, &counts, &axis, StoreType::U8),
            );
            put(
                "int16.nii",
                encode_nifti1(&dims, &counts, &axis, StoreType::I16),
            );
            put(
                "float32-oblique.nii",
                encode_nifti1(&dims, &values, &oblique, StoreType::F32),
            );
            put(
                "float64-4d-one-volume.nii",
                encode_nifti1(&[3, 4, 5, 1], &values, &axis, StoreType::F64),
            );
            let raw = encode_nifti1(&dims, &values, &oblique, StoreType::F32);
            put("float32-oblique.nii.gz", gzip(&raw));
        }
    }
    out
}

/// `raw` gzip-compressed at the fastest level (fuzz harness only).
fn gzip_fast(raw: &[u8]) -> Vec<u8> {
    use std::io::Write;
    let mut e = flate2::write::GzEncoder::new(Vec::new(), flate2::Compression::fast());
    e.write_all(raw).expect("in-memory gzip");
    e.finish().expect("in-memory gzip")
}

/// A gzip member holding `raw` (fixed header fields, so the bytes are the
/// same on every run and platform).
fn gzip(raw: &[u8]) -> Vec<u8> {
    use std::io::Write;
    let mut e = flate2::GzBuilder::new()
        .mtime(0)
        .operating_system(255)
        .write(Vec::new(), flate2::Compression::best());
    e.write_all(raw).expect("in-memory gzip");
    e.finish().expect("in-memory gzip")
}
