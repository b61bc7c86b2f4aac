//! Benjamini-Hochberg adjusted p-values ("q-values"): Benjamini and
//! Hochberg 1995, "Controlling the false discovery rate: a practical and
//! powerful approach to multiple testing", JRSS B 57, 289-300.
//!
//! In: p-values (NaN = not tested). Out: q-values in the same order:
//! with the m finite p sorted ascending, q_(i) = min_{j >= i} m p_(j) / j,
//! capped at 1; NaN stays NaN and does not count towards m.
//! What stays true: q >= p, q is monotone in p, and rejecting q <= alpha
//! is the BH step-up procedure at level alpha.

/// BH q-values of `p` (see the module documentation).
pub fn bh_q(p: &[f64]) -> Vec<f64> {
    let mut order: Vec<usize> = (0..p.len()).filter(|&i| p[i].is_finite()).collect();
    // Stable sort with the index as tie-break: identical output every run.
    order.sort_by(|&a, &b| p[a].total_cmp(&p[b]).then(a.cmp(&b)));
    let m = order.len() as f64;
    let mut q = vec![f64::NAN; p.len()];
    let mut running = 1.0_f64;
    for (rank, &i) in order.iter().enumerate().rev() {
        let v = (p[i] * m / (rank as f64 + 1.0)).min(1.0);
        running = running.min(v);
        q[i] = running;
    }
    q
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn worked_example() {
        // Hand computation: m = 4, sorted p = .01,.02,.03,.5 ->
        // m p / i = .04,.04,.04,.5.
        let q = bh_q(&[0.5, 0.01, f64::NAN, 0.03, 0.02]);
        let want = [0.5, 0.04, f64::NAN, 0.04, 0.04];
        for (a, b) in q.iter().zip(want) {
            assert!(a.is_nan() && b.is_nan() || (a - b).abs() < 1e-15, "{a} {b}");
        }
    }
}
