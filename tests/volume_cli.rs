//! `horosphere extract` and `horosphere sample` end to end on small NIfTI
//! files written by the library's minimal NIfTI-1 writer: a hollow ball
//! with a stray voxel (filled, dropped, closed genus 0, outward under a
//! negative-determinant affine), sampling of a linear function (exact to
//! FLOAT64 output), refusals with exit status 1 and no output file.

use horosphere::volume::affine::Affine;
use horosphere::volume::nifti::{encode_nifti1, StoreType};
use std::path::PathBuf;
use std::process::Command;

fn temp_dir(tag: &str) -> PathBuf {
    let d = std::env::temp_dir().join(format!(
        "horosphere-volume-cli-{tag}-{}",
        std::process::id()
    ));
    std::fs::create_dir_all(&d).expect("temp dir");
    d
}

fn bin(args: &[&str]) -> std::process::Output {
    Command::new(env!("CARGO_BIN_EXE_horosphere"))
        .args(args)
        .output()
        .expect("run horosphere")
}

/// Mirrored, anisotropic, translated affine (negative determinant).
fn affine() -> Affine {
    Affine {
        m: [
            [-1.2, 0.0, 0.0, 30.0],
            [0.0, 0.9, 0.1, -12.0],
            [0.0, 0.0, 1.1, 4.5],
        ],
    }
}

#[test]
fn extract_hollow_ball_then_sample_a_linear_function() {
    let d = temp_dir("ball");
    let n = 20usize;
    let mut vals = vec![0.0; n * n * n];
    for k in 0..n {
        for j in 0..n {
            for i in 0..n {
                let r = ((i as f64 - 9.5).powi(2)
                    + (j as f64 - 9.3).powi(2)
                    + (k as f64 - 9.6).powi(2))
                .sqrt();
                if (3.0..=7.0).contains(&r) {
                    vals[i + n * (j + n * k)] = 1.0;
                }
            }
        }
    }
    vals[1 + n * (1 + n)] = 1.0; // stray voxel
    let a = affine();
    let mask = d.join("mask.nii");
    std::fs::write(&mask, encode_nifti1(&[n, n, n], &vals, &a, StoreType::U8)).expect("write");
    let surf = d.join("ball.surf.gii");
    let out = bin(&[
        "extract",
        mask.to_str().unwrap_or(""),
        "-o",
        surf.to_str().unwrap_or(""),
        "--json",
        "--float64",
    ]);
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let j: serde_json::Value = serde_json::from_slice(&out.stdout).expect("json");
    assert_eq!(j["extract"]["mask"]["cavities_filled"], 1);
    assert_eq!(j["extract"]["mask"]["pieces"], 2);
    assert_eq!(j["extract"]["mask"]["dropped_voxels"], 1);
    assert_eq!(j["extract"]["flipped_for_negative_determinant"], true);
    assert_eq!(j["topology"]["euler_characteristic"], 2);
    assert_eq!(j["topology"]["genus"], 0);
    assert_eq!(j["topology"]["components"], 1);
    assert_eq!(j["topology"]["closed"], true);
    assert_eq!(j["topology"]["outward"], true);
    // Volume of the filled ball of radius ~7 voxels, voxel volume |det|.
    let det = a.det().abs();
    let want = 4.0 / 3.0 * std::f64::consts::PI * 7.0f64.powi(3) * det;
    let got = j["extract"]["volume_mm3"].as_f64().unwrap_or(0.0);
    assert!(
        (got / want - 1.0).abs() < 1.5 * 0.5 / 7.0 * 3.0,
        "{got} vs {want}"
    );

    // A linear function of mm position, sampled at the surface vertices.
    let lin = |p: [f64; 3]| 0.5 * p[0] - 2.0 * p[1] + 0.25 * p[2] + 3.0;
    let mut f = Vec::with_capacity(n * n * n);
    for k in 0..n {
        for j in 0..n {
            for i in 0..n {
                f.push(lin(a.apply([i as f64, j as f64, k as f64])));
            }
        }
    }
    let fvol = d.join("linear.nii");
    std::fs::write(&fvol, encode_nifti1(&[n, n, n], &f, &a, StoreType::F64)).expect("write");
    let map = d.join("linear.shape.gii");
    let out = bin(&[
        "sample",
        fvol.to_str().unwrap_or(""),
        "--surface",
        surf.to_str().unwrap_or(""),
        "-o",
        map.to_str().unwrap_or(""),
        "--float64",
        "--json",
    ]);
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let j: serde_json::Value = serde_json::from_slice(&out.stdout).expect("json");
    assert_eq!(j["outside"], 0);
    let mesh = horosphere::io::read_mesh(&surf).expect("surface");
    let arrays = horosphere::io::gifti::read_vertex_data(&map).expect("map");
    let vals = arrays[0].data.to_f64();
    // The file stores the affine in float32: evaluate with the same rounding.
    let a32 = Affine {
        m: a.m.map(|r| r.map(|v| f64::from(v as f32))),
    };
    let inv = a32.inverse();
    for (p, v) in mesh.positions.iter().zip(&vals) {
        // The volume holds lin(a(voxel)); at a point x it interpolates
        // lin(a(a32^-1 x)), linear in x.
        let want = lin(a.apply(inv.apply(*p)));
        assert!(
            (v - want).abs() < 1e-9 * (1.0 + want.abs()),
            "{v} vs {want}"
        );
    }
}

#[test]
fn bad_volumes_exit_1_without_output() {
    let d = temp_dir("bad");
    let a = affine();
    let empty = d.join("empty.nii");
    std::fs::write(
        &empty,
        encode_nifti1(&[4, 4, 4], &[0.0; 64], &a, StoreType::U8),
    )
    .expect("write");
    let two = d.join("two.nii");
    std::fs::write(
        &two,
        encode_nifti1(&[2, 2, 2, 2], &[1.0; 16], &a, StoreType::F32),
    )
    .expect("write");
    let mut nan = vec![1.0; 27];
    nan[13] = f64::NAN;
    let nanf = d.join("nan.nii");
    std::fs::write(&nanf, encode_nifti1(&[3, 3, 3], &nan, &a, StoreType::F32)).expect("write");
    for (p, needle) in [(&empty, "empty"), (&two, "3-D"), (&nanf, "NaN")] {
        let out_path = d.join("out.surf.gii");
        let out = bin(&[
            "extract",
            p.to_str().unwrap_or(""),
            "-o",
            out_path.to_str().unwrap_or(""),
        ]);
        assert_eq!(out.status.code(), Some(1));
        let err = String::from_utf8_lossy(&out.stderr);
        assert!(err.contains(needle), "{err}");
        let name = p
            .file_name()
            .map(|n| n.to_string_lossy().into_owned())
            .unwrap_or_default();
        assert!(err.contains(&name), "{err}");
        assert!(!out_path.exists());
    }
}
