//! GIFTI I/O: round trips and bad input.
//!
//! Index of this file:
//! - round trips: every encoding x byte order x index order; mesh, shape,
//!   label helpers; ExternalFileBinary; determinism; the `convert` command.
//! - bad input: one test per case of the project conventions (truncated or
//!   corrupt Base64, corrupt zlib, size disagreements, oversize
//!   decompression, non-finite coordinates, out-of-range or negative
//!   triangle indices, empty meshes, unknown encodings and data types,
//!   entity declarations and references, external files outside the folder,
//!   not XML, not GIFTI, truncated XML), plus prefix/byte-flip sweeps that
//!   must never panic.
//!
//! Format: "GIFTI Surface Data Format Version 1.0", NIfTI Data Format
//! Working Group (2011). The cross-check against nibabel lives in
//! tests/reference/test_gifti_nibabel.py.

use horosphere::io::gifti::{
    self, ByteOrder, CoordTransform, Data, DataArray, Encoding, Gifti, IndexOrder, Intent, Label,
    LabelTable, MetaData, WriteOptions,
};
use horosphere::mesh::shapes::icosphere;
use horosphere::{Error, TriMesh};
use std::path::{Path, PathBuf};

// ---------------------------------------------------------------- helpers

/// Small deterministic generator (64-bit LCG, Knuth's MMIX constants).
struct Lcg(u64);
impl Lcg {
    fn next_u32(&mut self) -> u32 {
        self.0 = self
            .0
            .wrapping_mul(6364136223846793005)
            .wrapping_add(1442695040888963407);
        (self.0 >> 32) as u32
    }
    fn unit(&mut self) -> f64 {
        f64::from(self.next_u32()) / 4294967296.0
    }
}

fn scratch(name: &str) -> PathBuf {
    let d = std::env::temp_dir().join(format!(
        "horosphere-gifti-test-{}-{name}",
        std::process::id()
    ));
    let _ = std::fs::remove_dir_all(&d);
    std::fs::create_dir_all(&d).unwrap();
    d
}

fn vpath() -> &'static Path {
    Path::new("/virtual/sub-01_hemi-L_white.surf.gii")
}

/// A file with everything the model holds: a surface with a non-trivial
/// transform, shape, labels, an unsigned byte array, a float64 array and a
/// 3-D array, metadata with characters that need escaping.
fn rich() -> Gifti {
    let mesh = icosphere(2, 100.0);
    let mut g = Gifti::from_mesh(&mesh);
    g.meta.set("Subject", "sub-01 <&> \"quoted\" 'single'");
    g.meta
        .set("Note", "unicode: \u{00e9}\u{00df}\u{4e2d} tab\there");
    let mut t = CoordTransform::identity_unknown();
    t.data_space = "NIFTI_XFORM_SCANNER_ANAT".into();
    t.transformed_space = "NIFTI_XFORM_ALIGNED_ANAT".into();
    t.matrix = [
        [0.9, 0.1, 0.0, -1.25],
        [-0.1, 0.9, 0.05, 3.5],
        [0.0, 0.0, 1.1, 7.0e-3],
        [0.0, 0.0, 0.0, 1.0],
    ];
    g.arrays[0].transforms = vec![t];
    g.arrays[0]
        .meta
        .set("AnatomicalStructurePrimary", "CortexLeft");
    let n = mesh.n_vertices();
    let mut rng = Lcg(42);
    let shape: Vec<f32> = (0..n).map(|_| (rng.unit() * 6.0 - 1.0) as f32).collect();
    let mut a = DataArray::new(Intent::Shape, vec![n], Data::F32(shape)).unwrap();
    a.meta.set("Name", "thickness");
    g.arrays.push(a);
    let labels: Vec<i32> = (0..n).map(|_| (rng.next_u32() % 3) as i32).collect();
    g.arrays
        .push(DataArray::new(Intent::Label, vec![n, 1], Data::I32(labels)).unwrap());
    g.label_table = LabelTable {
        labels: vec![
            Label {
                key: 0,
                name: "unassigned".into(),
                rgba: Some([0.0, 0.0, 0.0, 0.0]),
            },
            Label {
                key: 1,
                name: "north & cap".into(),
                rgba: Some([0.123456789012345, 0.5, 1.0, 1.0]),
            },
            Label {
                key: 2,
                name: "band".into(),
                rgba: None,
            },
        ],
    };
    let bytes: Vec<u8> = (0..n * 2).map(|_| (rng.next_u32() % 256) as u8).collect();
    g.arrays.push(
        DataArray::new(
            Intent::Other("NIFTI_INTENT_VECTOR".into()),
            vec![n, 2],
            Data::U8(bytes),
        )
        .unwrap(),
    );
    let f64s: Vec<f64> = (0..n).map(|_| rng.unit() * 1e-3 - 3e5).collect();
    g.arrays
        .push(DataArray::new(Intent::None, vec![n], Data::F64(f64s)).unwrap());
    let cube: Vec<f32> = (0..2 * 3 * 4).map(|i| i as f32 * 0.5 - 3.0).collect();
    g.arrays.push(
        DataArray::new(
            Intent::Other("NIFTI_INTENT_GENMATRIX".into()),
            vec![2, 3, 4],
            Data::F32(cube),
        )
        .unwrap(),
    );
    g
}

fn all_options() -> Vec<WriteOptions> {
    let mut v = Vec::new();
    for encoding in [
        Encoding::Ascii,
        Encoding::Base64Binary,
        Encoding::GZipBase64Binary,
    ] {
        for byte_order in [ByteOrder::LittleEndian, ByteOrder::BigEndian] {
            for index_order in [IndexOrder::RowMajor, IndexOrder::ColumnMajor] {
                v.push(WriteOptions {
                    encoding,
                    byte_order,
                    index_order,
                });
            }
        }
    }
    v
}

