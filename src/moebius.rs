//! Moebius transformations of the unit sphere.
//!
//! In: points on the unit sphere (`[f64; 3]`, Euclidean coordinates), or
//! complex stereographic coordinates. Out: their images under a Moebius
//! transformation, and the transformation itself as a 4x4 Lorentz matrix or
//! as a 2x2 complex matrix of determinant 1.
//!
//! # Conventions
//!
//! * **Stereographic coordinate.** Unit sphere, projection from the north pole
//!   `N = (0, 0, 1)` onto the equatorial plane:
//!   `z = (x + i y) / (1 - x3)`, inverse
//!   `x + i y = 2 z / (1 + |z|^2)`, `x3 = (|z|^2 - 1) / (|z|^2 + 1)`.
//!   The south pole is `z = 0`, the north pole is `z = infinity`
//!   (Needham, "Visual complex analysis", Oxford University Press 1997, ch. 3).
//! * **Homogeneous coordinate.** A point is also a complex line `[a; b]` in
//!   `C^2` with `z = a / b`; the north pole is `[1; 0]`. We never divide by
//!   `b`: [`homogeneous`] returns a unit-length representative taken from the
//!   hemisphere chart that is far from its pole, so points at or near the
//!   north pole are handled exactly like any other.
//! * **Light cone.** The point `x` is the future light-like vector `(x, 1)`
//!   of Minkowski space `R^{3,1}` with `<X, Y> = X1 Y1 + X2 Y2 + X3 Y3 - T S`,
//!   coordinates ordered `(X1, X2, X3, T)`. Up to a positive factor,
//!   `(X1, X2, X3, T) = (2 Re(a conj b), 2 Im(a conj b), |a|^2 - |b|^2, |a|^2 + |b|^2)`,
//!   i.e. the Hermitian matrix `H = v v^* = 1/2 [[T + X3, X1 + i X2], [X1 - i X2, T - X3]]`.
//! * **Representation.** A [`Moebius`] map is stored as a matrix `L` of the
//!   orthochronous Lorentz group `SO+(3,1)`, acting on column vectors:
//!   `x -> y / |y|` where `(y, t) = L (x, 1)`. There is no point at infinity
//!   in this picture. The matching `A` in `SL(2, C)` acting by
//!   `z -> (A11 z + A12) / (A21 z + A22)` satisfies `H(L X) = A H(X) A^*`
//!   and is defined up to sign ([`Moebius::to_sl2c`], [`Moebius::from_sl2c`]).
//! * **Rotation and boost.** `SO(3)` sits in `SO+(3,1)` as the maps fixing
//!   `(0, 0, 0, 1)`. The boost of rapidity `s >= 0` towards the unit vector
//!   `n` is `B = [[I + (cosh s - 1) n n^T, sinh s n], [sinh s n^T, cosh s]]`;
//!   it pushes points of the sphere towards `n`. Every map factors uniquely
//!   as a rotation times a boost ([`Moebius::rotation_boost`],
//!   [`Moebius::split_boost_rotation`]).
//!
//! Invariants: the stored matrix is in `SO+(3,1)` up to rounding; images of
//! unit vectors are unit vectors to the last bit of `f64`.

use crate::error::{Error, Result};
use crate::mesh::{cross, dot, norm, scale, Vec3};
pub use nalgebra::Complex;

/// A complex number of `f64`.
pub type C64 = Complex<f64>;

/// A 2x2 complex matrix, row-major: `[[A11, A12], [A21, A22]]`.
pub type Mat2c = [[C64; 2]; 2];

/// A 4x4 real matrix, row-major, acting on column vectors `(X1, X2, X3, T)`.
pub type Mat4 = [[f64; 4]; 4];

/// A 3x3 real matrix, row-major.
pub type Mat3 = [[f64; 3]; 3];

/// A Moebius transformation of the sphere, stored as a Lorentz matrix.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Moebius {
    l: Mat4,
}

impl Default for Moebius {
    fn default() -> Self {
        Self::identity()
    }
}

impl Moebius {
    /// The identity map.
    pub fn identity() -> Self {
        let mut l = [[0.0; 4]; 4];
        for (k, row) in l.iter_mut().enumerate() {
            row[k] = 1.0;
        }
        Moebius { l }
    }

