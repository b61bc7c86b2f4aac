//! The bad-input suite: ONE table of malformed inputs, each run through the
//! built binary. Every case must give a non-zero exit status, a message on
//! stderr naming the file, the element and what was expected (checked by
//! substrings), no panic text, and no output file. The table is mirrored in
//! docs/bad-input.md (regenerate the message column with
//! `HOROSPHERE_BAD_INPUT_DOC=docs/bad-input-messages.md cargo test --test bad_input`).
//!
//! Inputs are made here from our own writers (icosahedral spheres, tori)
//! and then broken by hand; nothing is read from outside the repository.

use horosphere::io::gifti::{self, ByteOrder, Encoding, Gifti, IndexOrder, WriteOptions};
use horosphere::mesh::shapes::{icosphere, torus};
use horosphere::mesh::TriMesh;
use horosphere::resample::matrix::{write_cohort_gifti, CohortColumn};
use horosphere::volume::nifti::{encode_nifti1, StoreType};
use std::path::{Path, PathBuf};
use std::process::Command;

const BIN: &str = env!("CARGO_BIN_EXE_horosphere");

/// One malformed input.
struct Case {
    /// Short name (also the scratch folder).
    name: &'static str,
    /// Command line; `{d}` is the case's folder.
    args: &'static [&'static str],
    /// Files to create in the folder (name, bytes).
    files: Vec<(&'static str, Vec<u8>)>,
    /// Expected exit status.
    code: i32,
    /// Substrings expected on stderr (file, element, expectation).
    expect: &'static [&'static str],
    /// Output paths (relative to the folder) that must not exist afterwards.
    outputs: &'static [&'static str],
}

fn ascii_gifti(g: &Gifti) -> String {
    let opts = WriteOptions {
        encoding: Encoding::Ascii,
        byte_order: ByteOrder::LittleEndian,
        index_order: IndexOrder::RowMajor,
    };
    String::from_utf8(gifti::to_bytes(g, &opts).unwrap()).unwrap()
}

fn gz_gifti(g: &Gifti) -> Vec<u8> {
    gifti::to_bytes(g, &WriteOptions::default()).unwrap()
}

fn obj(m: &TriMesh) -> Vec<u8> {
    let mut b = Vec::new();
    horosphere::io::obj::write_to(&mut b, m).unwrap();
    b
}

fn shape(n: usize) -> Vec<u8> {
    let v: Vec<f32> = (0..n).map(|i| 1.0 + (i % 7) as f32 * 0.1).collect();
    gz_gifti(&Gifti::from_shape(&v, &Default::default()))
}

/// Replace the first occurrence of `from` (which must be present).
fn edit(text: &str, from: &str, to: &str) -> Vec<u8> {
    assert!(text.contains(from), "{from:?} not in the generated file");
    text.replacen(from, to, 1).into_bytes()
}

/// Replace the first value of the first `<Data>` after byte `from`.
fn first_token_to(text: &str, from: usize, to: &str) -> Vec<u8> {
    let p = from + text[from..].find("<Data>").unwrap() + 6;
    let q = p + text[p..].find(|c: char| !c.is_whitespace()).unwrap();
    let e = q + text[q..].find(char::is_whitespace).unwrap();
    let mut s = text.to_string();
    s.replace_range(q..e, to);
    s.into_bytes()
}

fn template() -> Vec<u8> {
    std::fs::read(Path::new(env!("CARGO_MANIFEST_DIR")).join("pipelines/demo-template-L.toml"))
        .unwrap()
}

fn matrix_bytes(dir: &Path) -> Vec<u8> {
    let cols: Vec<CohortColumn> = (1..=4)
        .map(|k| CohortColumn {
            subject: format!("sub-a{k}"),
            values: (0..42).map(|i| (i * k) as f32 * 0.01 + 2.0).collect(),
        })
        .collect();
    let p = dir.join("matrix-template.func.gii");
    write_cohort_gifti(&p, &cols).unwrap();
    std::fs::read(p).unwrap()
}