/// Assert a [`Error::BadFile`] for `path` whose element contains `element`
/// and whose message contains every string in `message`.
#[track_caller]
fn assert_bad<T: std::fmt::Debug>(
    r: horosphere::Result<T>,
    path: &Path,
    element: &str,
    message: &[&str],
) {
    match r {
        Err(Error::BadFile {
            path: p,
            element: e,
            message: m,
        }) => {
            assert_eq!(p, path, "wrong path in error: {e}: {m}");
            assert!(
                e.contains(element),
                "element {e:?} should contain {element:?} (message {m:?})"
            );
            for s in message {
                assert!(m.contains(s), "message {m:?} should contain {s:?}");
            }
        }
        other => panic!("expected BadFile at {element:?}, got {other:?}"),
    }
}

fn text_of(g: &Gifti, opts: WriteOptions) -> String {
    String::from_utf8(gifti::to_bytes(g, &opts).unwrap()).unwrap()
}

fn gz_opts() -> WriteOptions {
    WriteOptions::default()
}

fn b64_opts() -> WriteOptions {
    WriteOptions {
        encoding: Encoding::Base64Binary,
        ..WriteOptions::default()
    }
}

fn ascii_opts() -> WriteOptions {
    WriteOptions {
        encoding: Encoding::Ascii,
        ..WriteOptions::default()
    }
}

/// The `<Data>` payload of the `k`-th data array in `xml`, with its byte range.
fn data_range(xml: &str, k: usize) -> (usize, usize) {
    let mut from = 0;
    for _ in 0..=k {
        from = xml[from..].find("<Data>").unwrap() + from + "<Data>".len();
    }
    let to = xml[from..].find("</Data>").unwrap() + from;
    (from, to)
}

fn small_mesh() -> TriMesh {
    // A tetrahedron, faces counter-clockwise seen from outside.
    TriMesh::new(
        vec![
            [0.0, 0.0, 0.0],
            [1.0, 0.0, 0.0],
            [0.0, 1.0, 0.0],
            [0.0, 0.0, 1.0],
        ],
        vec![[0, 2, 1], [0, 1, 3], [0, 3, 2], [1, 2, 3]],
    )
    .unwrap()
}

// ---------------------------------------------------------------- round trips

#[test]
fn round_trip_every_encoding_byte_order_index_order() {
    let g = rich();
    for opts in all_options() {
        let bytes = gifti::to_bytes(&g, &opts).unwrap();
        let back = gifti::parse(&bytes, vpath()).unwrap_or_else(|e| panic!("{opts:?}: {e}"));
        // Exact equality, float32 and float64 included: binary encodings
        // copy bits and ASCII uses shortest round-trip decimal text.
        assert_eq!(back, g, "{opts:?}");
    }
}

#[test]
fn encodings_really_differ_on_disk() {
    // Guard against a writer that ignores its options.
    let g = Gifti::from_mesh(&small_mesh());
    let texts: Vec<String> = all_options().into_iter().map(|o| text_of(&g, o)).collect();
    for (i, a) in texts.iter().enumerate() {
        for b in texts.iter().skip(i + 1) {
            assert_ne!(a, b);
        }
    }
    let le = text_of(&g, b64_opts());
    assert!(le.contains("Encoding=\"Base64Binary\" Endian=\"LittleEndian\""));
    // 1.0f32 little-endian is 00 00 80 3F; vertex 1 is (1, 0, 0), so bytes 12..16.
    let (a, b) = data_range(&le, 0);
    let raw = base64_decode(&le[a..b]);
    assert_eq!(&raw[12..16], &[0, 0, 0x80, 0x3f]);
    let be = text_of(
        &g,
        WriteOptions {
            byte_order: ByteOrder::BigEndian,
            ..b64_opts()
        },
    );
    let (a, b) = data_range(&be, 0);
    let raw = base64_decode(&be[a..b]);
    assert_eq!(&raw[12..16], &[0x3f, 0x80, 0, 0]);
}

fn base64_decode(s: &str) -> Vec<u8> {
    use base64::Engine;
    base64::engine::general_purpose::STANDARD
        .decode(s.trim())
        .unwrap()
}

fn base64_encode(b: &[u8]) -> String {
    use base64::Engine;
    base64::engine::general_purpose::STANDARD.encode(b)
}

#[test]
fn column_major_file_reads_row_major() {
    // The worked example of the module doc: triangles [[0,2,1],[0,1,3],[0,3,2],[1,2,3]]
    // stored column-major are 0 0 0 1  2 1 3 2  1 3 2 3.
    let xml = r#"<?xml version="1.0" encoding="UTF-8"?>
<GIFTI Version="1.0" NumberOfDataArrays="2">
 <DataArray Intent="NIFTI_INTENT_POINTSET" DataType="NIFTI_TYPE_FLOAT32" ArrayIndexingOrder="ColumnMajorOrder"
   Dimensionality="2" Dim0="4" Dim1="3" Encoding="ASCII" Endian="LittleEndian">
  <Data>0 1 0 0  0 0 1 0  0 0 0 1</Data>
 </DataArray>
 <DataArray Intent="NIFTI_INTENT_TRIANGLE" DataType="NIFTI_TYPE_INT32" ArrayIndexingOrder="ColumnMajorOrder"
   Dimensionality="2" Dim0="4" Dim1="3" Encoding="ASCII" Endian="LittleEndian">
  <Data>0 0 0 1  2 1 3 2  1 3 2 3</Data>
 </DataArray>
</GIFTI>"#;
    let m = gifti::parse(xml.as_bytes(), vpath())
        .unwrap()
        .to_mesh(vpath())
        .unwrap();
    assert_eq!(m, small_mesh());
}

#[test]
fn writing_is_deterministic() {
    let g = rich();
    let dir = scratch("determinism");
    for (i, opts) in all_options().into_iter().enumerate() {
        let a = dir.join(format!("a{i}.gii"));
        let b = dir.join(format!("b{i}.gii"));
        gifti::write(&a, &g, &opts).unwrap();
        gifti::write(&b, &g.clone(), &opts).unwrap();
        assert_eq!(std::fs::read(&a).unwrap(), std::fs::read(&b).unwrap());
    }
    std::fs::remove_dir_all(&dir).unwrap();
}