    /// The Lorentz matrix (row-major, acting on `(X1, X2, X3, T)`).
    pub fn lorentz(&self) -> &Mat4 {
        &self.l
    }

    /// A map from a Lorentz matrix. Checks `L^T J L = J` (with
    /// `J = diag(1, 1, 1, -1)`) to a relative tolerance of `1e-8`,
    /// `det L > 0` and `L44 > 0` (orthochronous, proper).
    pub fn from_lorentz(l: Mat4) -> Result<Self> {
        if l.iter().flatten().any(|v| !v.is_finite()) {
            return Err(Error::Invalid(
                "Lorentz matrix has a non-finite entry".into(),
            ));
        }
        let j = [1.0, 1.0, 1.0, -1.0];
        let scale_ = l.iter().flatten().fold(0.0f64, |m, v| m.max(v.abs()));
        for a in 0..4 {
            for b in 0..4 {
                let s: f64 = (0..4).map(|k| l[k][a] * j[k] * l[k][b]).sum();
                let want = if a == b { j[a] } else { 0.0 };
                if (s - want).abs() > 1e-8 * scale_ * scale_ {
                    return Err(Error::Invalid(format!(
                        "matrix is not a Lorentz matrix: (L^T J L)[{a}][{b}] = {s}, expected {want}"
                    )));
                }
            }
        }
        if l[3][3] <= 0.0 {
            return Err(Error::Invalid(
                "Lorentz matrix reverses the time direction (L[3][3] <= 0)".into(),
            ));
        }
        if det4(&l) <= 0.0 {
            return Err(Error::Invalid(
                "Lorentz matrix has negative determinant (a reflection)".into(),
            ));
        }
        Ok(Moebius { l })
    }

    /// The rotation `r` (a proper orthogonal 3x3 matrix, not checked) as a
    /// Moebius map.
    pub fn rotation(r: &Mat3) -> Self {
        let mut l = [[0.0; 4]; 4];
        for a in 0..3 {
            for b in 0..3 {
                l[a][b] = r[a][b];
            }
        }
        l[3][3] = 1.0;
        Moebius { l }
    }

    /// The rotation by angle `|omega|` (radians) about the axis `omega`
    /// (right-hand rule; Rodrigues' formula).
    pub fn rotation_vector(omega: Vec3) -> Self {
        Self::rotation(&rotation_matrix(omega))
    }

    /// The boost of rapidity `|beta|` towards `beta / |beta|` (identity for
    /// `beta = 0`). Points of the sphere are pushed towards `beta`.
    pub fn boost(beta: Vec3) -> Self {
        let s = norm(beta);
        if s == 0.0 {
            return Self::identity();
        }
        let n = scale(beta, 1.0 / s);
        let (sh, ch) = (s.sinh(), s.cosh());
        let mut l = [[0.0; 4]; 4];
        for a in 0..3 {
            for b in 0..3 {
                l[a][b] = if a == b { 1.0 } else { 0.0 } + (ch - 1.0) * n[a] * n[b];
            }
            l[a][3] = sh * n[a];
            l[3][a] = sh * n[a];
        }
        l[3][3] = ch;
        Moebius { l }
    }

    /// `R(omega) B(beta)`: the boost [`Moebius::boost`]`(beta)` followed by
    /// the rotation [`Moebius::rotation_vector`]`(omega)`. The derivative at
    /// `(0, 0)` of `(omega, beta) -> R(omega) B(beta) (y)` for a unit `y` is
    /// `d omega x y + (I - y y^T) d beta`; the landmark fit uses it as its
    /// local chart.
    pub fn rotation_boost(omega: Vec3, beta: Vec3) -> Self {
        Self::rotation_vector(omega).compose(&Self::boost(beta))
    }

    /// `self ∘ other`: first `other`, then `self`.
    pub fn compose(&self, other: &Moebius) -> Moebius {
        let mut l = [[0.0; 4]; 4];
        for (a, row) in l.iter_mut().enumerate() {
            for (b, v) in row.iter_mut().enumerate() {
                *v = (0..4).map(|k| self.l[a][k] * other.l[k][b]).sum();
            }
        }
        Moebius { l }
    }