const PARTICIPANTS: &str = "participant_id\tgroup\tage\tage_copy\nsub-a1\tpatient\t61\t61\nsub-a2\tcontrol\t55\t55\nsub-a3\tpatient\t70\t70\nsub-a4\tcontrol\t48\t48\n";

fn manifest(body: &str) -> Vec<u8> {
    format!("[study]\nroot = \"study\"\noutput = \"out\"\n{body}").into_bytes()
}

fn cases(tmp: &Path) -> Vec<Case> {
    let ico = icosphere(2, 50.0); // 162 vertices, closed genus 0
    let sphere = gz_gifti(&Gifti::from_mesh(&icosphere(2, 100.0)));
    let surf_ascii = ascii_gifti(&Gifti::from_mesh(&ico));
    let surf_gz = gz_gifti(&Gifti::from_mesh(&ico));
    let mut open = ico.clone();
    open.faces.pop();
    // Two tetrahedra glued along one edge: that edge has four triangles.
    let nonmanifold = b"v 0 0 0\nv 1 0 0\nv 0 1 0\nv 0 0 1\nv 0 -1 0\nv 0 0 -1\n\
        f 1 3 2\nf 1 2 4\nf 2 3 4\nf 3 1 4\nf 1 2 5\nf 2 6 5\nf 1 5 6\nf 1 6 2\n"
        .to_vec();
    let base64_surf = String::from_utf8(
        gifti::to_bytes(
            &Gifti::from_mesh(&ico),
            &WriteOptions {
                encoding: Encoding::Base64Binary,
                ..Default::default()
            },
        )
        .unwrap(),
    )
    .unwrap();
    let garbled = {
        let i = base64_surf.find("<Data>").unwrap() + 6 + 40;
        let mut b = base64_surf.clone().into_bytes();
        b[i] = b'!';
        b
    };
    let bomb = {
        use std::io::Write;
        let mut enc = flate2::write::ZlibEncoder::new(Vec::new(), flate2::Compression::best());
        enc.write_all(&vec![0u8; 32 << 20]).unwrap();
        let z = enc.finish().unwrap();
        use base64::Engine;
        let b64 = base64::engine::general_purpose::STANDARD.encode(&z);
        format!(
            "<?xml version=\"1.0\"?>\n<GIFTI Version=\"1.0\" NumberOfDataArrays=\"1\">\n<DataArray Intent=\"NIFTI_INTENT_SHAPE\" \
             DataType=\"NIFTI_TYPE_FLOAT32\" ArrayIndexingOrder=\"RowMajorOrder\" Dimensionality=\"1\" Dim0=\"162\" \
             Encoding=\"GZipBase64Binary\" Endian=\"LittleEndian\" ExternalFileName=\"\" ExternalFileOffset=\"\">\n<Data>{b64}</Data>\n</DataArray>\n</GIFTI>\n"
        )
        .into_bytes()
    };
    let matrix = matrix_bytes(tmp);
    // NIfTI: a 4x4x4 uint8 mask (a 2x2x2 cube), 352 + 64 bytes, broken by hand.
    let vol_affine = horosphere::volume::affine::Affine::scaling([1.0, 1.0, 1.0]);
    let cube: Vec<f64> = (0..64)
        .map(|i| {
            let (x, y, z) = (i % 4, (i / 4) % 4, i / 16);
            f64::from(u8::from(
                (1..3).contains(&x) && (1..3).contains(&y) && (1..3).contains(&z),
            ))
        })
        .collect();
    let nii = |dims: &[usize], v: &[f64]| encode_nifti1(dims, v, &vol_affine, StoreType::U8);
    let mask = nii(&[4, 4, 4], &cube);
    let gz = |raw: &[u8], extra_zeros: usize| {
        use std::io::Write;
        let mut e = flate2::write::GzEncoder::new(Vec::new(), flate2::Compression::best());
        e.write_all(raw).unwrap();
        e.write_all(&vec![0u8; extra_zeros]).unwrap();
        e.finish().unwrap()
    };
    let nifti_bomb = gz(&mask, 32 << 20);
    let mut huge = mask.clone();
    for k in 0..3 {
        huge[42 + 2 * k..44 + 2 * k].copy_from_slice(&30000u16.to_le_bytes());
    }
    let mut pair_header = mask.clone();
    pair_header[344..348].copy_from_slice(b"ni1\0");
    let two = nii(&[4, 4, 4, 2], &[cube.clone(), cube.clone()].concat());
    let m = |files: Vec<(&'static str, Vec<u8>)>| {
        let mut f = vec![
            ("matrix.func.gii", matrix.clone()),
            ("participants.tsv", PARTICIPANTS.as_bytes().to_vec()),
        ];
        f.extend(files);
        f
    };
    let align_files = |csv: &[u8]| {
        vec![
            ("sphere.surf.gii", sphere.clone()),
            ("tpl.toml", template()),
            ("lm.csv", csv.to_vec()),
        ]
    };
    const ALIGN: &[&str] = &[
        "align",
        "{d}/sphere.surf.gii",
        "--landmarks",
        "{d}/lm.csv",
        "--template",
        "{d}/tpl.toml",
        "--center",
        "none",
        "-o",
        "{d}/out.surf.gii",
    ];
    const STATS: &[&str] = &[
        "stats",
        "--matrix",
        "{d}/matrix.func.gii",
        "--participants",
        "{d}/participants.tsv",
        "--formula",
        "y ~ group + age",
        "--contrast",
        "group[T.patient]",
        "-o",
        "{d}/out",
    ];
    vec![
        // ---- GIFTI ----
        Case {
            name: "gifti-truncated",
            args: &["repair", "{d}/cut.surf.gii", "-o", "{d}/out.surf.gii"],
            files: vec![("cut.surf.gii", surf_gz[..surf_gz.len() / 2].to_vec())],
            code: 1,
            expect: &["cut.surf.gii", "expected"],
            outputs: &["out.surf.gii"],
        },
        Case {
            name: "gifti-garbled-base64",
            args: &["inspect", "{d}/garbled.surf.gii"],
            files: vec![("garbled.surf.gii", garbled)],
            code: 1,
            expect: &["garbled.surf.gii", "DataArray", "Base64"],
            outputs: &[],
        },
        Case {
            name: "gifti-wrong-count",
            args: &["map", "{d}/count.surf.gii", "-o", "{d}/out.surf.gii"],
            files: vec![("count.surf.gii", edit(&surf_ascii, "Dim0=\"162\"", "Dim0=\"163\""))],
            code: 1,
            expect: &["count.surf.gii", "DataArray", "expected 489"],
            outputs: &["out.surf.gii"],
        },
        Case {
            name: "gifti-index-out-of-range",
            args: &["repair", "{d}/index.surf.gii", "-o", "{d}/out.surf.gii"],
            files: vec![("index.surf.gii", {
                // The first index of the triangle array.
                let tri = surf_ascii.find("NIFTI_INTENT_TRIANGLE").unwrap();
                first_token_to(&surf_ascii, tri, "999")
            })],
            code: 1,
            expect: &["index.surf.gii", "999", "expected"],
            outputs: &["out.surf.gii"],
        },
        Case {
            name: "gifti-nan-coordinate",
            args: &["map", "{d}/nan.surf.gii", "-o", "{d}/out.surf.gii"],
            files: vec![("nan.surf.gii", {
                // The first coordinate of the point set.
                first_token_to(&surf_ascii, 0, "NaN")
            })],
            code: 1,
            expect: &["nan.surf.gii", "finite"],
            outputs: &["out.surf.gii"],
        },
        Case {
            name: "gifti-entity-declaration",
            args: &["inspect", "{d}/entity.surf.gii"],
            files: vec![("entity.surf.gii", {
                let s = surf_ascii.replacen("<GIFTI", "<!DOCTYPE GIFTI [<!ENTITY boom \"boom\">]>\n<GIFTI", 1);
                let i = s.find("<!DOCTYPE GIFTI SYSTEM").unwrap();
                let j = i + s[i..].find('>').unwrap() + 1;
                let mut s = s;
                s.replace_range(i..j, "");
                s.into_bytes()
            })],
            code: 1,
            expect: &["entity.surf.gii", "DOCTYPE", "entities"],
            outputs: &[],
        },
        Case {
            name: "gifti-external-file-outside-folder",
            args: &["inspect", "{d}/ext.surf.gii"],
            files: vec![("ext.surf.gii", {
                let s = String::from_utf8(edit(&surf_ascii, "Encoding=\"ASCII\"", "Encoding=\"ExternalFileBinary\"")).unwrap();
                edit(&s, "ExternalFileName=\"\"", "ExternalFileName=\"../../etc/passwd\"")
            })],
            code: 1,
            expect: &["ext.surf.gii", "DataArray", "not a plain file name"],
            outputs: &[],
        },
        Case {
            name: "gifti-gzip-bomb",
            args: &["resample", "--sphere", "{d}/sphere.surf.gii", "--data", "{d}/bomb.shape.gii", "--target", "icosphere:1", "-o", "{d}/out.shape.gii"],
            files: vec![("sphere.surf.gii", sphere.clone()), ("bomb.shape.gii", bomb)],
            code: 1,
            expect: &["bomb.shape.gii", "DataArray", "larger than the 648 bytes"],
            outputs: &["out.shape.gii"],
        },
        Case {
            name: "gifti-not-a-surface",
            args: &["repair", "{d}/values.shape.gii", "-o", "{d}/out.surf.gii"],
            files: vec![("values.shape.gii", shape(162))],
            code: 1,
            expect: &["values.shape.gii", "POINTSET"],
            outputs: &["out.surf.gii"],
        },
        // ---- OBJ, PLY, OFF, unknown ----
        Case {
            name: "obj-index-out-of-range",
            args: &["inspect", "{d}/bad.obj"],
            files: vec![("bad.obj", b"v 0 0 0\nv 1 0 0\nv 0 1 0\nf 1 2 9\n".to_vec())],
            code: 1,
            expect: &["bad.obj", "line 4", "9"],
            outputs: &[],
        },
        Case {
            name: "obj-bad-number",
            args: &["inspect", "{d}/num.obj"],
            files: vec![("num.obj", b"v 0 0 0\nv 1 zero 0\nv 0 1 0\nf 1 2 3\n".to_vec())],
            code: 1,
            expect: &["num.obj", "line 2", "zero"],
            outputs: &[],
        },
        Case {
            name: "ply-truncated-binary",
            args: &["inspect", "{d}/cut.ply"],
            files: vec![("cut.ply", {
                let mut b = Vec::new();
                horosphere::io::ply::write_to(&mut b, &ico, horosphere::io::ply::PlyEncoding::BinaryLittleEndian).unwrap();
                b.truncate(b.len() - 100);
                b
            })],
            code: 1,
            expect: &["cut.ply", "header", "data bytes", "after the header"],
            outputs: &[],
        },
        Case {
            name: "ply-bad-format",
            args: &["inspect", "{d}/fmt.ply"],
            files: vec![("fmt.ply", b"ply\nformat binary_middle_endian 1.0\nelement vertex 0\nend_header\n".to_vec())],
            code: 1,
            expect: &["fmt.ply", "format", "expected"],
            outputs: &[],
        },
        Case {
            name: "off-wrong-counts",
            args: &["inspect", "{d}/few.off"],
            files: vec![("few.off", b"OFF\n4 2 0\n0 0 0\n1 0 0\n0 1 0\n0 0 1\n3 0 1 2\n".to_vec())],
            code: 1,
            expect: &["few.off", "end of file", "the header declares 2"],
            outputs: &[],
        },
        Case {
            name: "unknown-format",
            args: &["inspect", "{d}/mesh.xyz"],
            files: vec![("mesh.xyz", b"1 2 3\n".to_vec())],
            code: 1,
            expect: &["mesh.xyz", "header", "not a recognised mesh file"],
            outputs: &[],
        },
        // ---- map ----
        Case {
            name: "map-non-manifold",
            args: &["map", "{d}/glued.obj", "-o", "{d}/out.surf.gii"],
            files: vec![("glued.obj", nonmanifold)],
            code: 1,
            expect: &["non-manifold"],
            outputs: &["out.surf.gii"],
        },
        Case {
            name: "map-open-surface",
            args: &["map", "{d}/open.obj", "-o", "{d}/out.surf.gii"],
            files: vec![("open.obj", obj(&open))],
            code: 1,
            expect: &["open.obj", "edge", "not closed", "closed, connected, genus-0"],
            outputs: &["out.surf.gii"],
        },
        Case {
            name: "map-genus-one",
            args: &["map", "{d}/torus.obj", "-o", "{d}/out.surf.gii"],
            files: vec![("torus.obj", obj(&torus(30.0, 10.0, 24, 12)))],
            code: 1,
            expect: &["genus"],
            outputs: &["out.surf.gii"],
        },
        // ---- NIfTI volumes (extract, sample) ----
        Case {
            name: "nifti-truncated-data",
            args: &["extract", "{d}/short.nii", "-o", "{d}/out.surf.gii"],
            files: vec![("short.nii", mask[..mask.len() - 10].to_vec())],
            code: 1,
            expect: &["short.nii", "data", "54 bytes after vox_offset 352", "expected 64"],
            outputs: &["out.surf.gii"],
        },
        Case {
            name: "nifti-truncated-gzip",
            args: &["extract", "{d}/cut.nii.gz", "-o", "{d}/out.surf.gii"],
            files: vec![("cut.nii.gz", { let z = gz(&mask, 0); z[..z.len() / 2].to_vec() })],
            code: 1,
            expect: &["cut.nii.gz", "expected"],
            outputs: &["out.surf.gii"],
        },
        Case {
            name: "nifti-gzip-bomb",
            args: &["sample", "{d}/bomb.nii.gz", "--surface", "{d}/sphere.surf.gii", "-o", "{d}/out.shape.gii"],
            files: vec![("sphere.surf.gii", sphere.clone()), ("bomb.nii.gz", nifti_bomb)],
            code: 1,
            expect: &["bomb.nii.gz", "gzip stream", "larger than the 416 bytes"],
            outputs: &["out.shape.gii"],
        },
        Case {
            name: "nifti-huge-dimensions",
            args: &["extract", "{d}/huge.nii", "-o", "{d}/out.surf.gii"],
            files: vec![("huge.nii", huge)],
            code: 1,
            expect: &["huge.nii", "header dim", "27000000000000 voxels"],
            outputs: &["out.surf.gii"],
        },
        Case {
            name: "nifti-header-of-a-pair",
            args: &["extract", "{d}/pair.hdr", "-o", "{d}/out.surf.gii"],
            files: vec![("pair.hdr", pair_header)],
            code: 1,
            expect: &["pair.hdr", "header magic", ".hdr/.img pair"],
            outputs: &["out.surf.gii"],
        },
        Case {
            name: "nifti-two-volumes",
            args: &["extract", "{d}/two.nii", "-o", "{d}/out.surf.gii"],
            files: vec![("two.nii", two)],
            code: 1,
            expect: &["two.nii", "header dim", "3-D"],
            outputs: &["out.surf.gii"],
        },
        // ---- resample ----
        Case {
            name: "resample-wrong-length-map",
            args: &["resample", "--sphere", "{d}/sphere.surf.gii", "--data", "{d}/short.shape.gii", "--target", "icosphere:1", "-o", "{d}/out.shape.gii"],
            files: vec![("sphere.surf.gii", sphere.clone()), ("short.shape.gii", shape(10))],
            code: 1,
            expect: &["short.shape.gii", "10", "162"],
            outputs: &["out.shape.gii"],
        },
        Case {
            name: "resample-not-a-sphere",
            args: &["resample", "--sphere", "{d}/torus.obj", "--data", "{d}/v.shape.gii", "--target", "icosphere:1", "-o", "{d}/out.shape.gii"],
            files: vec![("torus.obj", obj(&torus(30.0, 10.0, 24, 12))), ("v.shape.gii", shape(288))],
            code: 1,
            expect: &["torus.obj", "sphere"],
            outputs: &["out.shape.gii"],
        },
        Case {
            name: "resample-unknown-target",
            args: &["resample", "--sphere", "{d}/sphere.surf.gii", "--data", "{d}/v.shape.gii", "--target", "icosphere:12", "-o", "{d}/out.shape.gii"],
            files: vec![("sphere.surf.gii", sphere.clone()), ("v.shape.gii", shape(162))],
            code: 1,
            expect: &["icosphere:12", "expected icosphere:K"],
            outputs: &["out.shape.gii"],
        },
        // ---- landmark CSVs (align) ----
        Case {
            name: "landmarks-bad-header",
            args: ALIGN,
            files: align_files(b"label,index\nbow-tip,3\n"),
            code: 1,
            expect: &["lm.csv", "header", "expected `name,vertex` or `name,x,y,z`"],
            outputs: &["out.surf.gii"],
        },
        Case {
            name: "landmarks-duplicate-name",
            args: ALIGN,
            files: align_files(b"name,vertex\nbow-tip,3\nbow-tip,4\n"),
            code: 1,
            expect: &["lm.csv", "line 3", "unique"],
            outputs: &["out.surf.gii"],
        },
        Case {
            name: "landmarks-negative-vertex",
            args: ALIGN,
            files: align_files(b"name,vertex\nbow-tip,-3\n"),
            code: 1,
            expect: &["lm.csv", "line 2", "non-negative integer"],
            outputs: &["out.surf.gii"],
        },
        Case {
            name: "landmarks-vertex-out-of-range",
            args: ALIGN,
            files: align_files(b"name,vertex\nbow-tip,3\nstern-tip,40\nmasthead,100000\n"),
            code: 1,
            expect: &["lm.csv", "line 4", "100000"],
            outputs: &["out.surf.gii"],
        },
        Case {
            name: "landmarks-nan-coordinate",
            args: ALIGN,
            files: align_files(b"name,x,y,z\nbow-tip,1,NaN,3\n"),
            code: 1,
            expect: &["lm.csv", "line 2", "finite number"],
            outputs: &["out.surf.gii"],
        },
        Case {
            name: "landmarks-empty",
            args: ALIGN,
            files: align_files(b"name,vertex\n"),
            code: 1,
            expect: &["lm.csv", "rows", "at least one row"],
            outputs: &["out.surf.gii"],
        },
        Case {
            name: "landmarks-ragged-row",
            args: ALIGN,
            files: align_files(b"name,vertex\nbow-tip,3,7\n"),
            code: 1,
            expect: &["lm.csv", "line 2"],
            outputs: &["out.surf.gii"],
        },
        // ---- manifests (run) ----
        Case {
            name: "manifest-toml-syntax",
            args: &["run", "{d}/m.toml"],
            files: vec![("m.toml", b"[study\nroot = 1\n".to_vec())],
            code: 1,
            expect: &["m.toml", "TOML"],
            outputs: &["out"],
        },
        Case {
            name: "manifest-unknown-key",
            args: &["run", "{d}/m.toml"],
            files: vec![("m.toml", manifest("[inputs]\nsurface = \"white\"\nsurfaces = \"pial\"\n"))],
            code: 1,
            expect: &["m.toml", "surfaces"],
            outputs: &["out"],
        },
        Case {
            name: "manifest-missing-inputs",
            args: &["run", "{d}/m.toml"],
            files: vec![("m.toml", manifest(""))],
            code: 1,
            expect: &["m.toml", "inputs"],
            outputs: &["out"],
        },
        Case {
            name: "manifest-bad-hemisphere",
            args: &["run", "{d}/m.toml"],
            files: vec![("m.toml", manifest("hemispheres = [\"left\"]\n[inputs]\nsurface = \"white\"\n"))],
            code: 1,
            expect: &["m.toml", "hemispheres", "left"],
            outputs: &["out"],
        },
        Case {
            name: "manifest-bad-fit",
            args: &["run", "{d}/m.toml"],
            files: vec![
                ("study/README", b"an empty study".to_vec()),
                ("m.toml", manifest("[inputs]\nsurface = \"white\"\n[align]\nfit = \"affine\"\n")),
            ],
            code: 1,
            expect: &["m.toml", "align.fit", "affine", "expected mobius or rotation"],
            outputs: &["out"],
        },
        Case {
            name: "manifest-missing-study-folder",
            args: &["run", "{d}/m.toml"],
            files: vec![("m.toml", manifest("[inputs]\nsurface = \"white\"\n"))],
            code: 1,
            expect: &["study"],
            outputs: &["out"],
        },
        // ---- participants, formula, design (stats) ----
        Case {
            name: "participants-missing-subject",
            args: STATS,
            files: m(vec![("participants.tsv", b"participant_id\tgroup\tage\nsub-a1\tpatient\t61\nsub-a2\tcontrol\t55\nsub-a3\tpatient\t70\n".to_vec())]),
            code: 1,
            expect: &["participants.tsv", "participant_id", "sub-a4", "expected a row per subject"],
            outputs: &["out"],
        },
        Case {
            name: "participants-missing-column",
            args: STATS,
            files: m(vec![("participants.tsv", b"participant_id\tgroup\nsub-a1\tpatient\nsub-a2\tcontrol\nsub-a3\tpatient\nsub-a4\tcontrol\n".to_vec())]),
            code: 1,
            expect: &["participants.tsv", "age"],
            outputs: &["out"],
        },
        Case {
            name: "participants-first-column",
            args: STATS,
            files: m(vec![("participants.tsv", b"subject\tgroup\tage\nsub-a1\tpatient\t61\n".to_vec())]),
            code: 1,
            expect: &["participants.tsv", "header", "expected 'participant_id'"],
            outputs: &["out"],
        },
        Case {
            name: "participants-ragged-row",
            args: STATS,
            files: m(vec![("participants.tsv", b"participant_id\tgroup\tage\nsub-a1\tpatient\nsub-a2\tcontrol\t55\n".to_vec())]),
            code: 1,
            expect: &["participants.tsv", "line 2", "expected 3"],
            outputs: &["out"],
        },
        Case {
            name: "participants-empty-value",
            args: STATS,
            files: m(vec![("participants.tsv", b"participant_id\tgroup\tage\nsub-a1\tpatient\tn/a\nsub-a2\tcontrol\t55\nsub-a3\tpatient\t70\nsub-a4\tcontrol\t48\n".to_vec())]),
            code: 1,
            expect: &["participants.tsv", "age", "sub-a1"],
            outputs: &["out"],
        },
        Case {
            name: "formula-unknown-column",
            args: &["stats", "--matrix", "{d}/matrix.func.gii", "--participants", "{d}/participants.tsv", "--formula", "y ~ group + height", "--contrast", "group[T.patient]", "-o", "{d}/out"],
            files: m(vec![]),
            code: 1,
            expect: &["participants.tsv", "height"],
            outputs: &["out"],
        },
        Case {
            name: "formula-interaction",
            args: &["stats", "--matrix", "{d}/matrix.func.gii", "--participants", "{d}/participants.tsv", "--formula", "y ~ group * age", "--contrast", "group[T.patient]", "-o", "{d}/out"],
            files: m(vec![]),
            code: 1,
            expect: &["formula", "'*'", "expected main effects"],
            outputs: &["out"],
        },
        Case {
            name: "design-singular",
            args: &["stats", "--matrix", "{d}/matrix.func.gii", "--participants", "{d}/participants.tsv", "--formula", "y ~ age + age_copy", "--contrast", "age", "-o", "{d}/out"],
            files: m(vec![]),
            code: 1,
            expect: &["singular", "age_copy"],
            outputs: &["out"],
        },
        Case {
            name: "contrast-unknown-column",
            args: &["stats", "--matrix", "{d}/matrix.func.gii", "--participants", "{d}/participants.tsv", "--formula", "y ~ group + age", "--contrast", "group[T.control]", "-o", "{d}/out"],
            files: m(vec![]),
            code: 1,
            expect: &["group[T.control]", "coefficients: Intercept, group[T.patient], age"],
            outputs: &["out"],
        },
        Case {
            name: "stats-matrix-not-a-matrix",
            args: STATS,
            files: m(vec![("matrix.func.gii", surf_gz.clone())]),
            code: 1,
            expect: &["matrix.func.gii", "DataArray"],
            outputs: &["out"],
        },
    ]
}

