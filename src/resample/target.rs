//! Target spheres and sphere validation.
//!
//! In: a target name (`icosphere:K`, K = 0..=8, our built-in icosahedral
//! spheres) or a path to any sphere mesh file; or the points of a sphere to
//! check. Out: the target [`TriMesh`] (radius [`DEFAULT_RADIUS`] mm for the
//! built-in ones), a [`SphereFit`] (fitted centre, radius, largest radial
//! deviation), unit directions of the points. What stays true: a sphere
//! that passes [`check_sphere`] is centred at the origin and of constant
//! radius within the relative tolerance, so its points are compared by
//! their directions `p / |p|` (central projection).
//!
//! The built-in level-K sphere is [`crate::mesh::shapes::icosphere`]: the
//! 12 icosahedron vertices, then each level's edge midpoints projected to
//! the sphere, in the documented deterministic order; `10 * 4^K + 2`
//! vertices (Kenner, "Geodesic math and how to use it", 1976). Every level
//! starts with the vertices of the level before it.

use crate::error::{Error, Result};
use crate::mesh::{norm, Vec3};
use crate::TriMesh;
use std::path::{Path, PathBuf};

/// Radius of the built-in target spheres, in millimetres (the radius the
/// project writes mapped spheres with).
pub const DEFAULT_RADIUS: f64 = 100.0;

/// Highest built-in icosahedral level (655,362 vertices).
pub const MAX_LEVEL: u32 = 8;

/// Default relative tolerance of [`check_sphere`]: centre offset and radial
/// deviation up to 0.1% of the radius (0.1 mm at 100 mm; far above the
/// rounding of coordinates stored as 32-bit floats, about 1e-7 relative).
pub const DEFAULT_SPHERE_TOLERANCE: f64 = 1e-3;

/// A target sphere: built-in or from a file.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Target {
    /// `icosphere:K`, the icosahedral sphere of level K.
    Icosphere(u32),
    /// A sphere mesh file (GIFTI, OBJ, PLY, OFF).
    File(PathBuf),
}

impl Target {
    /// Parse a target: `icosphere:K` with K in 0..=8, or else an existing
    /// file path. Anything else is an error that lists the built-in names.
    pub fn parse(s: &str) -> Result<Target> {
        if let Some(k) = s.strip_prefix("icosphere:") {
            return match k.parse::<u32>() {
                Ok(level) if level <= MAX_LEVEL => Ok(Target::Icosphere(level)),
                _ => Err(Error::Invalid(format!(
                    "target '{s}': expected icosphere:K with K from 0 to {MAX_LEVEL}"
                ))),
            };
        }
        let path = Path::new(s);
        if path.is_file() {
            return Ok(Target::File(path.to_path_buf()));
        }
        Err(Error::Invalid(format!(
            "target '{s}' is neither a built-in name nor an existing file; expected icosphere:K (K = 0..{MAX_LEVEL}) or a sphere mesh file"
        )))
    }

    /// Label for the BIDS `space-` entity: `icosphere6` for `icosphere:6`,
    /// the file stem (letters and digits only) for a file.
    pub fn space_label(&self) -> String {
        match self {
            Target::Icosphere(k) => format!("icosphere{k}"),
            Target::File(p) => {
                let stem = p
                    .file_name()
                    .map(|s| s.to_string_lossy().into_owned())
                    .unwrap_or_default();
                let stem = stem.split('.').next().unwrap_or("");
                let label: String = stem.chars().filter(|c| c.is_ascii_alphanumeric()).collect();
                if label.is_empty() {
                    "target".into()
                } else {
                    label
                }
            }
        }
    }

    /// The target mesh. A file is read and checked with [`check_sphere`]
    /// (errors name the file).
    pub fn mesh(&self, tolerance: f64) -> Result<TriMesh> {
        match self {
            Target::Icosphere(k) => Ok(crate::mesh::shapes::icosphere(*k, DEFAULT_RADIUS)),
            Target::File(p) => {
                let m = crate::io::read_mesh(p)?;
                check_sphere(&m.positions, tolerance).map_err(|e| e.in_file(p, "vertices"))?;
                Ok(m)
            }
        }
    }
}

/// How well points fit a sphere.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct SphereFit {
    /// Least-squares centre (mm).
    pub centre: Vec3,
    /// Mean distance of the points from the origin (mm).
    pub radius: f64,
    /// Largest `| |p| - radius |` over the points (mm).
    pub max_radial_deviation: f64,
}

