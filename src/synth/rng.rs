//! A small deterministic random number generator of our own, so that the
//! synthetic data never change with the version of an outside crate.
//!
//! In: a 64-bit seed (and, for sub-streams, a label). Out: uniform `u64`,
//! uniform `f64` in `[0, 1)`, standard normal deviates, unit vectors and
//! rotations. Invariants: the same seed gives the same sequence on every
//! platform with IEEE-754 doubles; nothing depends on threads or time.
//!
//! Methods: the state is seeded with SplitMix64 (Steele, Lea, Flood, "Fast
//! splittable pseudorandom number generators", OOPSLA 2014) and advanced
//! with xoshiro256** (Blackman, Vigna, "Scrambled linear pseudorandom number
//! generators", ACM Trans. Math. Softw. 47(4), 2021). Normal deviates come
//! from the Box-Muller transform (Box, Muller, "A note on the generation of
//! random normal deviates", Ann. Math. Stat. 29, 1958, 610-611). Uniform
//! rotations follow Shoemake ("Uniform random rotations", Graphics Gems III,
//! 1992): a uniformly distributed unit quaternion.

use crate::mesh::{norm, scale, Vec3};

/// One step of SplitMix64 on `state`; returns the output.
#[inline]
pub fn splitmix64(state: &mut u64) -> u64 {
    *state = state.wrapping_add(0x9E37_79B9_7F4A_7C15);
    let mut z = *state;
    z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
    z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
    z ^ (z >> 31)
}

/// Mix a seed with a label into a new seed (for independent sub-streams,
/// e.g. one per subject and hemisphere).
pub fn derive_seed(seed: u64, label: &str) -> u64 {
    let mut s = seed ^ 0x6A09_E667_F3BC_C908;
    let mut h = splitmix64(&mut s);
    for b in label.bytes() {
        s ^= u64::from(b).wrapping_mul(0x100_0000_01B3);
        h ^= splitmix64(&mut s);
    }
    h
}

/// Uniform in `[0, 1)` from the top 53 of 64 random bits.
#[inline]
pub fn unit_from_bits(bits: u64) -> f64 {
    (bits >> 11) as f64 * (1.0 / (1u64 << 53) as f64)
}

/// Plain SplitMix64 stream (Steele, Lea, Flood 2014): each output is one
/// [`splitmix64`] step. Used for seeded random Moebius maps and test data
/// (`crate::moebius::SeededRng` is this type); its stream differs from
/// [`Rng`] and is kept as it is so that seeded results stay unchanged.
#[derive(Debug, Clone)]
pub struct SplitMix64 {
    state: u64,
}

impl SplitMix64 {
    /// A generator started from `seed`.
    pub fn new(seed: u64) -> Self {
        SplitMix64 { state: seed }
    }

    /// The next 64 random bits.
    #[inline]
    pub fn next_u64(&mut self) -> u64 {
        splitmix64(&mut self.state)
    }

    /// Uniform in `[0, 1)` with 53 random bits.
    #[inline]
    pub fn uniform(&mut self) -> f64 {
        unit_from_bits(self.next_u64())
    }

    /// Standard normal (Box-Muller, cosine branch only; no spare kept).
    pub fn normal(&mut self) -> f64 {
        let u1 = 1.0 - self.uniform(); // in (0, 1]
        let u2 = self.uniform();
        (-2.0 * u1.ln()).sqrt() * (std::f64::consts::TAU * u2).cos()
    }

    /// Uniformly distributed unit vector (normalised Gaussian vector).
    pub fn unit_vector(&mut self) -> Vec3 {
        loop {
            let v = [self.normal(), self.normal(), self.normal()];
            let n = norm(v);
            if n > 1e-6 {
                return scale(v, 1.0 / n);
            }
        }
    }
}

/// xoshiro256** generator with a Box-Muller spare.
#[derive(Debug, Clone)]
pub struct Rng {
    s: [u64; 4],
    spare: Option<f64>,
}

impl Rng {
    /// A generator whose state is filled from `seed` by SplitMix64.
    pub fn new(seed: u64) -> Self {
        let mut sm = seed;
        let s = [
            splitmix64(&mut sm),
            splitmix64(&mut sm),
            splitmix64(&mut sm),
            splitmix64(&mut sm),
        ];
        Rng { s, spare: None }
    }