#[test]
fn mesh_round_trip_rounds_to_f32_only() {
    let dir = scratch("mesh");
    let p = dir.join("sphere.surf.gii");
    let mut mesh = icosphere(3, 100.0);
    mesh.positions[5][0] = 1.0 / 3.0; // not representable in f32
    gifti::write_mesh(&p, &mesh).unwrap();
    let back = gifti::read_mesh(&p).unwrap();
    assert_eq!(back.faces, mesh.faces);
    assert_eq!(back.n_vertices(), 642);
    for (a, b) in back.positions.iter().zip(&mesh.positions) {
        for k in 0..3 {
            assert_eq!(a[k], b[k] as f32 as f64);
        }
    }
    // f32 rounding moves a 100 mm coordinate by at most 2^-18 mm.
    let worst = back
        .positions
        .iter()
        .zip(&mesh.positions)
        .flat_map(|(a, b)| (0..3).map(move |k| (a[k] - b[k]).abs()))
        .fold(0.0, f64::max);
    assert!(worst > 0.0 && worst <= 100.0 * f64::from(f32::EPSILON));
    let g = gifti::read(&p).unwrap();
    assert_eq!(
        g.arrays[0].transforms,
        vec![CoordTransform::identity_unknown()]
    );
    std::fs::remove_dir_all(&dir).unwrap();
}

#[test]
fn shape_and_label_helpers_round_trip() {
    let dir = scratch("helpers");
    let values: Vec<f32> = vec![2.5, f32::NAN, -0.0, 1e-20, 3.25];
    let mut meta = MetaData::new();
    meta.set("Name", "depth");
    let sp = dir.join("d.shape.gii");
    gifti::write_shape(&sp, &values, &meta).unwrap();
    let s = gifti::read_shape(&sp).unwrap();
    assert_eq!(s.meta, meta);
    assert_eq!(s.values.len(), 5);
    for (a, b) in s.values.iter().zip(&values) {
        assert_eq!(a.to_bits(), b.to_bits());
    }
    let table = LabelTable {
        labels: vec![
            Label {
                key: 0,
                name: "none".into(),
                rgba: Some([1.0, 1.0, 1.0, 0.0]),
            },
            Label {
                key: 7,
                name: "region seven".into(),
                rgba: Some([0.25, 0.5, 0.75, 1.0]),
            },
        ],
    };
    let lp = dir.join("r.label.gii");
    let keys = vec![0, 7, 7, 0, 7];
    gifti::write_labels(&lp, &keys, &table).unwrap();
    let l = gifti::read_labels(&lp).unwrap();
    assert_eq!(l.values, keys);
    assert_eq!(l.table, table);
    let g = gifti::read(&lp).unwrap();
    assert_eq!(g.arrays[0].intent, Intent::Label);
    assert_eq!(g.arrays[0].data.data_type(), gifti::DataType::I32);
    // A key missing from the table is refused on write.
    let e = gifti::write_labels(&dir.join("bad.label.gii"), &[0, 3], &table).unwrap_err();
    assert!(e.to_string().contains("vertex 1 has label key 3"), "{e}");
    assert!(!dir.join("bad.label.gii").exists());
    // read_vertex_data skips the surface arrays.
    let rp = dir.join("rich.gii");
    gifti::write(&rp, &rich(), &gz_opts()).unwrap();
    let v = gifti::read_vertex_data(&rp).unwrap();
    assert_eq!(v.len(), 5);
    assert_eq!(v[0].intent, Intent::Shape);
    assert_eq!(v[1].intent, Intent::Label);
    std::fs::remove_dir_all(&dir).unwrap();
}

fn external_xml(name: &str, offset: usize) -> String {
    format!(
        r#"<?xml version="1.0" encoding="UTF-8"?>
<!DOCTYPE GIFTI SYSTEM "http://www.nitrc.org/frs/download.php/115/gifti.dtd">
<GIFTI Version="1.0" NumberOfDataArrays="1">
 <DataArray Intent="NIFTI_INTENT_SHAPE" DataType="NIFTI_TYPE_FLOAT32" ArrayIndexingOrder="RowMajorOrder"
   Dimensionality="1" Dim0="3" Encoding="ExternalFileBinary" Endian="BigEndian"
   ExternalFileName="{name}" ExternalFileOffset="{offset}">
  <Data></Data>
 </DataArray>
</GIFTI>"#
    )
}

#[test]
fn external_file_in_same_folder() {
    let dir = scratch("external");
    let mut dat = vec![0xAAu8; 5];
    for x in [1.5f32, -2.0, 1e6] {
        dat.extend_from_slice(&x.to_be_bytes());
    }
    std::fs::write(dir.join("values.dat"), &dat).unwrap();
    let p = dir.join("ext.shape.gii");
    std::fs::write(&p, external_xml("values.dat", 5)).unwrap();
    let s = gifti::read_shape(&p).unwrap();
    assert_eq!(s.values, vec![1.5, -2.0, 1e6]);
    // Past the end of the data file.
    std::fs::write(&p, external_xml("values.dat", 6)).unwrap();
    assert_bad(
        gifti::read(&p),
        &p,
        "DataArray 0 (NIFTI_INTENT_SHAPE)",
        &["17 bytes", "expected at least 12 bytes at offset 6"],
    );
    std::fs::remove_dir_all(&dir).unwrap();
}