/// Check that `points` lie on a sphere centred at the origin: the fitted
/// centre within `tolerance * radius` of the origin, and every `|p|` within
/// `tolerance * radius` of the mean radius. The centre is the algebraic
/// least-squares fit (`|p|^2 = 2 c.p + k`, solved by the normal equations
/// about the points' mean), used to tell an off-centre sphere from a
/// non-spherical shape in the error message.
pub fn check_sphere(points: &[Vec3], tolerance: f64) -> Result<SphereFit> {
    if !(tolerance.is_finite() && tolerance > 0.0) {
        return Err(Error::Invalid(format!(
            "sphere tolerance {tolerance}; expected a positive number"
        )));
    }
    let n = points.len();
    if n < 4 {
        return Err(Error::Invalid(format!(
            "{n} points; expected at least 4 points of a sphere"
        )));
    }
    if let Some(i) = points.iter().position(|p| !p.iter().all(|c| c.is_finite())) {
        return Err(Error::Invalid(format!(
            "vertex {i} has a non-finite coordinate; expected finite millimetres"
        )));
    }
    let nf = n as f64;
    let mut mean = [0.0; 3];
    for p in points {
        for k in 0..3 {
            mean[k] += p[k] / nf;
        }
    }
    let mut ata = nalgebra::Matrix4::<f64>::zeros();
    let mut atb = nalgebra::Vector4::<f64>::zeros();
    for p in points {
        let q = [p[0] - mean[0], p[1] - mean[1], p[2] - mean[2]];
        let row = nalgebra::Vector4::new(2.0 * q[0], 2.0 * q[1], 2.0 * q[2], 1.0);
        let rhs = q[0] * q[0] + q[1] * q[1] + q[2] * q[2];
        ata += row * row.transpose();
        atb += row * rhs;
    }
    let sol = ata.lu().solve(&atb).ok_or_else(|| {
        Error::Invalid("the points do not span a sphere (degenerate fit); expected points spread over a sphere".into())
    })?;
    let centre = [mean[0] + sol[0], mean[1] + sol[1], mean[2] + sol[2]];
    let radius = points.iter().map(|&p| norm(p)).sum::<f64>() / nf;
    let (worst, dev) = points
        .iter()
        .enumerate()
        .map(|(i, &p)| (i, (norm(p) - radius).abs()))
        .fold((0, 0.0), |acc, x| if x.1 > acc.1 { x } else { acc });
    if radius.is_nan() || radius <= 0.0 {
        return Err(Error::Invalid(
            "all points at the origin; expected a sphere".into(),
        ));
    }
    let off = norm(centre);
    if off > tolerance * radius {
        return Err(Error::Invalid(format!(
            "sphere not centred: fitted centre ({:.4}, {:.4}, {:.4}) mm is {:.4} mm from the origin, more than {} x radius {:.4} mm; expected a sphere centred at the origin",
            centre[0], centre[1], centre[2], off, tolerance, radius
        )));
    }
    if dev > tolerance * radius {
        return Err(Error::Invalid(format!(
            "sphere not of constant radius: vertex {worst} is {:.4} mm from the origin, the mean radius is {:.4} mm (deviation {:.4} mm, more than {} x radius); expected all points on one sphere",
            norm(points[worst]), radius, dev, tolerance
        )));
    }
    Ok(SphereFit {
        centre,
        radius,
        max_radial_deviation: dev,
    })
}

/// Unit directions `p / |p|` (the points are first checked with
/// [`check_sphere`], so no point is at the origin).
pub fn directions(points: &[Vec3]) -> Vec<Vec3> {
    points
        .iter()
        .map(|&p| {
            let l = norm(p);
            [p[0] / l, p[1] / l, p[2] / l]
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::mesh::shapes::icosphere;

    #[test]
    fn parse_names() {
        assert_eq!(Target::parse("icosphere:6").unwrap(), Target::Icosphere(6));
        assert_eq!(Target::parse("icosphere:0").unwrap(), Target::Icosphere(0));
        for bad in [
            "icosphere:9",
            "icosphere:",
            "icosphere:-1",
            "ico:6",
            "nosuchfile.surf.gii",
        ] {
            let e = Target::parse(bad).unwrap_err().to_string();
            assert!(e.contains("icosphere:K"), "{bad}: {e}");
        }
        assert_eq!(Target::Icosphere(7).space_label(), "icosphere7");
        assert_eq!(
            Target::File("/x/my-sphere_2.surf.gii".into()).space_label(),
            "mysphere2"
        );
    }

    #[test]
    fn sphere_check_accepts_spheres_and_names_the_fault() {
        let m = icosphere(3, 100.0);
        let fit = check_sphere(&m.positions, 1e-6).unwrap();
        assert!((fit.radius - 100.0).abs() < 1e-9);
        assert!(norm(fit.centre) < 1e-9);
        // Shifted by 1 mm: not centred (the fit finds the shift).
        let shifted: Vec<Vec3> = m
            .positions
            .iter()
            .map(|p| [p[0] + 1.0, p[1], p[2]])
            .collect();
        let e = check_sphere(&shifted, 1e-3).unwrap_err().to_string();
        assert!(
            e.contains("not centred") && e.contains("is 1.0000 mm"),
            "{e}"
        );
        // An ellipsoid: centred, radius not constant.
        let ell: Vec<Vec3> = m
            .positions
            .iter()
            .map(|p| [p[0] * 1.1, p[1], p[2]])
            .collect();
        let e = check_sphere(&ell, 1e-3).unwrap_err().to_string();
        assert!(e.contains("not of constant radius"), "{e}");
        // Small radial noise passes a looser tolerance only.
        let bumpy: Vec<Vec3> = m
            .positions
            .iter()
            .enumerate()
            .map(|(i, p)| {
                let s = 1.0 + if i % 2 == 0 { 5e-4 } else { -5e-4 };
                [p[0] * s, p[1] * s, p[2] * s]
            })
            .collect();
        assert!(check_sphere(&bumpy, 1e-3).is_ok());
        assert!(check_sphere(&bumpy, 1e-4).is_err());
    }

    #[test]
    fn builtin_levels_follow_kenner() {
        // V = 10*4^k + 2, F = 20*4^k (Kenner 1976). Levels 0..=6 are built
        // here; 7 and 8 only by count in debug builds (see the integration
        // test for level 7 and the benchmark for 8).
        for k in 0..=6u32 {
            let m = Target::Icosphere(k).mesh(1e-9).unwrap();
            assert_eq!(m.n_vertices(), 10 * 4usize.pow(k) + 2);
            assert_eq!(m.n_faces(), 20 * 4usize.pow(k));
            let fit = check_sphere(&m.positions, 1e-12).unwrap();
            assert!((fit.radius - DEFAULT_RADIUS).abs() < 1e-9);
        }
    }
}
