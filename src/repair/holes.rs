//! Filling boundary holes: a triangulation over the hole's own boundary
//! vertices found by dynamic programming, or a fan around one new centre
//! vertex for holes too large for the cubic-time search.
//!
//! In: a boundary loop `v_0 .. v_{n-1}` (the existing faces run along each
//! boundary edge `v_i -> v_{i+1}`, indices mod n), the positions, the normals
//! of the faces outside each boundary edge and the diagonals that already
//! exist elsewhere in the mesh. Out: new triangles that traverse every
//! boundary edge in the opposite direction (so the orientation stays
//! consistent) and, for the fan, one new vertex.
//!
//! The search is the O(n^3) dynamic programme over sub-polygons of Barequet
//! and Sharir ("Filling gaps in the boundary of a polyhedron", Computer Aided
//! Geometric Design 12, 1995) as formulated by Liepa ("Filling holes in
//! meshes", Eurographics Symposium on Geometry Processing, 2003):
//!
//! `W(i, k) = min over i < m < k of W(i, m) + W(m, k) + w(i, m, k)`, `W(i, i+1) = 0`,
//!
//! and the fill is `W(0, n-1)`, whose last edge `(v_{n-1}, v_0)` is the
//! closing boundary edge. Two weights are offered ([`HoleWeight`]): the plain
//! triangle area (minimum-area triangulation), and Liepa's pair
//! (largest dihedral angle, total area) compared lexicographically, where the
//! dihedral angle of two adjacent triangles is the angle between their
//! normals (0 when they are coplanar and consistently oriented). As in Liepa,
//! the angle across an inner edge `(i, m)` is taken against the triangle the
//! sub-solution for `(i, m)` chose, and across a boundary edge against the
//! existing face. A triangle whose diagonal already exists as a mesh edge is
//! never used (it would give that edge three faces); if no triangulation is
//! left, the caller falls back to the fan.

use crate::mesh::{add, cross, dot, norm, scale, sub, Vec3};
use serde::{Deserialize, Serialize};

/// Weight minimised by the dynamic programme.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, Default)]
#[serde(rename_all = "kebab-case")]
pub enum HoleWeight {
    /// Sum of triangle areas (Barequet and Sharir 1995).
    MinArea,
    /// Largest dihedral angle first, then the sum of areas (Liepa 2003).
    #[default]
    AngleThenArea,
}

/// Cost of a (partial) triangulation: `(largest dihedral angle, total area)`.
/// With [`HoleWeight::MinArea`] the angle stays 0.
#[derive(Debug, Clone, Copy, PartialEq)]
struct Cost {
    angle: f64,
    area: f64,
}

impl Cost {
    const INFEASIBLE: Cost = Cost {
        angle: f64::INFINITY,
        area: f64::INFINITY,
    };

    fn feasible(self) -> bool {
        self.area.is_finite()
    }

    /// Strictly better than `other` (lexicographic).
    fn better(self, other: Cost) -> bool {
        if self.angle != other.angle {
            self.angle < other.angle
        } else {
            self.area < other.area
        }
    }
}

/// Angle between two normals in radians, in `[0, pi]`; `pi` if either is zero
/// (a degenerate triangle counts as the worst fold). Computed with `atan2` so
/// that small angles are accurate.
fn normal_angle(a: Vec3, b: Vec3) -> f64 {
    let s = norm(cross(a, b));
    let c = dot(a, b);
    if norm(a) == 0.0 || norm(b) == 0.0 {
        return std::f64::consts::PI;
    }
    s.atan2(c)
}

/// Everything the programme needs to know about one hole.
pub struct HoleInput<'a> {
    /// Positions of the loop vertices `v_0 .. v_{n-1}` in loop order.
    pub points: &'a [Vec3],
    /// Normal (any length) of the existing face outside boundary edge
    /// `(v_i, v_{i+1})`, or `None` where there is none (a free polygon).
    pub outer_normals: &'a [Option<Vec3>],
    /// True when the diagonal between loop positions `i < k` must not be
    /// used because the mesh already has that edge.
    pub forbidden: &'a dyn Fn(usize, usize) -> bool,
}