    /// The inverse map, `J L^T J`.
    pub fn inverse(&self) -> Moebius {
        let j = [1.0, 1.0, 1.0, -1.0];
        let mut l = [[0.0; 4]; 4];
        for (a, row) in l.iter_mut().enumerate() {
            for (b, v) in row.iter_mut().enumerate() {
                *v = j[a] * self.l[b][a] * j[b];
            }
        }
        Moebius { l }
    }

    /// Image of the unit vector `x` (not checked; pass points of the unit
    /// sphere): `y / |y|` where `(y, t) = L (x, 1)`.
    #[inline]
    pub fn apply(&self, x: Vec3) -> Vec3 {
        let l = &self.l;
        let y = [
            l[0][0] * x[0] + l[0][1] * x[1] + l[0][2] * x[2] + l[0][3],
            l[1][0] * x[0] + l[1][1] * x[1] + l[1][2] * x[2] + l[1][3],
            l[2][0] * x[0] + l[2][1] * x[1] + l[2][2] * x[2] + l[2][3],
        ];
        let r = norm(y);
        if r > 0.0 {
            scale(y, 1.0 / r)
        } else {
            // Unreachable for a Lorentz matrix and a unit x (|y| = t > 0);
            // kept total for inputs off the sphere.
            x
        }
    }

    /// Images of many unit vectors.
    pub fn apply_all(&self, xs: &[Vec3]) -> Vec<Vec3> {
        xs.iter().map(|&x| self.apply(x)).collect()
    }

    /// Rapidity of the boost part: the hyperbolic distance by which the map
    /// moves the centre of the ball, `acosh L44`.
    pub fn rapidity(&self) -> f64 {
        self.l[3][3].max(1.0).acosh()
    }

    /// Factor `self = B(beta) R`, a boost after a rotation: `beta` is read
    /// off the image of the centre, `L (0, 0, 0, 1) = (sinh s n, cosh s)`.
    /// Returns `(beta, R)`.
    pub fn split_boost_rotation(&self) -> (Vec3, Mat3) {
        let p = [self.l[0][3], self.l[1][3], self.l[2][3]];
        let np = norm(p);
        let beta = if np > 0.0 {
            scale(p, np.asinh() / np)
        } else {
            [0.0; 3]
        };
        let r = Moebius::boost(beta).inverse().compose(self);
        let m: Mat3 = std::array::from_fn(|a| std::array::from_fn(|b| r.l[a][b]));
        (beta, m)
    }

    /// The map `z -> (A11 z + A12) / (A21 z + A22)` for any invertible
    /// complex `A` (it is scaled to determinant 1 first). Column `k` of `L`
    /// holds the coordinates of `A E_k A^*`, where `E_k` is the Hermitian
    /// matrix of the `k`-th basis vector (see the module doc).
    pub fn from_sl2c(a: &Mat2c) -> Result<Self> {
        if a.iter()
            .flatten()
            .any(|c| !(c.re.is_finite() && c.im.is_finite()))
        {
            return Err(Error::Invalid(
                "complex matrix has a non-finite entry".into(),
            ));
        }
        let det = a[0][0] * a[1][1] - a[0][1] * a[1][0];
        let size = a.iter().flatten().fold(0.0f64, |m, c| m.max(c.norm()));
        let invertible = det.norm() > 1e-14 * size * size;
        if !invertible {
            return Err(Error::Invalid(
                "complex matrix is singular; a Moebius transformation needs a non-zero determinant"
                    .into(),
            ));
        }
        let s = det.sqrt();
        let a = [[a[0][0] / s, a[0][1] / s], [a[1][0] / s, a[1][1] / s]];
        let half = C64::new(0.5, 0.0);
        let zero = C64::new(0.0, 0.0);
        let i_half = C64::new(0.0, 0.5);
        let basis: [Mat2c; 4] = [
            [[zero, half], [half, zero]],
            [[zero, i_half], [-i_half, zero]],
            [[half, zero], [zero, -half]],
            [[half, zero], [zero, half]],
        ];
        let mut l = [[0.0; 4]; 4];
        for (k, e) in basis.iter().enumerate() {
            let h = mul2(&mul2(&a, e), &adjoint2(&a));
            let x = hermitian_coords(&h);
            for r in 0..4 {
                l[r][k] = x[r];
            }
        }
        Ok(Moebius { l })
    }