#[test]
fn external_file_outside_folder_is_refused() {
    let dir = scratch("external-out");
    std::fs::create_dir_all(dir.join("sub")).unwrap();
    std::fs::write(dir.join("sub/v.dat"), [0u8; 12]).unwrap();
    std::fs::write(dir.join("v.dat"), [0u8; 12]).unwrap();
    let inner = dir.join("sub/x.gii");
    let abs = dir.join("v.dat").display().to_string();
    for name in ["../v.dat", abs.as_str(), "sub/v.dat", "./v.dat", ".."] {
        let p = if name == "sub/v.dat" {
            dir.join("x.gii")
        } else {
            inner.clone()
        };
        std::fs::write(&p, external_xml(name, 0)).unwrap();
        assert_bad(
            gifti::read(&p),
            &p,
            "DataArray 0 (NIFTI_INTENT_SHAPE)",
            &["not a plain file name", "own folder", "refused"],
        );
    }
    #[cfg(unix)]
    {
        std::os::unix::fs::symlink(dir.join("v.dat"), dir.join("sub/link.dat")).unwrap();
        std::fs::write(&inner, external_xml("link.dat", 0)).unwrap();
        assert_bad(
            gifti::read(&inner),
            &inner,
            "DataArray 0",
            &["symbolic links are refused"],
        );
    }
    std::fs::write(&inner, external_xml("missing.dat", 0)).unwrap();
    assert_bad(
        gifti::read(&inner),
        &inner,
        "DataArray 0",
        &["cannot be opened"],
    );
    std::fs::remove_dir_all(&dir).unwrap();
}

#[test]
fn nibabel_style_header_and_lenient_attributes_are_accepted() {
    // CDATA sections, a self-closed LabelTable, empty ExternalFileOffset,
    // the DTD line, comments, Label Index instead of Key, legacy encoding name.
    let xml = r#"<?xml version="1.0" encoding="UTF-8"?>
<!DOCTYPE GIFTI SYSTEM "http://www.nitrc.org/frs/download.php/115/gifti.dtd">
<!-- written by hand -->
<GIFTI Version="1.0"  NumberOfDataArrays="1">
   <MetaData>
      <MD>
         <Name><![CDATA[date]]></Name>
         <Value><![CDATA[a ]]>&amp;<![CDATA[ b]]></Value>
      </MD>
   </MetaData>
   <LabelTable>
      <Label Index="3" Red="0.5" Alpha="0.25"><![CDATA[three]]></Label>
   </LabelTable>
   <DataArray Intent="NIFTI_INTENT_LABEL" DataType="NIFTI_TYPE_UINT8" ArrayIndexingOrder="RowMajorOrder"
              Dimensionality="1" Dim0="4" Encoding="GIFTI_ENCODING_ASCII" Endian="LittleEndian"
              ExternalFileName="" ExternalFileOffset="">
      <MetaData/>
      <Data>
         3 3 0 255
      </Data>
   </DataArray>
</GIFTI>
"#;
    let g = gifti::parse(xml.as_bytes(), vpath()).unwrap();
    assert_eq!(g.meta.get("date"), Some("a & b"));
    assert_eq!(
        g.label_table.labels,
        vec![Label {
            key: 3,
            name: "three".into(),
            rgba: Some([0.5, 0.0, 0.0, 0.25]),
        }]
    );
    assert_eq!(g.arrays[0].data, Data::U8(vec![3, 3, 0, 255]));
    let l = g.to_labels(vpath()).unwrap();
    assert_eq!(l.values, vec![3, 3, 0, 255]);
}

#[test]
fn convert_command_re_encodes_everything() {
    let dir = scratch("convert");
    let src = dir.join("in.gii");
    let g = rich();
    gifti::write(&src, &g, &ascii_opts()).unwrap();
    let bin = env!("CARGO_BIN_EXE_horosphere");
    for (flags, enc, endian) in [
        (vec![], "GZipBase64Binary", "LittleEndian"),
        (
            vec!["--encoding", "base64", "--big-endian"],
            "Base64Binary",
            "BigEndian",
        ),
        (vec!["--encoding", "ascii"], "ASCII", "LittleEndian"),
    ] {
        let out = dir.join("out.gii");
        let st = std::process::Command::new(bin)
            .arg("convert")
            .arg(&src)
            .arg(&out)
            .args(&flags)
            .status()
            .unwrap();
        assert!(st.success(), "{flags:?}");
        let text = std::fs::read_to_string(&out).unwrap();
        assert!(text.contains(&format!("Encoding=\"{enc}\" Endian=\"{endian}\"")));
        assert_eq!(gifti::read(&out).unwrap(), g, "{flags:?}");
    }
    // Other formats go through the mesh dispatch: a surface converts to OBJ
    // and back with equal faces and float32 positions.
    let mesh = horosphere::mesh::shapes::icosphere(2, 70.0);
    let surf = dir.join("sphere.surf.gii");
    gifti::write_mesh(&surf, &mesh).unwrap();
    let obj = dir.join("sphere.obj");
    let st = std::process::Command::new(bin)
        .arg("convert")
        .arg(&surf)
        .arg(&obj)
        .status()
        .unwrap();
    assert!(st.success());
    let back = horosphere::io::read_mesh(&obj).unwrap();
    assert_eq!(back, gifti::read_mesh(&surf).unwrap());
    // A GIFTI file without a surface cannot become an OBJ mesh: exit status
    // 1, a message naming the file, nothing written.
    let shape = dir.join("values.shape.gii");
    gifti::write_shape(&shape, &[1.0, 2.0, 3.0], &Default::default()).unwrap();
    let o = std::process::Command::new(bin)
        .arg("convert")
        .arg(&shape)
        .arg(dir.join("out.obj"))
        .output()
        .unwrap();
    assert_eq!(o.status.code(), Some(1));
    let err = String::from_utf8_lossy(&o.stderr);
    assert!(err.contains("values.shape.gii"), "{err}");
    assert!(!dir.join("out.obj").exists());
    // A bad input file: exit status 1 and the message names the file.
    std::fs::write(dir.join("bad.gii"), "hello").unwrap();
    let o = std::process::Command::new(bin)
        .arg("convert")
        .arg(dir.join("bad.gii"))
        .arg(dir.join("out2.gii"))
        .output()
        .unwrap();
    assert_eq!(o.status.code(), Some(1));
    assert!(String::from_utf8_lossy(&o.stderr).contains("bad.gii"));
    assert!(!dir.join("out2.gii").exists());
    std::fs::remove_dir_all(&dir).unwrap();
}