/// Triangulate a hole by the dynamic programme. Returns triangles as loop
/// positions `[k, m, i]` with `i < m < k`, oriented to traverse every
/// boundary edge `v_i -> v_{i+1}` backwards (i.e. counter-clockwise seen from
/// the side the outer faces face), or `None` when every triangulation would
/// reuse an existing edge. For `n = 3` the single triangle is returned.
pub fn triangulate_hole(hole: &HoleInput, weight: HoleWeight) -> Option<Vec<[usize; 3]>> {
    let p = hole.points;
    let n = p.len();
    if n < 3 || hole.outer_normals.len() != n {
        return None;
    }
    // Normal of the fill triangle (i, m, k) as it will be stored: [k, m, i].
    let tri_normal = |i: usize, m: usize, k: usize| cross(sub(p[m], p[k]), sub(p[i], p[k]));
    let tri_area = |i: usize, m: usize, k: usize| 0.5 * norm(tri_normal(i, m, k));
    let idx = |i: usize, k: usize| i * n + k;
    let mut cost = vec![Cost::INFEASIBLE; n * n];
    let mut choice = vec![usize::MAX; n * n];
    for i in 0..n - 1 {
        cost[idx(i, i + 1)] = Cost {
            angle: 0.0,
            area: 0.0,
        };
    }
    // Normal of the triangle on the far side of edge (i, m), i < m, seen
    // from the sub-polygon (i..m): the outer face for a boundary edge, else
    // the triangle the sub-solution chose.
    let side_normal = |choice: &[usize], i: usize, m: usize| -> Option<Vec3> {
        if m == i + 1 {
            hole.outer_normals[i]
        } else {
            let c = choice[idx(i, m)];
            if c == usize::MAX {
                None
            } else {
                Some(tri_normal(i, c, m))
            }
        }
    };
    for len in 2..n {
        for i in 0..n - len {
            let k = i + len;
            let closing = i == 0 && k == n - 1;
            if !closing && (hole.forbidden)(i, k) {
                continue;
            }
            let mut best = Cost::INFEASIBLE;
            let mut best_m = usize::MAX;
            for m in i + 1..k {
                let (a, b) = (cost[idx(i, m)], cost[idx(m, k)]);
                if !a.feasible() || !b.feasible() {
                    continue;
                }
                let area = a.area + b.area + tri_area(i, m, k);
                let angle = match weight {
                    HoleWeight::MinArea => 0.0,
                    HoleWeight::AngleThenArea => {
                        let nt = tri_normal(i, m, k);
                        let mut worst = a.angle.max(b.angle);
                        for side in [side_normal(&choice, i, m), side_normal(&choice, m, k)]
                            .into_iter()
                            .flatten()
                        {
                            worst = worst.max(normal_angle(nt, side));
                        }
                        if closing {
                            if let Some(o) = hole.outer_normals[n - 1] {
                                worst = worst.max(normal_angle(nt, o));
                            }
                        }
                        worst
                    }
                };
                let c = Cost { angle, area };
                if c.better(best) {
                    best = c;
                    best_m = m;
                }
            }
            cost[idx(i, k)] = best;
            choice[idx(i, k)] = best_m;
        }
    }
    if !cost[idx(0, n - 1)].feasible() {
        return None;
    }
    // Read the triangles back without recursion.
    let mut tris = Vec::with_capacity(n - 2);
    let mut stack = vec![(0usize, n - 1)];
    while let Some((i, k)) = stack.pop() {
        if k < i + 2 {
            continue;
        }
        let m = choice[idx(i, k)];
        if m == usize::MAX || m <= i || m >= k {
            return None;
        }
        tris.push([k, m, i]);
        stack.push((m, k));
        stack.push((i, m));
    }
    Some(tris)
}

/// Mean of the loop positions: the centre vertex of a fan fill.
pub fn loop_centroid(points: &[Vec3]) -> Vec3 {
    let s = points.iter().fold([0.0; 3], |acc, q| add(acc, *q));
    scale(s, 1.0 / points.len().max(1) as f64)
}

/// Fan fill around a new centre vertex `c` (given as loop position `n`):
/// triangles `[i + 1, i, n]` for every boundary edge `v_i -> v_{i+1}`.
pub fn fan(n: usize) -> Vec<[usize; 3]> {
    (0..n).map(|i| [(i + 1) % n, i, n]).collect()
}