    /// The matrix `A` in `SL(2, C)` of this map, acting on the stereographic
    /// coordinate as `z -> (A11 z + A12) / (A21 z + A22)`. `A` is defined up
    /// to sign; we return the sign that gives the entry of largest modulus a
    /// non-negative real part.
    ///
    /// Derivation: the columns `a1, a2` of `A` are the images of `[1; 0]`
    /// (north pole) and `[0; 1]` (south pole), so
    /// `a1 a1^* = H(L (0,0,1,1))`, `a2 a2^* = H(L (0,0,-1,1))` and, extending
    /// `H` complex-linearly, `a2 a1^* = H(L e1) + i H(L e2)`. We read `a1` off
    /// its rank-one matrix (up to a phase), get `a2 = (a2 a1^*) a1 / |a1|^2`,
    /// and remove the common phase by dividing by the square root of the
    /// determinant.
    pub fn to_sl2c(&self) -> Mat2c {
        let col = |k: usize| [self.l[0][k], self.l[1][k], self.l[2][k], self.l[3][k]];
        let (c0, c1, c2, c3) = (col(0), col(1), col(2), col(3));
        let north: [f64; 4] = std::array::from_fn(|r| c2[r] + c3[r]);
        let h1 = coords_hermitian(&north);
        let h_e1 = coords_hermitian(&c0);
        let h_e2 = coords_hermitian(&c1);
        let i = C64::new(0.0, 1.0);
        let k: Mat2c = [
            [h_e1[0][0] + i * h_e2[0][0], h_e1[0][1] + i * h_e2[0][1]],
            [h_e1[1][0] + i * h_e2[1][0], h_e1[1][1] + i * h_e2[1][1]],
        ];
        let a1 = if h1[0][0].re >= h1[1][1].re {
            let d = h1[0][0].re.max(f64::MIN_POSITIVE).sqrt();
            [h1[0][0] / d, h1[1][0] / d]
        } else {
            let d = h1[1][1].re.max(f64::MIN_POSITIVE).sqrt();
            [h1[0][1] / d, h1[1][1] / d]
        };
        let n1 = a1[0].norm_sqr() + a1[1].norm_sqr();
        let a2 = [
            (k[0][0] * a1[0] + k[0][1] * a1[1]) / n1,
            (k[1][0] * a1[0] + k[1][1] * a1[1]) / n1,
        ];
        let det = a1[0] * a2[1] - a2[0] * a1[1];
        let s = det.sqrt();
        let mut a = [[a1[0] / s, a2[0] / s], [a1[1] / s, a2[1] / s]];
        let big =
            a.iter().flatten().fold(
                C64::new(0.0, 0.0),
                |m, c| if c.norm() > m.norm() { *c } else { m },
            );
        if big.re < 0.0 {
            for c in a.iter_mut().flatten() {
                *c = -*c;
            }
        }
        a
    }

    /// The Moebius map taking the three distinct points `z[k]` of the unit
    /// sphere to the three distinct points `w[k]` (Needham 1997, ch. 3: a
    /// Moebius map is fixed by three point pairs). Built from cross-ratios in
    /// homogeneous coordinates: `M_z` sends `z1, z2, z3` to `0, 1, infinity`,
    /// `M_z(z) = (z - z1)(z2 - z3) / ((z - z3)(z2 - z1))`, written for
    /// homogeneous `p_k = [a_k; b_k]` with `[p, q] = a_p b_q - b_p a_q` as
    /// `M_z = [[[p2,p3] b1, -[p2,p3] a1], [[p2,p1] b3, -[p2,p1] a3]]`; the
    /// result is `M_w^{-1} M_z`. Points closer than `1e-12` (chordal) are
    /// rejected.
    pub fn from_three_points(z: [Vec3; 3], w: [Vec3; 3]) -> Result<Self> {
        for (what, pts) in [("source", &z), ("target", &w)] {
            for (a, b) in [(0, 1), (1, 2), (0, 2)] {
                let d = norm(crate::mesh::sub(pts[a], pts[b]));
                let distinct = d > 1e-12;
                if !distinct {
                    return Err(Error::Invalid(format!(
                        "{what} points {a} and {b} coincide (chordal distance {d:e}); three distinct points are needed"
                    )));
                }
            }
        }
        let mz = to_zero_one_infinity(&z);
        let mw = to_zero_one_infinity(&w);
        let det = mw[0][0] * mw[1][1] - mw[0][1] * mw[1][0];
        let mw_inv = [
            [mw[1][1] / det, -mw[0][1] / det],
            [-mw[1][0] / det, mw[0][0] / det],
        ];
        Moebius::from_sl2c(&mul2(&mw_inv, &mz))
    }