// ---------------------------------------------------------------- bad input

#[test]
fn bad_truncated_base64() {
    let g = Gifti::from_mesh(&small_mesh());
    for opts in [b64_opts(), gz_opts()] {
        let xml = text_of(&g, opts);
        let (a, b) = data_range(&xml, 1);
        // Drop the last 5 characters of the triangle payload.
        let cut = format!("{}{}", &xml[..b - 5], &xml[b..]);
        assert_bad(
            gifti::parse(cut.as_bytes(), vpath()),
            vpath(),
            "DataArray 1 (NIFTI_INTENT_TRIANGLE)",
            &["Base64"],
        );
        // Drop a whole 4-character quantum: valid Base64, too few bytes.
        let cut = format!("{}{}", &xml[..a + 4 * ((b - a) / 8)], &xml[b..]);
        assert_bad(
            gifti::parse(cut.as_bytes(), vpath()),
            vpath(),
            "DataArray 1 (NIFTI_INTENT_TRIANGLE)",
            &["expected"],
        );
    }
}

#[test]
fn bad_corrupt_base64() {
    let xml = text_of(&Gifti::from_mesh(&small_mesh()), b64_opts());
    let (a, _) = data_range(&xml, 0);
    let bad = format!("{}*{}", &xml[..a + 3], &xml[a + 4..]);
    assert_bad(
        gifti::parse(bad.as_bytes(), vpath()),
        vpath(),
        "DataArray 0 (NIFTI_INTENT_POINTSET)",
        &["invalid Base64", "expected Base64"],
    );
}

#[test]
fn bad_corrupt_gzip() {
    let xml = text_of(&Gifti::from_mesh(&icosphere(1, 1.0)), gz_opts());
    let (a, b) = data_range(&xml, 1);
    let mut z = base64_decode(&xml[a..b]);
    // Scramble the deflate body (keep the 2-byte zlib header).
    for (i, x) in z.iter_mut().enumerate().skip(2).take(40) {
        *x ^= 0x5a ^ (i as u8);
    }
    let bad = format!("{}{}{}", &xml[..a], base64_encode(&z), &xml[b..]);
    assert_bad(
        gifti::parse(bad.as_bytes(), vpath()),
        vpath(),
        "DataArray 1 (NIFTI_INTENT_TRIANGLE)",
        &["GZipBase64Binary data"],
    );
    // Not a zlib stream at all.
    let bad = format!(
        "{}{}{}",
        &xml[..a],
        base64_encode(b"plain bytes"),
        &xml[b..]
    );
    assert_bad(
        gifti::parse(bad.as_bytes(), vpath()),
        vpath(),
        "DataArray 1 (NIFTI_INTENT_TRIANGLE)",
        &["corrupt compressed data", "zlib"],
    );
}

#[test]
fn bad_size_disagrees_with_dimensions() {
    let g = Gifti::from_mesh(&small_mesh());
    // Base64Binary: Dim0 says 5 triangles, data holds 4.
    let xml = text_of(&g, b64_opts()).replacen(
        "Dim0=\"4\" Dim1=\"3\" Encoding",
        "Dim0=\"5\" Dim1=\"3\" Encoding",
        2,
    );
    assert_bad(
        gifti::parse(xml.as_bytes(), vpath()),
        vpath(),
        "DataArray 0 (NIFTI_INTENT_POINTSET)",
        &["decodes to 48 bytes", "expected 60 bytes"],
    );
    // ASCII: too many and too few values.
    let xml = text_of(&g, ascii_opts());
    let more = xml.replacen("Dim0=\"4\"", "Dim0=\"3\"", 1);
    assert_bad(
        gifti::parse(more.as_bytes(), vpath()),
        vpath(),
        "DataArray 0 (NIFTI_INTENT_POINTSET)",
        &["more than the 9 values"],
    );
    let fewer = xml.replacen("Dim0=\"4\"", "Dim0=\"6\"", 1);
    assert_bad(
        gifti::parse(fewer.as_bytes(), vpath()),
        vpath(),
        "DataArray 0 (NIFTI_INTENT_POINTSET)",
        &["12 values; expected 18"],
    );
    let word = xml.replacen("<Data>\n0 0 0", "<Data>\n0 zero 0", 1);
    assert_bad(
        gifti::parse(word.as_bytes(), vpath()),
        vpath(),
        "DataArray 0 (NIFTI_INTENT_POINTSET)",
        &["value 1 is \"zero\"", "expected a number"],
    );
    // GZip: fewer bytes than declared.
    let xml = text_of(&g, gz_opts()).replacen("Dim0=\"4\"", "Dim0=\"9\"", 2);
    assert_bad(
        gifti::parse(xml.as_bytes(), vpath()),
        vpath(),
        "DataArray 0 (NIFTI_INTENT_POINTSET)",
        &["48 bytes; expected 108"],
    );
}

#[test]
fn bad_decompressed_larger_than_declared() {
    // 1 MB of zeros compresses to about 1 kB; the header declares 4 values.
    let z = {
        use std::io::Write;
        let mut e = flate2::write::ZlibEncoder::new(Vec::new(), flate2::Compression::best());
        e.write_all(&vec![0u8; 1 << 20]).unwrap();
        e.finish().unwrap()
    };
    assert!(z.len() < 4096);
    let xml = format!(
        r#"<GIFTI NumberOfDataArrays="1"><DataArray Intent="NIFTI_INTENT_SHAPE" DataType="NIFTI_TYPE_FLOAT32"
 Dimensionality="1" Dim0="4" Encoding="GZipBase64Binary" Endian="LittleEndian"><Data>{}</Data></DataArray></GIFTI>"#,
        base64_encode(&z)
    );
    assert_bad(
        gifti::parse(xml.as_bytes(), vpath()),
        vpath(),
        "DataArray 0 (NIFTI_INTENT_SHAPE)",
        &["larger than the 16 bytes", "refused"],
    );
}