    /// A generator for the sub-stream `label` of `seed`.
    pub fn stream(seed: u64, label: &str) -> Self {
        Rng::new(derive_seed(seed, label))
    }

    /// Next 64 random bits.
    #[inline]
    pub fn next_u64(&mut self) -> u64 {
        let s = &mut self.s;
        let result = s[1].wrapping_mul(5).rotate_left(7).wrapping_mul(9);
        let t = s[1] << 17;
        s[2] ^= s[0];
        s[3] ^= s[1];
        s[1] ^= s[2];
        s[0] ^= s[3];
        s[2] ^= t;
        s[3] = s[3].rotate_left(45);
        result
    }

    /// Uniform in `[0, 1)` with 53 random bits.
    #[inline]
    pub fn uniform(&mut self) -> f64 {
        unit_from_bits(self.next_u64())
    }

    /// Uniform in `[lo, hi)`.
    #[inline]
    pub fn range(&mut self, lo: f64, hi: f64) -> f64 {
        lo + (hi - lo) * self.uniform()
    }

    /// Uniform integer in `0..n` (`n > 0`; returns 0 for `n == 0`), by
    /// Lemire's multiply-shift (bias below 2^-64 n, irrelevant here).
    #[inline]
    pub fn below(&mut self, n: usize) -> usize {
        ((u128::from(self.next_u64()) * n as u128) >> 64) as usize
    }

    /// Standard normal deviate (Box-Muller, both values used).
    pub fn normal(&mut self) -> f64 {
        if let Some(z) = self.spare.take() {
            return z;
        }
        // 1 - u lies in (0, 1], so the logarithm is finite.
        let u1 = 1.0 - self.uniform();
        let u2 = self.uniform();
        let r = (-2.0 * u1.ln()).sqrt();
        let a = std::f64::consts::TAU * u2;
        self.spare = Some(r * a.sin());
        r * a.cos()
    }

    /// Uniformly distributed unit vector (normalised Gaussian triple).
    pub fn unit_vector(&mut self) -> Vec3 {
        loop {
            let v = [self.normal(), self.normal(), self.normal()];
            let n = (v[0] * v[0] + v[1] * v[1] + v[2] * v[2]).sqrt();
            if n > 1e-9 {
                return [v[0] / n, v[1] / n, v[2] / n];
            }
        }
    }

    /// Uniformly distributed rotation as a row-major 3x3 matrix (Shoemake 1992).
    pub fn rotation(&mut self) -> [[f64; 3]; 3] {
        let (u1, u2, u3) = (self.uniform(), self.uniform(), self.uniform());
        let tau = std::f64::consts::TAU;
        let (a, b) = ((1.0 - u1).sqrt(), u1.sqrt());
        let q = [
            a * (tau * u2).sin(),
            a * (tau * u2).cos(),
            b * (tau * u3).sin(),
            b * (tau * u3).cos(),
        ];
        quaternion_matrix(q)
    }

    /// Shuffle `items` in place (Fisher-Yates).
    pub fn shuffle<T>(&mut self, items: &mut [T]) {
        for i in (1..items.len()).rev() {
            let j = self.below(i + 1);
            items.swap(i, j);
        }
    }
}

/// Rotation matrix (row-major) of the unit quaternion `[x, y, z, w]`.
pub fn quaternion_matrix(q: [f64; 4]) -> [[f64; 3]; 3] {
    let [x, y, z, w] = q;
    [
        [
            1.0 - 2.0 * (y * y + z * z),
            2.0 * (x * y - z * w),
            2.0 * (x * z + y * w),
        ],
        [
            2.0 * (x * y + z * w),
            1.0 - 2.0 * (x * x + z * z),
            2.0 * (y * z - x * w),
        ],
        [
            2.0 * (x * z - y * w),
            2.0 * (y * z + x * w),
            1.0 - 2.0 * (x * x + y * y),
        ],
    ]
}

/// `m v` for a row-major 3x3 matrix.
#[inline]
pub fn mat_vec(m: &[[f64; 3]; 3], v: Vec3) -> Vec3 {
    [
        m[0][0] * v[0] + m[0][1] * v[1] + m[0][2] * v[2],
        m[1][0] * v[0] + m[1][1] * v[1] + m[1][2] * v[2],
        m[2][0] * v[0] + m[2][1] * v[1] + m[2][2] * v[2],
    ]
}

