//! The Milnor-Lobachevsky function `L(x) = -int_0^x ln|2 sin t| dt`.
//!
//! In: any finite `x`. Out: `L(x)`, odd and pi-periodic, with maximum
//! `L(pi/6)`. It is half the Clausen function, `L(x) = Cl_2(2x) / 2`, and is
//! evaluated here by reducing `theta = 2x` to `[-pi, pi]` and summing the
//! expansion (J. Milnor, "Hyperbolic geometry: the first 150 years", Bull.
//! Amer. Math. Soc. 6 (1982) 9-24)
//!
//! `Cl_2(theta) = theta - theta ln|theta| + sum_{n>=1} 2 zeta(2n) / (2n (2n+1)) * theta (theta / 2pi)^{2n}`,
//!
//! whose terms shrink at least by a factor 4 per step on `[-pi, pi]`. The
//! function enters the energy of ideal hyperbolic polyhedra and of discrete
//! conformal maps (Bobenko, Pinkall, Springborn, "Discrete conformal maps and
//! ideal hyperbolic polyhedra", Geom. Topol. 19 (2015) 2155-2215): the
//! volume of an ideal tetrahedron with dihedral angles `a, b, c` is
//! `L(a) + L(b) + L(c)`.

use std::f64::consts::PI;
use std::sync::OnceLock;

/// Number of series terms: at `|theta| = pi` the last term is below
/// `4^-24 * 2 zeta(48) / (48 * 49) < 1e-17`.
const N_TERMS: usize = 24;

/// Coefficients `2 zeta(2n) / (2n (2n+1))` for `n = 1..=N_TERMS`.
fn coefficients() -> &'static [f64; N_TERMS] {
    static COEFFS: OnceLock<[f64; N_TERMS]> = OnceLock::new();
    COEFFS.get_or_init(|| {
        let mut c = [0.0; N_TERMS];
        for (i, ci) in c.iter_mut().enumerate() {
            let n = (i + 1) as i32;
            let zeta = match n {
                1 => PI * PI / 6.0,
                2 => PI.powi(4) / 90.0,
                _ => {
                    // zeta(2n) for n >= 3: 1 + sum_{k>=2} k^-2n, summed from
                    // the small end; k up to 4000 leaves a tail below 1e-21.
                    let mut s = 0.0;
                    for k in (2..4000).rev() {
                        s += (k as f64).powi(-2 * n);
                    }
                    1.0 + s
                }
            };
            let m = 2.0 * n as f64;
            *ci = 2.0 * zeta / (m * (m + 1.0));
        }
        c
    })
}

/// Clausen function `Cl_2(theta) = sum_k sin(k theta) / k^2`.
pub fn clausen2(theta: f64) -> f64 {
    if !theta.is_finite() {
        return f64::NAN;
    }
    // Reduce to [-pi, pi] (Cl_2 is 2pi-periodic and odd).
    let mut t = theta - 2.0 * PI * (theta / (2.0 * PI)).round();
    if t > PI {
        t -= 2.0 * PI;
    } else if t < -PI {
        t += 2.0 * PI;
    }
    if t == 0.0 {
        return 0.0;
    }
    let x = t / (2.0 * PI);
    let x2 = x * x;
    let c = coefficients();
    // Horner in x^2 for sum_n c_n x^{2n}.
    let mut s = 0.0;
    for &cn in c.iter().rev() {
        s = (s + cn) * x2;
    }
    t - t * t.abs().ln() + t * s
}

/// Milnor-Lobachevsky function `L(x) = -int_0^x ln|2 sin t| dt = Cl_2(2x)/2`.
#[inline]
pub fn lobachevsky(x: f64) -> f64 {
    0.5 * clausen2(2.0 * x)
}

#[cfg(test)]
mod tests {
    use super::*;

    // Catalan's constant G = 0.915965594177219015054603514932... (published
    // value; Milnor 1982 gives L(pi/4) = G/2).
    const CATALAN: f64 = 0.915_965_594_177_219;

    #[test]
    fn catalan_at_pi_over_4() {
        // Milnor, Bull. AMS 6 (1982): L(pi/4) = G/2.
        assert!((lobachevsky(PI / 4.0) - CATALAN / 2.0).abs() < 1e-12);
    }

    #[test]
    fn regular_ideal_tetrahedron() {
        // Thurston (1979 notes, ch. 7) and Milnor (1982): the regular ideal
        // tetrahedron has volume 3 L(pi/3) = 1.01494160640965362502...
        let v = 3.0 * lobachevsky(PI / 3.0);
        assert!((v - 1.014_941_606_409_653_6).abs() < 1e-12, "{v}");
        assert!((lobachevsky(PI / 3.0) - 0.338_313_868_803_217_9).abs() < 1e-12);
    }

    #[test]
    fn maximum_at_pi_over_6() {
        // Milnor (1982): L is maximal at pi/6, L(pi/6) = 3/2 L(pi/3)
        // = 0.50747080320482681...
        let m = lobachevsky(PI / 6.0);
        assert!((m - 0.507_470_803_204_826_8).abs() < 1e-12, "{m}");
        assert!((m - 1.5 * lobachevsky(PI / 3.0)).abs() < 1e-14);
        for k in 1..200 {
            let x = k as f64 * PI / 200.0;
            assert!(lobachevsky(x) <= m + 1e-15);
        }
    }

    #[test]
    fn odd_periodic_and_duplication() {
        // Milnor (1982): L(-x) = -L(x), L(x + pi) = L(x),
        // L(2x) = 2 L(x) + 2 L(x + pi/2).
        let mut worst: f64 = 0.0;
        for k in -50..=50 {
            let x = 0.0731 * k as f64 + 0.01;
            worst = worst.max((lobachevsky(-x) + lobachevsky(x)).abs());
            worst = worst.max((lobachevsky(x + PI) - lobachevsky(x)).abs());
            let d = lobachevsky(2.0 * x) - 2.0 * lobachevsky(x) - 2.0 * lobachevsky(x + PI / 2.0);
            worst = worst.max(d.abs());
        }
        assert!(worst < 1e-12, "{worst}");
    }

    #[test]
    fn derivative_is_minus_log_two_sine() {
        // The definition: L'(x) = -ln|2 sin x|, checked by central differences.
        for k in 1..40 {
            let x = k as f64 * PI / 41.0;
            let h = 1e-5;
            let fd = (lobachevsky(x + h) - lobachevsky(x - h)) / (2.0 * h);
            let exact = -(2.0 * x.sin()).abs().ln();
            assert!((fd - exact).abs() < 1e-8, "x={x}: {fd} vs {exact}");
        }
    }
}
