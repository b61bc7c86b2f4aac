//! Orientation predicate for the convex hull: the sign of a 3x3
//! determinant of point differences, exact for any finite `f64` input.
//!
//! In: four points `a, b, c, q`. Out: the sign of
//! `det[b - a, c - a, q - a] = ((b - a) x (c - a)) . (q - a)`, which is
//! positive when `q` lies on the side of the plane `abc` that the normal of
//! the counter-clockwise triangle `abc` points to. What stays true: the sign
//! is that of the exact real determinant of the given floating-point
//! coordinates (no rounding ever flips it, and zero means exactly coplanar).
//!
//! Method: a floating-point filter with the a-priori error bound of
//! Shewchuk, "Adaptive precision floating-point arithmetic and fast robust
//! geometric predicates", Discrete & Computational Geometry 18 (1997)
//! 305-363 (the bound `(7 + 56 eps) eps` times the permanent, for
//! `orient3d`); when the filter cannot decide, the determinant is evaluated
//! exactly with floating-point expansions (the same paper: Two-Sum,
//! Two-Product and Grow-Expansion, here with the fused multiply-add giving
//! the exact rounding error of a product).

use crate::mesh::Vec3;

/// Unit roundoff of `f64` (2^-53).
const EPS: f64 = 1.1102230246251565e-16;
/// Shewchuk's `o3derrboundA`.
const ERRBOUND: f64 = (7.0 + 56.0 * EPS) * EPS;

/// Sign (-1, 0, 1) of `((b - a) x (c - a)) . (q - a)`, exact.
pub fn orient(a: Vec3, b: Vec3, c: Vec3, q: Vec3) -> i8 {
    let u = [b[0] - a[0], b[1] - a[1], b[2] - a[2]];
    let v = [c[0] - a[0], c[1] - a[1], c[2] - a[2]];
    let w = [q[0] - a[0], q[1] - a[1], q[2] - a[2]];
    let m0 = v[1] * w[2] - v[2] * w[1];
    let m1 = v[2] * w[0] - v[0] * w[2];
    let m2 = v[0] * w[1] - v[1] * w[0];
    let det = u[0] * m0 + u[1] * m1 + u[2] * m2;
    let perm = u[0].abs() * ((v[1] * w[2]).abs() + (v[2] * w[1]).abs())
        + u[1].abs() * ((v[2] * w[0]).abs() + (v[0] * w[2]).abs())
        + u[2].abs() * ((v[0] * w[1]).abs() + (v[1] * w[0]).abs());
    let bound = ERRBOUND * perm;
    if det > bound {
        1
    } else if det < -bound {
        -1
    } else {
        orient_exact(a, b, c, q)
    }
}

/// Exact sum `a + b = x + y` with `x = fl(a + b)` (Knuth's Two-Sum).
fn two_sum(a: f64, b: f64) -> (f64, f64) {
    let x = a + b;
    let bv = x - a;
    let av = x - bv;
    (x, (a - av) + (b - bv))
}

/// Exact product `a * b = x + y` with `x = fl(a * b)`; the error term from
/// the fused multiply-add, which rounds once.
fn two_product(a: f64, b: f64) -> (f64, f64) {
    let x = a * b;
    (x, a.mul_add(b, -x))
}

/// Grow-Expansion: add `b` to the expansion `e` (components in increasing
/// magnitude, non-overlapping); zero components are dropped.
fn grow(e: &[f64], b: f64) -> Vec<f64> {
    let mut out = Vec::with_capacity(e.len() + 1);
    let mut q = b;
    for &c in e {
        let (x, y) = two_sum(q, c);
        if y != 0.0 {
            out.push(y);
        }
        q = x;
    }
    if q != 0.0 {
        out.push(q);
    }
    out
}

/// Sum of two expansions.
fn sum(e: &[f64], f: &[f64]) -> Vec<f64> {
    let mut out = e.to_vec();
    for &c in f {
        out = grow(&out, c);
    }
    out
}

/// Product of two expansions (every pair of components, summed exactly).
fn product(e: &[f64], f: &[f64]) -> Vec<f64> {
    let mut out = Vec::new();
    for &a in e {
        for &b in f {
            let (x, y) = two_product(a, b);
            out = grow(&out, y);
            out = grow(&out, x);
        }
    }
    out
}

fn negate(e: &[f64]) -> Vec<f64> {
    e.iter().map(|x| -x).collect()
}

/// Exact difference as an expansion.
fn diff(a: f64, b: f64) -> Vec<f64> {
    let (x, y) = two_sum(a, -b);
    grow(&[y], x)
}

/// The sign of an expansion is the sign of its largest component (the last
/// one, components being in increasing magnitude and non-overlapping).
fn sign(e: &[f64]) -> i8 {
    match e.last() {
        Some(&x) if x > 0.0 => 1,
        Some(&x) if x < 0.0 => -1,
        _ => 0,
    }
}

/// The determinant of [`orient`] in exact expansion arithmetic.
fn orient_exact(a: Vec3, b: Vec3, c: Vec3, q: Vec3) -> i8 {
    let u: Vec<Vec<f64>> = (0..3).map(|k| diff(b[k], a[k])).collect();
    let v: Vec<Vec<f64>> = (0..3).map(|k| diff(c[k], a[k])).collect();
    let w: Vec<Vec<f64>> = (0..3).map(|k| diff(q[k], a[k])).collect();
    let minor = |i: usize, j: usize| sum(&product(&v[i], &w[j]), &negate(&product(&v[j], &w[i])));
    let t0 = product(&u[0], &minor(1, 2));
    let t1 = product(&u[1], &minor(2, 0));
    let t2 = product(&u[2], &minor(0, 1));
    sign(&sum(&sum(&t0, &t1), &t2))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn exact_on_coplanar_points_with_rounding_traps() {
        // Points on the plane x + y + z = 1 built from binary fractions: the
        // determinant is exactly 0, and the filter alone cannot tell.
        let a = [0.5, 0.25, 0.25];
        let b = [0.125, 0.625, 0.25];
        let c = [0.25, 0.25, 0.5];
        let q = [0.375, 0.375, 0.25];
        assert_eq!(orient_exact(a, b, c, q), 0);
        assert_eq!(orient(a, b, c, q), 0);
        // Nudge q by one unit in the last place along the normal (1,1,1):
        // the sign follows the side, which plain evaluation misjudges for
        // large offsets of the frame.
        let off = 1e6;
        let sh = |p: Vec3| [p[0] + off, p[1] + off, p[2] - 2.0 * off];
        let up = [q[0], q[1], f64::from_bits(q[2].to_bits() + 1)];
        let n = crate::mesh::cross(crate::mesh::sub(b, a), crate::mesh::sub(c, a));
        let expect = if n[2] > 0.0 { 1 } else { -1 };
        assert_eq!(orient(a, b, c, up), expect);
        assert_eq!(orient(sh(a), sh(b), sh(c), sh(q)), 0);
    }

    #[test]
    fn agrees_with_plain_evaluation_when_well_separated() {
        let a = [0.0, 0.0, 0.0];
        let b = [1.0, 0.0, 0.0];
        let c = [0.0, 1.0, 0.0];
        assert_eq!(orient(a, b, c, [0.2, 0.3, 1.0]), 1);
        assert_eq!(orient(a, b, c, [0.2, 0.3, -1e-300]), -1);
        assert_eq!(orient_exact(a, b, c, [0.2, 0.3, 1.0]), 1);
        assert_eq!(orient_exact(a, c, b, [0.2, 0.3, 1.0]), -1);
    }
}