/// Total area of triangles given as indices into `points`.
pub fn triangles_area(points: &[Vec3], tris: &[[usize; 3]]) -> f64 {
    tris.iter()
        .map(|t| {
            0.5 * norm(cross(
                sub(points[t[1]], points[t[0]]),
                sub(points[t[2]], points[t[0]]),
            ))
        })
        .sum()
}

#[cfg(test)]
mod tests {
    use super::*;

    fn free(points: &[Vec3], weight: HoleWeight) -> Vec<[usize; 3]> {
        let normals = vec![None; points.len()];
        let forbid = |_: usize, _: usize| false;
        triangulate_hole(
            &HoleInput {
                points,
                outer_normals: &normals,
                forbidden: &forbid,
            },
            weight,
        )
        .unwrap()
    }

    /// A strictly convex polygon in the plane z = 0: points on an ellipse at
    /// uneven angles.
    fn convex_polygon(n: usize) -> Vec<Vec3> {
        (0..n)
            .map(|i| {
                let t = std::f64::consts::TAU * (i as f64 + 0.3 * ((i * 7 % 5) as f64) / 5.0)
                    / n as f64;
                [30.0 * t.cos() + 2.0, 17.0 * t.sin() - 1.0, 0.0]
            })
            .collect()
    }

    fn shoelace(points: &[Vec3]) -> f64 {
        let n = points.len();
        0.5 * (0..n)
            .map(|i| {
                let (a, b) = (points[i], points[(i + 1) % n]);
                a[0] * b[1] - b[0] * a[1]
            })
            .sum::<f64>()
    }

    /// Every triangulation of the polygon 0..n-1 using only its vertices
    /// (Catalan(n-2) of them), by recursion on the triangle over edge (0, n-1).
    fn all_triangulations(i: usize, k: usize) -> Vec<Vec<[usize; 3]>> {
        if k < i + 2 {
            return vec![vec![]];
        }
        let mut out = Vec::new();
        for m in i + 1..k {
            for a in all_triangulations(i, m) {
                for b in all_triangulations(m, k) {
                    let mut t = a.clone();
                    t.extend(b.iter().copied());
                    t.push([k, m, i]);
                    out.push(t);
                }
            }
        }
        out
    }

    #[test]
    fn planar_convex_polygon_area_is_the_shoelace_area() {
        // Any triangulation of a planar convex polygon covers exactly its
        // area; shoelace formula (Gauss's area formula) as the reference.
        for weight in [HoleWeight::MinArea, HoleWeight::AngleThenArea] {
            for n in [3, 4, 7, 20, 45] {
                let p = convex_polygon(n);
                let tris = free(&p, weight);
                assert_eq!(tris.len(), n - 2);
                let a = triangles_area(&p, &tris);
                let s = shoelace(&p);
                assert!(s > 0.0);
                assert!((a - s).abs() < 1e-9, "n {n}: {a} vs {s}");
                // Orientation: the loop runs counter-clockwise seen from +z,
                // the fill must run the other way (normals towards -z).
                for t in &tris {
                    let nz = cross(sub(p[t[1]], p[t[0]]), sub(p[t[2]], p[t[0]]))[2];
                    assert!(nz < 0.0);
                }
            }
        }
    }

    /// A crown-shaped loop that is far from planar.
    fn crown(n: usize) -> Vec<Vec3> {
        (0..n)
            .map(|i| {
                let t = std::f64::consts::TAU * i as f64 / n as f64;
                [
                    10.0 * t.cos(),
                    7.0 * t.sin(),
                    4.0 * (3.0 * t).sin() + 0.5 * t.cos(),
                ]
            })
            .collect()
    }