    /// A random Moebius map from `seed`: a uniformly random rotation
    /// (normalised Gaussian quaternion) after a boost towards a uniformly
    /// random direction with rapidity uniform in `[0, max_rapidity]`.
    /// The same seed gives the same map on every machine.
    pub fn random(seed: u64, max_rapidity: f64) -> Self {
        let mut rng = SeededRng::new(seed);
        let q = loop {
            let q = [rng.normal(), rng.normal(), rng.normal(), rng.normal()];
            let n = q.iter().map(|v| v * v).sum::<f64>().sqrt();
            if n > 1e-6 {
                break [q[0] / n, q[1] / n, q[2] / n, q[3] / n];
            }
        };
        let dir = rng.unit_vector();
        let s = max_rapidity * rng.uniform();
        Moebius::rotation(&quaternion_matrix(q)).compose(&Moebius::boost(scale(dir, s)))
    }
}

/// Sends the three points to `0, 1, infinity` (see [`Moebius::from_three_points`]).
fn to_zero_one_infinity(p: &[Vec3; 3]) -> Mat2c {
    let h: [[C64; 2]; 3] = [homogeneous(p[0]), homogeneous(p[1]), homogeneous(p[2])];
    let br = |p: &[C64; 2], q: &[C64; 2]| p[0] * q[1] - p[1] * q[0];
    let d23 = br(&h[1], &h[2]);
    let d21 = br(&h[1], &h[0]);
    [
        [d23 * h[0][1], -d23 * h[0][0]],
        [d21 * h[2][1], -d21 * h[2][0]],
    ]
}

/// Stereographic coordinate `z = (x1 + i x2) / (1 - x3)` of a unit vector;
/// `None` at the north pole (within `1e-300`).
pub fn stereographic(x: Vec3) -> Option<C64> {
    let d = 1.0 - x[2];
    if d.abs() < 1e-300 {
        None
    } else {
        Some(C64::new(x[0] / d, x[1] / d))
    }
}

/// The unit vector with stereographic coordinate `z`.
pub fn inverse_stereographic(z: C64) -> Vec3 {
    let r2 = z.norm_sqr();
    let d = 1.0 + r2;
    [2.0 * z.re / d, 2.0 * z.im / d, (r2 - 1.0) / d]
}

/// A unit-length homogeneous coordinate `[a; b]` (`z = a / b`) of the unit
/// vector `x`: from the chart `[z; 1]` on the southern hemisphere and
/// `[1; 1/z]`, `1/z = (x1 - i x2) / (1 + x3)`, on the northern one.
pub fn homogeneous(x: Vec3) -> [C64; 2] {
    let v = if x[2] <= 0.0 {
        [C64::new(x[0], x[1]) / (1.0 - x[2]), C64::new(1.0, 0.0)]
    } else {
        [C64::new(1.0, 0.0), C64::new(x[0], -x[1]) / (1.0 + x[2])]
    };
    let n = (v[0].norm_sqr() + v[1].norm_sqr()).sqrt();
    [v[0] / n, v[1] / n]
}

/// The unit vector of the homogeneous coordinate `[a; b]` (not both zero):
/// `(2 Re(a conj b), 2 Im(a conj b), |a|^2 - |b|^2) / (|a|^2 + |b|^2)`.
pub fn from_homogeneous(v: [C64; 2]) -> Result<Vec3> {
    let t = v[0].norm_sqr() + v[1].norm_sqr();
    if !(t > 0.0 && t.is_finite()) {
        return Err(Error::Invalid(
            "homogeneous coordinate [0; 0] (or non-finite) names no point".into(),
        ));
    }
    let ab = v[0] * v[1].conj();
    Ok([
        2.0 * ab.re / t,
        2.0 * ab.im / t,
        (v[0].norm_sqr() - v[1].norm_sqr()) / t,
    ])
}