fn mesh_xml(coords: &str, tris: &str, nv: usize, nf: usize) -> String {
    format!(
        r#"<?xml version="1.0"?><GIFTI Version="1.0" NumberOfDataArrays="2">
<DataArray Intent="NIFTI_INTENT_POINTSET" DataType="NIFTI_TYPE_FLOAT32" Dimensionality="2" Dim0="{nv}" Dim1="3" Encoding="ASCII"><Data>{coords}</Data></DataArray>
<DataArray Intent="NIFTI_INTENT_TRIANGLE" DataType="NIFTI_TYPE_INT32" Dimensionality="2" Dim0="{nf}" Dim1="3" Encoding="ASCII"><Data>{tris}</Data></DataArray>
</GIFTI>"#
    )
}

#[test]
fn bad_non_finite_coordinates() {
    for v in ["nan", "inf", "-inf", "NaN", "1e39"] {
        let xml = mesh_xml(&format!("0 0 0 1 0 0 0 {v} 0"), "0 1 2", 3, 1);
        let g = gifti::parse(xml.as_bytes(), vpath()).unwrap();
        assert_bad(
            g.to_mesh(vpath()),
            vpath(),
            "DataArray 0 (NIFTI_INTENT_POINTSET)",
            &["vertex 2 has a non-finite coordinate", "expected finite"],
        );
    }
}

#[test]
fn bad_face_indices() {
    for (tris, shown) in [("0 1 3", "index 3"), ("0 -1 2", "index -1")] {
        let xml = mesh_xml("0 0 0 1 0 0 0 1 0", tris, 3, 1);
        let g = gifti::parse(xml.as_bytes(), vpath()).unwrap();
        assert_bad(
            g.to_mesh(vpath()),
            vpath(),
            "DataArray 1 (NIFTI_INTENT_TRIANGLE)",
            &[
                "triangle 0 has vertex",
                shown,
                "expected indices from 0 to 2",
            ],
        );
    }
    // Float triangles are the wrong type.
    let xml = mesh_xml("0 0 0 1 0 0 0 1 0", "0 1 2", 3, 1).replacen(
        "TRIANGLE\" DataType=\"NIFTI_TYPE_INT32",
        "TRIANGLE\" DataType=\"NIFTI_TYPE_FLOAT32",
        1,
    );
    let g = gifti::parse(xml.as_bytes(), vpath()).unwrap();
    assert_bad(
        g.to_mesh(vpath()),
        vpath(),
        "DataArray 1 (NIFTI_INTENT_TRIANGLE)",
        &["expected NIFTI_TYPE_INT32"],
    );
}

#[test]
fn bad_empty_meshes() {
    let g = gifti::parse(mesh_xml("", "", 0, 0).as_bytes(), vpath()).unwrap();
    assert_bad(
        g.to_mesh(vpath()),
        vpath(),
        "DataArray 0 (NIFTI_INTENT_POINTSET)",
        &["no vertices"],
    );
    let g = gifti::parse(mesh_xml("0 0 0 1 0 0 0 1 0", "", 3, 0).as_bytes(), vpath()).unwrap();
    assert_bad(
        g.to_mesh(vpath()),
        vpath(),
        "DataArray 1 (NIFTI_INTENT_TRIANGLE)",
        &["no triangles"],
    );
    let only_points = r#"<GIFTI><DataArray Intent="NIFTI_INTENT_POINTSET" DataType="NIFTI_TYPE_FLOAT32" Dimensionality="2" Dim0="1" Dim1="3" Encoding="ASCII"><Data>0 0 0</Data></DataArray></GIFTI>"#;
    let g = gifti::parse(only_points.as_bytes(), vpath()).unwrap();
    assert_bad(
        g.to_mesh(vpath()),
        vpath(),
        "file",
        &["no NIFTI_INTENT_TRIANGLE"],
    );
    let nothing = r#"<GIFTI Version="1.0" NumberOfDataArrays="0"></GIFTI>"#;
    let g = gifti::parse(nothing.as_bytes(), vpath()).unwrap();
    assert_bad(
        g.to_mesh(vpath()),
        vpath(),
        "file",
        &["no NIFTI_INTENT_POINTSET"],
    );
    // Writing an empty mesh is refused, and nothing is left behind.
    let dir = scratch("empty");
    let p = dir.join("e.surf.gii");
    assert!(gifti::write_mesh(&p, &TriMesh::default()).is_err());
    assert!(!p.exists());
    std::fs::remove_dir_all(&dir).unwrap();
}