    #[test]
    fn minimum_area_matches_brute_force_and_beats_fans() {
        // Brute force over all Catalan(n-2) triangulations (n = 8: 132) gives
        // the reference minimum; every fan from a boundary vertex is one such
        // triangulation, so none may be smaller than the programme's result.
        let p = crown(8);
        let tris = free(&p, HoleWeight::MinArea);
        let a = triangles_area(&p, &tris);
        let all = all_triangulations(0, 7);
        assert_eq!(all.len(), 132);
        let best = all
            .iter()
            .map(|t| triangles_area(&p, t))
            .fold(f64::INFINITY, f64::min);
        assert!((a - best).abs() < 1e-9 * best, "{a} vs brute force {best}");
        let worst = all
            .iter()
            .map(|t| triangles_area(&p, t))
            .fold(0.0, f64::max);
        assert!(worst > best * 1.05, "the test loop must discriminate");
        for n in [8, 13, 30] {
            let p = crown(n);
            let a = triangles_area(&p, &free(&p, HoleWeight::MinArea));
            for apex in 0..n {
                let fan_tris: Vec<[usize; 3]> = (1..n - 1)
                    .map(|j| [apex, (apex + j) % n, (apex + j + 1) % n])
                    .collect();
                let f = triangles_area(&p, &fan_tris);
                assert!(a <= f + 1e-9, "n {n}, fan at {apex}: {a} > {f}");
            }
        }
    }

    #[test]
    fn forbidden_diagonals_are_avoided() {
        // Square 0..3: forbidding diagonal (0, 2) leaves only (1, 3);
        // forbidding both leaves nothing.
        let p = vec![[0., 0., 0.], [1., 0., 0.], [1., 1., 0.], [0., 1., 0.]];
        let normals = vec![None; 4];
        let f1 = |i: usize, k: usize| (i, k) == (0, 2);
        let tris = triangulate_hole(
            &HoleInput {
                points: &p,
                outer_normals: &normals,
                forbidden: &f1,
            },
            HoleWeight::MinArea,
        )
        .unwrap();
        assert!(tris.iter().all(|t| !(t.contains(&0) && t.contains(&2))));
        let f2 = |i: usize, k: usize| (i, k) == (0, 2) || (i, k) == (1, 3);
        assert!(triangulate_hole(
            &HoleInput {
                points: &p,
                outer_normals: &normals,
                forbidden: &f2,
            },
            HoleWeight::MinArea,
        )
        .is_none());
    }

    #[test]
    fn liepa_weight_prefers_the_fold_free_diagonal() {
        // A hole in a flat sheet (outer normals +z would be pointing away
        // from the fill side; the outer faces here face -z like the fill).
        // A skew quad: the minimum-area diagonal folds sharply against the
        // surroundings, the other one does not.
        let p = vec![[0., 0., 0.], [4., 0., 0.], [4.4, 1.0, 0.0], [0., 1., 0.]];
        let normals = vec![Some([0.0, 0.0, -1.0]); 4];
        let forbid = |_: usize, _: usize| false;
        let h = HoleInput {
            points: &p,
            outer_normals: &normals,
            forbidden: &forbid,
        };
        // Planar: both weights give the polygon's area.
        for w in [HoleWeight::MinArea, HoleWeight::AngleThenArea] {
            let t = triangulate_hole(&h, w).unwrap();
            assert!((triangles_area(&p, &t) - 4.2).abs() < 1e-12);
        }
        // Lift vertex 2: now the angle weight must not be worse in angle
        // than the area weight, and the area weight not worse in area.
        let mut q = p.clone();
        q[2][2] = 2.0;
        let h = HoleInput {
            points: &q,
            outer_normals: &normals,
            forbidden: &forbid,
        };
        let ta = triangulate_hole(&h, HoleWeight::MinArea).unwrap();
        let tl = triangulate_hole(&h, HoleWeight::AngleThenArea).unwrap();
        assert!(triangles_area(&q, &ta) <= triangles_area(&q, &tl) + 1e-12);
        let max_angle = |t: &[[usize; 3]]| {
            let nt: Vec<Vec3> = t
                .iter()
                .map(|x| cross(sub(q[x[1]], q[x[0]]), sub(q[x[2]], q[x[0]])))
                .collect();
            let mut w: f64 = normal_angle(nt[0], nt[1]);
            for a in &nt {
                w = w.max(normal_angle(*a, [0.0, 0.0, -1.0]));
            }
            w
        };
        assert!(max_angle(&tl) <= max_angle(&ta) + 1e-12);
    }

    #[test]
    fn fan_orientation_matches_the_dp() {
        let tris = fan(4);
        assert_eq!(tris, vec![[1, 0, 4], [2, 1, 4], [3, 2, 4], [0, 3, 4]]);
        let c = loop_centroid(&[[0., 0., 0.], [2., 0., 0.], [2., 2., 0.], [0., 2., 0.]]);
        assert_eq!(c, [1.0, 1.0, 0.0]);
    }
}