#[test]
fn every_bad_input_gives_a_clear_error_and_no_output() {
    let root = std::env::temp_dir().join(format!("horosphere-bad-input-{}", std::process::id()));
    let _ = std::fs::remove_dir_all(&root);
    std::fs::create_dir_all(&root).unwrap();
    let table = cases(&root);
    let mut names = std::collections::HashSet::new();
    let mut failures = Vec::new();
    let mut doc = String::from("| case | command | exit | message |\n|---|---|---|---|\n");
    for c in &table {
        assert!(names.insert(c.name), "case {} twice", c.name);
        let dir = root.join(c.name);
        std::fs::create_dir_all(&dir).unwrap();
        for (n, b) in &c.files {
            let f = dir.join(n);
            std::fs::create_dir_all(f.parent().unwrap()).unwrap();
            std::fs::write(f, b).unwrap();
        }
        let d = dir.display().to_string();
        let args: Vec<String> = c.args.iter().map(|a| a.replace("{d}", &d)).collect();
        let out = Command::new(BIN)
            .args(&args)
            .current_dir(&dir)
            .output()
            .unwrap();
        let err = String::from_utf8_lossy(&out.stderr).into_owned();
        let mut problems = Vec::new();
        if out.status.code() != Some(c.code) {
            problems.push(format!("exit {:?}, expected {}", out.status.code(), c.code));
        }
        for s in c.expect {
            if !err.contains(s) {
                problems.push(format!("stderr lacks {s:?}"));
            }
        }
        if err.contains("panicked") || err.contains("RUST_BACKTRACE") {
            problems.push("panic text on stderr".into());
        }
        if err.trim().is_empty() {
            problems.push("empty stderr".into());
        }
        for o in c.outputs {
            if dir.join(o).exists() {
                problems.push(format!("output {o} was created"));
            }
        }
        let leftovers: Vec<String> = std::fs::read_dir(&dir)
            .unwrap()
            .filter_map(|e| e.ok())
            .map(|e| e.file_name().to_string_lossy().into_owned())
            .filter(|n| n.ends_with(".tmp"))
            .collect();
        if !leftovers.is_empty() {
            problems.push(format!("temporary files left: {leftovers:?}"));
        }
        if !problems.is_empty() {
            failures.push(format!(
                "{}: {}\n    stderr: {}",
                c.name,
                problems.join("; "),
                err.trim()
            ));
        }
        let shown: Vec<String> = c.args.iter().map(|a| a.replace("{d}/", "")).collect();
        let msg = err
            .trim()
            .replace(&format!("{d}/"), "")
            .replace('|', "\\|")
            .replace('\n', " ");
        doc.push_str(&format!(
            "| `{}` | `horosphere {}` | {} | {} |\n",
            c.name,
            shown.join(" ").replace('|', "\\|"),
            out.status.code().unwrap_or(-1),
            msg
        ));
    }
    if let Some(p) = std::env::var_os("HOROSPHERE_BAD_INPUT_DOC") {
        let p = PathBuf::from(p);
        let p = if p.is_absolute() {
            p
        } else {
            Path::new(env!("CARGO_MANIFEST_DIR")).join(p)
        };
        std::fs::write(p, doc).unwrap();
    }
    assert!(
        table.len() >= 40,
        "the table shrank to {} cases",
        table.len()
    );
    assert!(
        failures.is_empty(),
        "{} of {} cases failed:\n{}",
        failures.len(),
        table.len(),
        failures.join("\n")
    );
    let _ = std::fs::remove_dir_all(&root);
}