/// The cross-ratio `(z1 - z3)(z2 - z4) / ((z1 - z4)(z2 - z3))` of four
/// finite complex numbers (Needham 1997, ch. 3), invariant under Moebius maps.
pub fn cross_ratio(z: [C64; 4]) -> C64 {
    (z[0] - z[2]) * (z[1] - z[3]) / ((z[0] - z[3]) * (z[1] - z[2]))
}

/// Rotation matrix of the rotation vector `omega` (Rodrigues' formula).
pub fn rotation_matrix(omega: Vec3) -> Mat3 {
    let th = norm(omega);
    let (s, c1) = if th < 1e-8 {
        // Taylor: sin th / th, (1 - cos th) / th^2.
        (1.0 - th * th / 6.0, 0.5 - th * th / 24.0)
    } else {
        (th.sin() / th, (1.0 - th.cos()) / (th * th))
    };
    let [x, y, z] = omega;
    [
        [
            1.0 - c1 * (y * y + z * z),
            c1 * x * y - s * z,
            c1 * x * z + s * y,
        ],
        [
            c1 * x * y + s * z,
            1.0 - c1 * (x * x + z * z),
            c1 * y * z - s * x,
        ],
        [
            c1 * x * z - s * y,
            c1 * y * z + s * x,
            1.0 - c1 * (x * x + y * y),
        ],
    ]
}

/// Rotation matrix of the unit quaternion `(w, x, y, z)`.
pub fn quaternion_matrix(q: [f64; 4]) -> Mat3 {
    let [w, x, y, z] = q;
    [
        [
            1.0 - 2.0 * (y * y + z * z),
            2.0 * (x * y - w * z),
            2.0 * (x * z + w * y),
        ],
        [
            2.0 * (x * y + w * z),
            1.0 - 2.0 * (x * x + z * z),
            2.0 * (y * z - w * x),
        ],
        [
            2.0 * (x * z - w * y),
            2.0 * (y * z + w * x),
            1.0 - 2.0 * (x * x + y * y),
        ],
    ]
}

/// `r x`.
#[inline]
pub fn mat3_apply(r: &Mat3, x: Vec3) -> Vec3 {
    [dot(r[0], x), dot(r[1], x), dot(r[2], x)]
}

/// Angle between two non-zero vectors in radians, accurate for small and
/// large angles (`atan2(|a x b|, a . b)`).
#[inline]
pub fn angle(a: Vec3, b: Vec3) -> f64 {
    norm(cross(a, b)).atan2(dot(a, b))
}

/// The seeded generator for random Moebius maps and test data: plain
/// SplitMix64 (Steele, Lea, Flood, "Fast splittable pseudorandom number
/// generators", OOPSLA 2014), shared with the synthetic-data module.
pub use crate::synth::rng::SplitMix64 as SeededRng;

fn mul2(a: &Mat2c, b: &Mat2c) -> Mat2c {
    [
        [
            a[0][0] * b[0][0] + a[0][1] * b[1][0],
            a[0][0] * b[0][1] + a[0][1] * b[1][1],
        ],
        [
            a[1][0] * b[0][0] + a[1][1] * b[1][0],
            a[1][0] * b[0][1] + a[1][1] * b[1][1],
        ],
    ]
}

fn adjoint2(a: &Mat2c) -> Mat2c {
    [
        [a[0][0].conj(), a[1][0].conj()],
        [a[0][1].conj(), a[1][1].conj()],
    ]
}

/// Coordinates `(X1, X2, X3, T)` of a Hermitian matrix `H`:
/// `T = H11 + H22`, `X3 = H11 - H22`, `X1 + i X2 = 2 H12`.
fn hermitian_coords(h: &Mat2c) -> [f64; 4] {
    [
        2.0 * h[0][1].re,
        2.0 * h[0][1].im,
        h[0][0].re - h[1][1].re,
        h[0][0].re + h[1][1].re,
    ]
}

/// The Hermitian matrix of coordinates `x = (X1, X2, X3, T)`.
fn coords_hermitian(x: &[f64; 4]) -> Mat2c {
    [
        [
            C64::new(0.5 * (x[3] + x[2]), 0.0),
            C64::new(0.5 * x[0], 0.5 * x[1]),
        ],
        [
            C64::new(0.5 * x[0], -0.5 * x[1]),
            C64::new(0.5 * (x[3] - x[2]), 0.0),
        ],
    ]
}