#[test]
fn bad_unknown_encoding_datatype_and_attributes() {
    let xml = text_of(&Gifti::from_mesh(&small_mesh()), gz_opts());
    let cases: [(&str, &str, &str, &[&str]); 7] = [
        (
            "Encoding=\"GZipBase64Binary\"",
            "Encoding=\"Zstd\"",
            "DataArray 0",
            &["unknown Encoding \"Zstd\"", "expected ASCII"],
        ),
        (
            "DataType=\"NIFTI_TYPE_FLOAT32\"",
            "DataType=\"NIFTI_TYPE_COMPLEX64\"",
            "DataArray 0 (NIFTI_INTENT_POINTSET)",
            &["unsupported DataType", "expected NIFTI_TYPE_FLOAT32"],
        ),
        (
            "Endian=\"LittleEndian\"",
            "Endian=\"Middle\"",
            "DataArray 0",
            &["unknown Endian"],
        ),
        (
            "ArrayIndexingOrder=\"RowMajorOrder\"",
            "ArrayIndexingOrder=\"Diagonal\"",
            "DataArray 0",
            &["unknown ArrayIndexingOrder"],
        ),
        (
            "Dimensionality=\"2\"",
            "Dimensionality=\"7\"",
            "DataArray 0",
            &["expected an integer from 1 to 6"],
        ),
        (
            "Dim1=\"3\"",
            "Dim1=\"-3\"",
            "DataArray 0",
            &["Dim1 is \"-3\"", "non-negative integer"],
        ),
        (
            "NumberOfDataArrays=\"2\"",
            "NumberOfDataArrays=\"3\"",
            "GIFTI",
            &["NumberOfDataArrays is 3 but the file has 2"],
        ),
    ];
    for (from, to, element, message) in cases {
        let bad = xml.replacen(from, to, 1);
        assert_ne!(bad, xml, "{from}");
        assert_bad(
            gifti::parse(bad.as_bytes(), vpath()),
            vpath(),
            element,
            message,
        );
    }
    let no_type = xml.replacen(" DataType=\"NIFTI_TYPE_INT32\"", "", 1);
    assert_bad(
        gifti::parse(no_type.as_bytes(), vpath()),
        vpath(),
        "DataArray 1 (NIFTI_INTENT_TRIANGLE)",
        &["no DataType attribute"],
    );
}

#[test]
fn bad_entity_declarations_are_refused() {
    let lol = r#"<?xml version="1.0"?>
<!DOCTYPE GIFTI [
 <!ENTITY a "aaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaa">
 <!ENTITY b "&a;&a;&a;&a;&a;&a;&a;&a;&a;&a;&a;&a;&a;&a;&a;&a;">
]>
<GIFTI Version="1.0" NumberOfDataArrays="0"><MetaData><MD><Name>x</Name><Value>&b;</Value></MD></MetaData></GIFTI>"#;
    assert_bad(
        gifti::parse(lol.as_bytes(), vpath()),
        vpath(),
        "DOCTYPE",
        &["declares entities", "never expanded"],
    );
    let external = r#"<?xml version="1.0"?>
<!DOCTYPE GIFTI SYSTEM "gifti.dtd" [ <!ENTITY x SYSTEM "file:///etc/passwd"> ]>
<GIFTI><MetaData><MD><Name>x</Name><Value>&x;</Value></MD></MetaData></GIFTI>"#;
    assert_bad(
        gifti::parse(external.as_bytes(), vpath()),
        vpath(),
        "DOCTYPE",
        &["declares entities"],
    );
    let subset = "<!DOCTYPE GIFTI [ <!ELEMENT GIFTI ANY> ]><GIFTI/>";
    assert_bad(
        gifti::parse(subset.as_bytes(), vpath()),
        vpath(),
        "DOCTYPE",
        &["internal DTD subset"],
    );
    // A reference to an undeclared entity (no DOCTYPE at all) in text and in an attribute.
    let in_text = "<GIFTI><MetaData><MD><Name>x</Name><Value>&x;</Value></MD></MetaData></GIFTI>";
    assert_bad(
        gifti::parse(in_text.as_bytes(), vpath()),
        vpath(),
        "MetaData MD 0",
        &["reference to entity &x;", "never expanded"],
    );
    let in_attr = "<GIFTI Version=\"&x;\"></GIFTI>";
    assert_bad(
        gifti::parse(in_attr.as_bytes(), vpath()),
        vpath(),
        "GIFTI",
        &["attribute Version", "never expanded"],
    );
    // The usual DTD line is fine.
    let ok = "<?xml version=\"1.0\"?>\n<!DOCTYPE GIFTI SYSTEM \"http://www.nitrc.org/frs/download.php/115/gifti.dtd\">\n<GIFTI NumberOfDataArrays=\"0\"/>";
    assert!(gifti::parse(ok.as_bytes(), vpath()).is_ok());
}

#[test]
fn bad_not_xml_or_not_gifti() {
    let cases: [(&[u8], &str, &str); 6] = [
        (b"\x89PNG\r\n\x1a\n\x00\x00\xff\xfe", "file", "not UTF-8"),
        (b"hello world", "file", "expected an XML GIFTI file"),
        (b"", "file", "no <GIFTI> element"),
        (
            b"<?xml version=\"1.0\"?><svg width=\"3\"/>",
            "root element",
            "expected <GIFTI>",
        ),
        (b"<!DOCTYPE svg><svg/>", "DOCTYPE", "expected GIFTI"),
        (
            b"<GIFTI></GIFTI><GIFTI></GIFTI>",
            "file",
            "content after </GIFTI>",
        ),
    ];
    for (bytes, element, message) in cases {
        assert_bad(gifti::parse(bytes, vpath()), vpath(), element, &[message]);
    }
    let mismatched = b"<GIFTI><MetaData></LabelTable></GIFTI>";
    assert_bad(
        gifti::parse(mismatched, vpath()),
        vpath(),
        "XML line 1",
        &["expected well-formed XML"],
    );
    // A missing file is an I/O error naming it.
    let p = Path::new("/nonexistent/horosphere/x.gii");
    match gifti::read(p) {
        Err(Error::Io { path, .. }) => assert_eq!(path, p),
        other => panic!("{other:?}"),
    }
}

#[test]
fn bad_truncated_files_never_panic() {
    // Every prefix of a small file must fail cleanly (only the whole file,
    // possibly without its final newline, parses).
    for opts in [ascii_opts(), b64_opts(), gz_opts()] {
        let xml = gifti::to_bytes(&rich_small(), &opts).unwrap();
        let full_end = xml.len() - 1; // without the final newline
        for cut in 0..full_end {
            let r = gifti::parse(&xml[..cut], vpath());
            assert!(
                matches!(r, Err(Error::BadFile { .. })),
                "prefix {cut} of {}: {r:?}",
                xml.len()
            );
        }
        assert!(gifti::parse(&xml[..full_end], vpath()).is_ok());
    }
}