/// Rotation by `angle` (radians) about the unit `axis` (Rodrigues' formula).
pub fn axis_angle(axis: Vec3, angle: f64) -> [[f64; 3]; 3] {
    let h = 0.5 * angle;
    let s = h.sin();
    quaternion_matrix([axis[0] * s, axis[1] * s, axis[2] * s, h.cos()])
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn splitmix_reference_values() {
        // First outputs of SplitMix64 from state 0, as in the reference C code
        // by Vigna accompanying Steele, Lea, Flood (2014) (values from memory).
        let mut s = 0u64;
        assert_eq!(splitmix64(&mut s), 0xE220_A839_7B1D_CDAF);
        assert_eq!(splitmix64(&mut s), 0x6E78_9E6A_A1B9_65F4);
        assert_eq!(splitmix64(&mut s), 0x06C4_5D18_8009_454F);
    }

    #[test]
    fn splitmix_stream_matches_step_function() {
        // SplitMix64 outputs are the reference values above (Vigna's C code
        // for Steele, Lea, Flood 2014, from memory).
        let mut r = SplitMix64::new(0);
        assert_eq!(r.next_u64(), 0xE220_A839_7B1D_CDAF);
        assert_eq!(r.next_u64(), 0x6E78_9E6A_A1B9_65F4);
        for _ in 0..100 {
            let v = r.unit_vector();
            assert!((norm(v) - 1.0).abs() < 1e-12);
        }
    }

    #[test]
    fn normal_moments_and_uniform_range() {
        // A standard normal has mean 0, variance 1, kurtosis 3; with 200k
        // draws the standard errors are about 0.0022, 0.0032 and 0.011.
        let mut r = Rng::new(7);
        let n = 200_000;
        let (mut m1, mut m2, mut m4) = (0.0, 0.0, 0.0);
        for _ in 0..n {
            let z = r.normal();
            m1 += z;
            m2 += z * z;
            m4 += z * z * z * z;
        }
        let (m1, m2, m4) = (m1 / n as f64, m2 / n as f64, m4 / n as f64);
        assert!(m1.abs() < 0.012, "mean {m1}");
        assert!((m2 - 1.0).abs() < 0.02, "variance {m2}");
        assert!((m4 - 3.0).abs() < 0.08, "fourth moment {m4}");
        let mut lo = 1.0f64;
        let mut hi = 0.0f64;
        let mut below_quarter = 0usize;
        for _ in 0..n {
            let u = r.uniform();
            lo = lo.min(u);
            hi = hi.max(u);
            below_quarter += usize::from(u < 0.25);
        }
        assert!((0.0..1e-3).contains(&lo) && hi < 1.0 && hi > 0.999);
        let frac = below_quarter as f64 / n as f64;
        assert!((frac - 0.25).abs() < 0.005, "{frac}");
    }

    #[test]
    fn streams_differ_and_repeat() {
        let a: Vec<u64> = (0..4).map(|_| Rng::stream(1, "a").next_u64()).collect();
        assert!(a.iter().all(|&x| x == a[0]));
        assert_ne!(
            Rng::stream(1, "a").next_u64(),
            Rng::stream(1, "b").next_u64()
        );
        assert_ne!(
            Rng::stream(1, "a").next_u64(),
            Rng::stream(2, "a").next_u64()
        );
    }

    #[test]
    fn rotations_are_orthonormal() {
        let mut r = Rng::new(3);
        for _ in 0..100 {
            let m = r.rotation();
            for i in 0..3 {
                for j in 0..3 {
                    let d: f64 = (0..3).map(|k| m[i][k] * m[j][k]).sum();
                    let want = if i == j { 1.0 } else { 0.0 };
                    assert!((d - want).abs() < 1e-12);
                }
            }
            // Determinant +1 (a rotation, not a reflection).
            let det = m[0][0] * (m[1][1] * m[2][2] - m[1][2] * m[2][1])
                - m[0][1] * (m[1][0] * m[2][2] - m[1][2] * m[2][0])
                + m[0][2] * (m[1][0] * m[2][1] - m[1][1] * m[2][0]);
            assert!((det - 1.0).abs() < 1e-12);
        }
    }
}