fn det4(m: &Mat4) -> f64 {
    let n = nalgebra::Matrix4::from_fn(|r, c| m[r][c]);
    n.determinant()
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::mesh::sub;

    fn close(a: Vec3, b: Vec3) -> f64 {
        norm(sub(a, b))
    }

    fn lorentz_dist(a: &Moebius, b: &Moebius) -> f64 {
        let mut m = 0.0f64;
        for r in 0..4 {
            for c in 0..4 {
                m = m.max((a.l[r][c] - b.l[r][c]).abs());
            }
        }
        m
    }

    #[test]
    fn stereographic_round_trip_and_poles() {
        // z = (x + i y)/(1 - x3) and its inverse (Needham 1997, ch. 3).
        let mut rng = SeededRng::new(1);
        for _ in 0..100 {
            let x = rng.unit_vector();
            let z = stereographic(x).unwrap();
            assert!(close(inverse_stereographic(z), x) < 1e-14);
            assert!(close(from_homogeneous(homogeneous(x)).unwrap(), x) < 1e-15);
        }
        assert!(stereographic([0.0, 0.0, 1.0]).is_none());
        assert!(close(inverse_stereographic(C64::new(0.0, 0.0)), [0.0, 0.0, -1.0]) == 0.0);
        // The north pole in homogeneous coordinates is [1; 0].
        let h = homogeneous([0.0, 0.0, 1.0]);
        assert!((h[0].norm() - 1.0).abs() < 1e-15 && h[1].norm() < 1e-15);
        // z = 1 is the point (1, 0, 0).
        assert!(close(inverse_stereographic(C64::new(1.0, 0.0)), [1.0, 0.0, 0.0]) < 1e-15);
    }

    #[test]
    fn sl2c_acts_by_fractional_linear_maps() {
        // The Lorentz action must agree with z -> (a z + b)/(c z + d) on
        // stereographic coordinates (Needham 1997, ch. 3).
        let a: Mat2c = [
            [C64::new(1.3, -0.2), C64::new(0.4, 0.9)],
            [C64::new(-0.7, 0.1), C64::new(0.5, 0.6)],
        ];
        let m = Moebius::from_sl2c(&a).unwrap();
        let mut rng = SeededRng::new(2);
        for _ in 0..50 {
            let x = rng.unit_vector();
            let z = stereographic(x).unwrap();
            let w = (a[0][0] * z + a[0][1]) / (a[1][0] * z + a[1][1]);
            assert!(close(m.apply(x), inverse_stereographic(w)) < 1e-13);
        }
        // Infinity goes to a11 / a21.
        let w = a[0][0] / a[1][0];
        assert!(close(m.apply([0.0, 0.0, 1.0]), inverse_stereographic(w)) < 1e-14);
        // Back to SL(2, C): equal to a / sqrt(det a) up to sign.
        let back = m.to_sl2c();
        let s = (a[0][0] * a[1][1] - a[0][1] * a[1][0]).sqrt();
        let err_plus = (0..4)
            .map(|k| (back[k / 2][k % 2] - a[k / 2][k % 2] / s).norm())
            .fold(0.0, f64::max);
        let err_minus = (0..4)
            .map(|k| (back[k / 2][k % 2] + a[k / 2][k % 2] / s).norm())
            .fold(0.0, f64::max);
        assert!(err_plus.min(err_minus) < 1e-13, "{err_plus} {err_minus}");
    }

    #[test]
    fn lorentz_sl2c_round_trip_random_maps() {
        for seed in 0..40 {
            let m = Moebius::random(seed, 3.0);
            assert!(Moebius::from_lorentz(m.l).is_ok());
            let back = Moebius::from_sl2c(&m.to_sl2c()).unwrap();
            let tol = 1e-12 * m.l[3][3] * m.l[3][3];
            assert!(lorentz_dist(&m, &back) < tol, "seed {seed}");
        }
        // Pure rotations about z by pi, where a trace-based formula fails.
        let m = Moebius::rotation_vector([0.0, 0.0, std::f64::consts::PI]);
        let back = Moebius::from_sl2c(&m.to_sl2c()).unwrap();
        assert!(lorentz_dist(&m, &back) < 1e-14);
    }

    #[test]
    fn compose_inverse_and_split() {
        let a = Moebius::random(7, 2.0);
        let b = Moebius::random(8, 2.0);
        let x = [0.6, 0.0, 0.8];
        let ab = a.compose(&b);
        assert!(close(ab.apply(x), a.apply(b.apply(x))) < 1e-14);
        assert!(lorentz_dist(&a.compose(&a.inverse()), &Moebius::identity()) < 1e-12);
        let (beta, r) = a.split_boost_rotation();
        let re = Moebius::boost(beta).compose(&Moebius::rotation(&r));
        assert!(lorentz_dist(&re, &a) < 1e-12);
        // The boost moves points towards its direction: the south pole is
        // moved towards +x by a boost along +x.
        let y = Moebius::boost([1.0, 0.0, 0.0]).apply([0.0, 0.0, -1.0]);
        assert!(y[0] > 0.7 && (norm(y) - 1.0).abs() < 1e-15);
        // The pole itself is an ordinary point.
        let p = a.apply([0.0, 0.0, 1.0]);
        assert!((norm(p) - 1.0).abs() < 1e-15);
        assert!(close(a.inverse().apply(p), [0.0, 0.0, 1.0]) < 1e-13);
    }

    #[test]
    fn three_point_closed_form_matches_cross_ratios() {
        // A Moebius map is fixed by three point pairs and preserves the
        // cross-ratio (Needham 1997, ch. 3). Take a known random map, give
        // the closed form three of its point pairs, and check (a) it is the
        // same map everywhere, (b) cross-ratios of four points are kept.
        for seed in 0..20u64 {
            let m = Moebius::random(100 + seed, 2.5);
            let mut rng = SeededRng::new(seed);
            let z = [rng.unit_vector(), rng.unit_vector(), rng.unit_vector()];
            let w = [m.apply(z[0]), m.apply(z[1]), m.apply(z[2])];
            let f = Moebius::from_three_points(z, w).unwrap();
            for _ in 0..20 {
                let x = rng.unit_vector();
                assert!(close(f.apply(x), m.apply(x)) < 1e-9, "seed {seed}");
            }
            let x = rng.unit_vector();
            let before = cross_ratio([
                stereographic(z[0]).unwrap(),
                stereographic(z[1]).unwrap(),
                stereographic(z[2]).unwrap(),
                stereographic(x).unwrap(),
            ]);
            let after = cross_ratio([
                stereographic(w[0]).unwrap(),
                stereographic(w[1]).unwrap(),
                stereographic(w[2]).unwrap(),
                stereographic(f.apply(x)).unwrap(),
            ]);
            assert!(
                (before - after).norm() < 1e-9 * (1.0 + before.norm()),
                "seed {seed}"
            );
        }
        // Through the pole: 0, 1, infinity to 1, infinity, 0 is z -> 1/(1 - z)
        // (a rotation of order three).
        let pts = [
            inverse_stereographic(C64::new(0.0, 0.0)),
            inverse_stereographic(C64::new(1.0, 0.0)),
            [0.0, 0.0, 1.0],
        ];
        let f = Moebius::from_three_points(pts, [pts[1], pts[2], pts[0]]).unwrap();
        let z = C64::new(0.3, -0.4);
        let want = inverse_stereographic(C64::new(1.0, 0.0) / (C64::new(1.0, 0.0) - z));
        assert!(close(f.apply(inverse_stereographic(z)), want) < 1e-14);
        assert!(Moebius::from_three_points([pts[0], pts[0], pts[2]], pts).is_err());
    }

    #[test]
    fn from_lorentz_rejects_non_lorentz() {
        let mut l = Moebius::identity().l;
        l[0][0] = 2.0;
        assert!(Moebius::from_lorentz(l).is_err());
        let mut l = Moebius::identity().l;
        l[3][3] = -1.0;
        assert!(Moebius::from_lorentz(l).is_err());
        let mut l = Moebius::identity().l;
        l[0][0] = -1.0;
        assert!(Moebius::from_lorentz(l).is_err());
    }
}