#[test]
fn bad_byte_flips_never_panic() {
    let mut rng = Lcg(7);
    for opts in [ascii_opts(), b64_opts(), gz_opts()] {
        let xml = gifti::to_bytes(&rich_small(), &opts).unwrap();
        for _ in 0..1500 {
            let mut b = xml.clone();
            for _ in 0..1 + rng.next_u32() % 3 {
                let i = rng.next_u32() as usize % b.len();
                b[i] = (rng.next_u32() % 256) as u8;
            }
            // Ok or a BadFile, never a panic or another kind of error.
            match gifti::parse(&b, vpath()) {
                Ok(g) => {
                    let _ = g.to_mesh(vpath());
                }
                Err(Error::BadFile { .. }) => {}
                Err(e) => panic!("unexpected error kind: {e}"),
            }
        }
    }
}

/// A small file with every feature, for the sweeps.
fn rich_small() -> Gifti {
    let mut g = Gifti::from_mesh(&small_mesh());
    g.meta.set("k", "v&<>");
    g.label_table.labels.push(Label {
        key: 1,
        name: "one".into(),
        rgba: Some([0.5, 0.5, 0.5, 1.0]),
    });
    g.arrays
        .push(DataArray::new(Intent::Label, vec![4], Data::I32(vec![1, 1, 0, 1])).unwrap());
    g
}

#[test]
fn bad_label_tables() {
    let dup = r#"<GIFTI><LabelTable><Label Key="1">a</Label><Label Key="1">b</Label></LabelTable></GIFTI>"#;
    assert_bad(
        gifti::parse(dup.as_bytes(), vpath()),
        vpath(),
        "LabelTable",
        &["key 1 appears twice"],
    );
    let nokey = r#"<GIFTI><LabelTable><Label Red="1">a</Label></LabelTable></GIFTI>"#;
    assert_bad(
        gifti::parse(nokey.as_bytes(), vpath()),
        vpath(),
        "LabelTable Label 0",
        &["no Key attribute"],
    );
    let badcolour =
        r#"<GIFTI><LabelTable><Label Key="2" Red="pink">a</Label></LabelTable></GIFTI>"#;
    assert_bad(
        gifti::parse(badcolour.as_bytes(), vpath()),
        vpath(),
        "LabelTable Label 0",
        &["Red is \"pink\""],
    );
}

#[test]
fn bad_transform_matrix() {
    let xml = text_of(&rich_small(), gz_opts());
    let bad = xml.replacen("<MatrixData>1 0 0 0", "<MatrixData>1 0 0", 1);
    assert_bad(
        gifti::parse(bad.as_bytes(), vpath()),
        vpath(),
        "DataArray 0 (NIFTI_INTENT_POINTSET) CoordinateSystemTransformMatrix 0",
        &["MatrixData has 15 entries", "expected 16 finite numbers"],
    );
}

#[test]
fn writer_refuses_what_xml_cannot_carry() {
    let mut g = rich_small();
    g.meta.set("bell", "\u{7}");
    let e = gifti::to_bytes(&g, &gz_opts()).unwrap_err();
    assert!(e.to_string().contains("U+0007"), "{e}");
    let mut g = rich_small();
    g.arrays[0].dims = vec![5, 3];
    let e = gifti::to_bytes(&g, &gz_opts()).unwrap_err();
    assert!(
        e.to_string()
            .contains("DataArray 0 (NIFTI_INTENT_POINTSET)"),
        "{e}"
    );
}

#[test]
fn regression_empty_array_with_huge_trailing_dims() {
    // Dim0 = 0 makes the total 0 even though Dim1 * Dim2 overflows; reading
    // and re-writing must not overflow anywhere.
    let xml = r#"<GIFTI NumberOfDataArrays="1"><DataArray Intent="NIFTI_INTENT_NONE" DataType="NIFTI_TYPE_FLOAT32"
 Dimensionality="3" Dim0="0" Dim1="1099511627776" Dim2="1099511627776" Encoding="ASCII"><Data></Data></DataArray></GIFTI>"#;
    let g = gifti::parse(xml.as_bytes(), vpath()).unwrap();
    assert_eq!(g.arrays[0].data.len(), 0);
    for opts in all_options() {
        let back = gifti::parse(&gifti::to_bytes(&g, &opts).unwrap(), vpath()).unwrap();
        assert_eq!(back, g);
    }
    // Dimensions whose product overflows with data present are refused.
    let big = xml.replace("Dim0=\"0\"", "Dim0=\"1099511627776\"");
    assert_bad(
        gifti::parse(big.as_bytes(), vpath()),
        vpath(),
        "DataArray 0 (NIFTI_INTENT_NONE)",
        &["overflow"],
    );
}

/// Files for tests/reference/test_gifti_nibabel.py: the rich file in every
/// encoding x byte order x index order, written to the folder named by
/// HOROSPHERE_ARTIFACTS (or a scratch folder, removed afterwards). Each is
/// read back here; nibabel then checks that it reads them all alike.
#[test]
fn artifacts_for_reference_checks() {
    let (dir, keep) = match std::env::var_os("HOROSPHERE_ARTIFACTS") {
        Some(d) => (PathBuf::from(d).join("gifti"), true),
        None => (scratch("artifacts"), false),
    };
    std::fs::create_dir_all(&dir).unwrap();
    let g = rich();
    let mut names = Vec::new();
    for opts in all_options() {
        let name = format!(
            "rich_{}_{}_{}.gii",
            opts.encoding.as_str(),
            opts.byte_order.as_str(),
            opts.index_order.as_str()
        );
        let p = dir.join(&name);
        gifti::write(&p, &g, &opts).unwrap();
        assert_eq!(gifti::read(&p).unwrap(), g, "{name}");
        names.push(name);
    }
    assert_eq!(names.len(), 12);
    if !keep {
        std::fs::remove_dir_all(&dir).unwrap();
    }
}
