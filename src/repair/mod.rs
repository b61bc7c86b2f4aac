//! Surface repair: from an indexed triangle soup to one closed, consistently
//! oriented, outward surface, with every change logged.
//!
//! In: a [`TriMesh`] (validated: finite coordinates, indices in range) and
//! [`RepairOptions`]. Out: [`Repaired`]: the repaired mesh, for every output
//! vertex whether the repair created it and which input vertex it stands for,
//! and a serde-serialisable [`RepairLog`].
//!
//! Steps, in order:
//! 1. merge duplicate vertices within a tolerance (default 0: bit-identical
//!    positions), the lowest index surviving ([`weld`]);
//! 2. drop degenerate faces (a repeated vertex or zero area) and duplicate
//!    faces (same three vertices, either orientation; the first is kept)
//!    ([`clean`]);
//! 3. keep the largest edge-connected component by face count;
//! 4. refuse edges with more than two faces ([`Error::NotReady`] naming the
//!    edge's input vertices and its face count); split bow-tie vertices,
//!    one copy per further fan ([`clean::split_bowties`]);
//! 5. make the orientation consistent ([`orient`]);
//! 6. fill every boundary hole: by the minimum-weight triangulation of
//!    Barequet and Sharir (1995) and Liepa (2003) up to
//!    [`RepairOptions::max_dp_hole_edges`] boundary edges, otherwise by a fan
//!    around one new vertex at the centroid of the boundary ([`holes`]);
//! 7. make the closed surface outward: reverse every face if the enclosed
//!    volume is negative;
//! 8. drop vertices no face uses.
//!
//! What stays true: input vertices that remain keep their relative order and
//! come first; vertices the repair creates (bow-tie copies, then fan centres)
//! follow in the order they were made. `origin[v]` is the input vertex an
//! output vertex stands for (a bow-tie copy stands for the vertex it copies);
//! `added[v]` is true only for fan centres, which have no input counterpart.
//! Face indices in the log are input face indices; vertex indices in the log
//! are input indices except `added_vertices` and hole `added_vertices`
//! (output indices). The result is checked before it is returned: closed,
//! 2-manifold, consistently oriented (via
//! [`Halfedges::from_faces`](crate::mesh::halfedge::Halfedges::from_faces)),
//! one component, positive volume; otherwise [`Error::Algorithm`].
//! Everything is sequential and deterministic.
//!
//! Limits: non-manifold edges are refused rather than cut apart; a
//! non-orientable surface is refused; so is a flat one (a sheet whose
//! closed-up surface encloses no volume, so outward is undefined). A zero-area face inside an otherwise
//! closed surface leaves a three-edge hole whose only triangulation is that
//! same flat triangle, so the log shows the face dropped and a three-edge hole
//! filled; removing such slivers by edge collapse is not done here. Handles
//! (genus > 0) are kept: the log reports the genus, the mapper refuses it.

pub mod clean;
pub mod holes;
pub mod orient;
pub mod weld;

pub use holes::HoleWeight;

use crate::error::{Error, Result};
use crate::mesh::halfedge::Halfedges;
use crate::mesh::topology::{boundary_loops, EdgeTable};
use crate::mesh::{cross, dist, sub, TriMesh, Vec3};
use serde::{Deserialize, Serialize};

/// Options of [`repair`].
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct RepairOptions {
    /// Vertices closer than this (mm) are merged; 0 merges only identical
    /// positions.
    pub merge_tolerance_mm: f64,
    /// Holes with at most this many boundary edges are triangulated by the
    /// O(n^3) dynamic programme; larger ones get a fan around a new vertex.
    /// At most 2000 (the programme keeps two n-by-n tables).
    pub max_dp_hole_edges: usize,
    /// Weight of the dynamic programme.
    pub hole_weight: HoleWeight,
    /// Cut handles whose shortest non-separating loop is at most this long
    /// (mm), see [`crate::handles`]; `None` keeps every handle.
    #[serde(default)]
    pub max_handle_mm: Option<f64>,
    /// With `max_handle_mm`: a surface of higher genus is refused
    /// ([`Error::NotReady`]) before any handle is searched.
    #[serde(default = "default_max_genus")]
    pub max_genus: i64,
}

fn default_max_genus() -> i64 {
    crate::handles::DEFAULT_MAX_GENUS
}

impl Default for RepairOptions {
    fn default() -> Self {
        RepairOptions {
            merge_tolerance_mm: 0.0,
            max_dp_hole_edges: 60,
            hole_weight: HoleWeight::AngleThenArea,
            max_handle_mm: None,
            max_genus: default_max_genus(),
        }
    }
}

/// A vertex merged into an earlier one (input indices).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct MergedVertex {
    pub vertex: u32,
    pub into: u32,
}

/// Step 1 in the log.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, Default)]
pub struct MergeLog {
    pub tolerance_mm: f64,
    /// Number of vertices merged away.
    pub vertices_merged: usize,
    /// Number of surviving vertices that absorbed at least one other.
    pub groups: usize,
    /// Every merge, in input order.
    pub merged: Vec<MergedVertex>,
}

/// A face dropped in step 2 (input index).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct DroppedFace {
    pub face: u32,
    /// `repeated-vertex`, `zero-area` or `duplicate`.
    pub reason: String,
    /// For a duplicate: the earlier face it repeats.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub duplicate_of: Option<u32>,
}

/// A component dropped in step 3.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct DroppedComponent {
    pub faces: usize,
    pub vertices: usize,
    /// Its lowest input face index.
    pub first_face: u32,
}

/// A bow-tie vertex split in step 4.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct BowtieSplit {
    /// Input index of the vertex.
    pub vertex: u32,
    /// Number of fans around it (copies made: `fans - 1`).
    pub fans: usize,
}

/// How a hole was filled.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum FillMethod {
    /// Dynamic programme, minimum area (Barequet and Sharir 1995).
    MinAreaDp,
    /// Dynamic programme, dihedral angle then area (Liepa 2003).
    AngleAreaDp,
    /// Fan around one new centre vertex.
    Fan,
}

/// A hole filled in step 6.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct HoleFill {
    pub boundary_edges: usize,
    pub boundary_length_mm: f64,
    pub method: FillMethod,
    /// Why a hole within the size limit still got a fan, if it did.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub note: Option<String>,
    pub triangles_added: usize,
    pub area_added_mm2: f64,
    /// Output indices of the vertices created for this hole.
    pub added_vertices: Vec<u32>,
}

/// Everything [`repair`] changed.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, Default)]
pub struct RepairLog {
    pub input_vertices: usize,
    pub input_faces: usize,
    pub merge: MergeLog,
    pub dropped_faces: Vec<DroppedFace>,
    pub dropped_components: Vec<DroppedComponent>,
    pub bowtie_splits: Vec<BowtieSplit>,
    /// Input faces reversed to agree with their neighbours.
    pub faces_reoriented: Vec<u32>,
    /// True when the whole surface was reversed to face outward.
    pub flipped_to_outward: bool,
    pub holes: Vec<HoleFill>,
    /// Vertices removed because no face used them (after all steps).
    pub unreferenced_vertices_removed: usize,
    /// Output indices of all vertices the repair created.
    pub added_vertices: Vec<u32>,
    pub output_vertices: usize,
    pub output_faces: usize,
    pub euler_characteristic: i64,
    pub genus: i64,
    /// Handles found by `--cut-handles` (cut, or left when over the limit).
    #[serde(default)]
    pub handles: Vec<crate::handles::Handle>,
    pub area_mm2: f64,
    pub volume_mm3: f64,
}

/// Result of [`repair`].
#[derive(Debug, Clone, PartialEq)]
pub struct Repaired {
    pub mesh: TriMesh,
    /// Per output vertex: true if the repair created it (a fan centre).
    pub added: Vec<bool>,
    /// Output vertex -> input vertex (`None` for created vertices).
    pub origin: Vec<Option<u32>>,
    pub log: RepairLog,
}

/// Face index marker for faces the repair created.
const NEW_FACE: u32 = u32::MAX;

/// Repair `mesh`; see the module documentation for the steps.
pub fn repair(mesh: &TriMesh, opts: &RepairOptions) -> Result<Repaired> {
    mesh.validate()?;
    if opts.max_dp_hole_edges > 2000 {
        return Err(Error::Invalid(format!(
            "max_dp_hole_edges {}: expected at most 2000 (the search takes O(n^3) time and O(n^2) memory)",
            opts.max_dp_hole_edges
        )));
    }
    let mut log = RepairLog {
        input_vertices: mesh.n_vertices(),
        input_faces: mesh.n_faces(),
        ..Default::default()
    };

    // 1. Merge duplicate vertices.
    let rep = weld::weld(&mesh.positions, opts.merge_tolerance_mm)?;
    log.merge.tolerance_mm = opts.merge_tolerance_mm;
    let mut absorbed = vec![false; rep.len()];
    for (v, &r) in rep.iter().enumerate() {
        if r as usize != v {
            log.merge.merged.push(MergedVertex {
                vertex: v as u32,
                into: r,
            });
            absorbed[r as usize] = true;
        }
    }
    log.merge.vertices_merged = log.merge.merged.len();
    log.merge.groups = absorbed.iter().filter(|&&a| a).count();
    let mut positions: Vec<Vec3> = mesh.positions.clone();
    let mut vorigin: Vec<Option<u32>> = (0..mesh.n_vertices() as u32).map(Some).collect();
    let welded: Vec<[u32; 3]> = mesh
        .faces
        .iter()
        .map(|t| t.map(|v| rep[v as usize]))
        .collect();

    // 2. Degenerate and duplicate faces.
    let mut faces: Vec<[u32; 3]> = Vec::with_capacity(welded.len());
    let mut forigin: Vec<u32> = Vec::with_capacity(welded.len());
    let mut proper: Vec<[u32; 3]> = Vec::with_capacity(welded.len());
    let mut proper_origin: Vec<u32> = Vec::with_capacity(welded.len());
    for (f, &t) in welded.iter().enumerate() {
        match clean::degeneracy(&positions, t) {
            Some(kind) => log.dropped_faces.push(DroppedFace {
                face: f as u32,
                reason: match kind {
                    clean::Degeneracy::RepeatedVertex => "repeated-vertex".into(),
                    clean::Degeneracy::ZeroArea => "zero-area".into(),
                },
                duplicate_of: None,
            }),
            None => {
                proper.push(t);
                proper_origin.push(f as u32);
            }
        }
    }
    for (i, d) in clean::duplicate_of(&proper).into_iter().enumerate() {
        match d {
            Some(j) => log.dropped_faces.push(DroppedFace {
                face: proper_origin[i],
                reason: "duplicate".into(),
                duplicate_of: Some(proper_origin[j as usize]),
            }),
            None => {
                faces.push(proper[i]);
                forigin.push(proper_origin[i]);
            }
        }
    }
    log.dropped_faces.sort_by_key(|d| d.face);
    if faces.is_empty() {
        return Err(Error::NotReady(format!(
            "all {} faces are degenerate or duplicates; nothing is left to repair",
            mesh.n_faces()
        )));
    }

    // 3. Largest edge-connected component.
    let (comp, sizes) = clean::edge_components(positions.len(), &faces);
    if sizes.len() > 1 {
        let mut verts: Vec<Vec<u32>> = vec![Vec::new(); sizes.len()];
        let mut first = vec![u32::MAX; sizes.len()];
        for (f, t) in faces.iter().enumerate() {
            let c = comp[f] as usize;
            verts[c].extend_from_slice(t);
            first[c] = first[c].min(forigin[f]);
        }
        for c in 1..sizes.len() {
            verts[c].sort_unstable();
            verts[c].dedup();
            log.dropped_components.push(DroppedComponent {
                faces: sizes[c],
                vertices: verts[c].len(),
                first_face: first[c],
            });
        }
        let keep: Vec<bool> = comp.iter().map(|&c| c == 0).collect();
        let mut k = 0;
        faces.retain(|_| {
            k += 1;
            keep[k - 1]
        });
        let mut k = 0;
        forigin.retain(|_| {
            k += 1;
            keep[k - 1]
        });
    }

    // 4. Non-manifold edges are refused; bow-tie vertices are split.
    let edges = EdgeTable::new(&TriMesh {
        positions: Vec::new(),
        faces: faces.clone(),
    });
    if let Some(([a, b], n, count)) = clean::non_manifold_edges(&edges) {
        let name = |v: u32| {
            vorigin
                .get(v as usize)
                .copied()
                .flatten()
                .map_or(format!("{v}"), |o| format!("{o}"))
        };
        return Err(Error::NotReady(format!(
            "edge between input vertices {} and {} has {n} faces (expected at most 2){}; \
             repair cannot resolve non-manifold edges",
            name(a),
            name(b),
            if count > 1 {
                format!(", and {} more edges have more than two faces", count - 1)
            } else {
                String::new()
            }
        )));
    }
    let splits = clean::split_bowties(positions.len(), &mut faces);
    let mut copies: Vec<(u32, u32)> = splits
        .iter()
        .flat_map(|s| s.copies.iter().map(move |&c| (c, s.vertex)))
        .collect();
    copies.sort_unstable();
    for (c, v) in copies {
        if c as usize != positions.len() {
            return Err(Error::Algorithm {
                stage: "repair",
                message: format!("bow-tie copy {c} out of sequence"),
            });
        }
        positions.push(positions[v as usize]);
        vorigin.push(vorigin[v as usize]);
    }
    for s in &splits {
        log.bowtie_splits.push(BowtieSplit {
            vertex: vorigin[s.vertex as usize].unwrap_or(s.vertex),
            fans: s.copies.len() + 1,
        });
    }

    // 5. Consistent orientation.
    let reverse = orient::orient(positions.len(), &faces)?;
    for (f, &r) in reverse.iter().enumerate() {
        if r {
            faces[f].swap(1, 2);
            log.faces_reoriented.push(forigin[f]);
        }
    }
    log.faces_reoriented.sort_unstable();

    // 6. Fill holes.
    let mut added_flags: Vec<bool> = vec![false; positions.len()];
    let edges = EdgeTable::new(&TriMesh {
        positions: Vec::new(),
        faces: faces.clone(),
    });
    let loops = boundary_loops(
        &TriMesh {
            positions: Vec::new(),
            faces: faces.clone(),
        },
        &edges,
    );
    let edge_index = |a: u32, b: u32| edges.edges.binary_search(&[a.min(b), a.max(b)]).ok();
    for lp in &loops {
        let n = lp.len();
        if n < 3 {
            return Err(Error::Algorithm {
                stage: "repair",
                message: format!("a boundary loop of {n} edges was found; expected at least 3"),
            });
        }
        let points: Vec<Vec3> = lp.iter().map(|&v| positions[v as usize]).collect();
        let length: f64 = (0..n).map(|i| dist(points[i], points[(i + 1) % n])).sum();
        let mut fill: Option<(Vec<[u32; 3]>, FillMethod)> = None;
        let mut note = None;
        if n <= opts.max_dp_hole_edges {
            let outer: Vec<Option<Vec3>> = (0..n)
                .map(|i| {
                    let e = edge_index(lp[i], lp[(i + 1) % n])?;
                    let inc = edges.faces_of(e).first()?;
                    let t = faces[inc.face as usize];
                    let [a, b, c] = t.map(|v| positions[v as usize]);
                    Some(cross(sub(b, a), sub(c, a)))
                })
                .collect();
            let forbidden = |i: usize, k: usize| edge_index(lp[i], lp[k]).is_some();
            let input = holes::HoleInput {
                points: &points,
                outer_normals: &outer,
                forbidden: &forbidden,
            };
            match holes::triangulate_hole(&input, opts.hole_weight) {
                Some(tris) => {
                    let method = match opts.hole_weight {
                        HoleWeight::MinArea => FillMethod::MinAreaDp,
                        HoleWeight::AngleThenArea => FillMethod::AngleAreaDp,
                    };
                    fill = Some((tris.iter().map(|t| t.map(|i| lp[i])).collect(), method));
                }
                None => {
                    note = Some(
                        "every triangulation over the boundary would reuse an existing edge"
                            .to_string(),
                    )
                }
            }
        }
        let mut new_vertices = Vec::new();
        let (tris, method) = match fill {
            Some(x) => x,
            None => {
                let c = positions.len() as u32;
                positions.push(holes::loop_centroid(&points));
                vorigin.push(None);
                added_flags.push(true);
                new_vertices.push(c);
                let tris = holes::fan(n)
                    .iter()
                    .map(|t| t.map(|i| if i == n { c } else { lp[i] }))
                    .collect();
                (tris, FillMethod::Fan)
            }
        };
        let area: f64 = tris
            .iter()
            .map(|t: &[u32; 3]| {
                let [a, b, c] = t.map(|v| positions[v as usize]);
                0.5 * crate::mesh::norm(cross(sub(b, a), sub(c, a)))
            })
            .sum();
        log.holes.push(HoleFill {
            boundary_edges: n,
            boundary_length_mm: length,
            method,
            note,
            triangles_added: tris.len(),
            area_added_mm2: area,
            added_vertices: new_vertices, // working indices; renumbered below
        });
        forigin.extend(std::iter::repeat_n(NEW_FACE, tris.len()));
        faces.extend(tris);
    }
    added_flags.resize(positions.len(), false);

    // 7. Outward.
    let closed = TriMesh { positions, faces };
    let volume = closed.signed_volume();
    // A flat closed surface (a sheet closed by a fill lying on it) encloses
    // no volume: outward is undefined. Rounding leaves about eps * A^(3/2).
    let area = closed.area();
    if volume.abs() <= 1e-9 * area * area.sqrt() {
        return Err(Error::NotReady(format!(
            "the closed-up surface encloses no volume ({volume:e} mm^3 for {area:.6} mm^2 of area):              it is flat, so outward cannot be told from inward"
        )));
    }
    let mut closed = closed;
    if volume < 0.0 {
        for t in &mut closed.faces {
            t.swap(1, 2);
        }
        log.flipped_to_outward = true;
    }

    // 8. Compact.
    let mut used = vec![false; closed.n_vertices()];
    for t in &closed.faces {
        for &v in t {
            used[v as usize] = true;
        }
    }
    let mut new_index = vec![u32::MAX; closed.n_vertices()];
    let mut out_positions = Vec::new();
    let mut origin = Vec::new();
    let mut added = Vec::new();
    for v in 0..closed.n_vertices() {
        if used[v] {
            new_index[v] = out_positions.len() as u32;
            out_positions.push(closed.positions[v]);
            origin.push(vorigin[v]);
            added.push(added_flags[v]);
        }
    }
    // Vertices merged away in step 1 are counted there, not here.
    log.unreferenced_vertices_removed = used
        .iter()
        .filter(|&&u| !u)
        .count()
        .saturating_sub(log.merge.vertices_merged);
    let out_faces: Vec<[u32; 3]> = closed
        .faces
        .iter()
        .map(|t| t.map(|v| new_index[v as usize]))
        .collect();
    for h in &mut log.holes {
        for v in &mut h.added_vertices {
            *v = new_index[*v as usize];
        }
    }
    log.added_vertices = (0..added.len() as u32)
        .filter(|&v| added[v as usize])
        .collect();
    let mut out = TriMesh {
        positions: out_positions,
        faces: out_faces,
    };
    if let Some(limit) = opts.max_handle_mm {
        let ok = Halfedges::from_faces(out.n_vertices(), &out.faces)
            .map(|he| he.euler_characteristic() < 2)
            .unwrap_or(false);
        if ok {
            let cut = crate::handles::cut_handles(
                &out,
                &crate::handles::HandleOptions {
                    max_loop_mm: limit,
                    max_genus: opts.max_genus,
                    remove_tubes: true,
                },
            )?;
            let mut handles = cut.handles;
            // Report handle vertices as input vertices where they have one.
            for h in &mut handles {
                h.vertices = h
                    .vertices
                    .iter()
                    .filter_map(|&v| origin.get(v as usize).copied().flatten())
                    .collect();
                h.neighbours = h
                    .neighbours
                    .iter()
                    .filter_map(|&v| origin.get(v as usize).copied().flatten())
                    .collect();
            }
            log.handles = handles;
            let new_added: Vec<bool> = cut
                .origin
                .iter()
                .map(|o| o.is_none_or(|v| added.get(v as usize).copied().unwrap_or(true)))
                .collect();
            let new_origin: Vec<Option<u32>> = cut
                .origin
                .iter()
                .map(|o| o.and_then(|v| origin.get(v as usize).copied().flatten()))
                .collect();
            added = new_added;
            origin = new_origin;
            out = cut.mesh;
            log.added_vertices = (0..added.len() as u32)
                .filter(|&v| added[v as usize])
                .collect();
        }
    }

    // Verification.
    let fail = |message: String| Error::Algorithm {
        stage: "repair",
        message,
    };
    let he = Halfedges::from_faces(out.n_vertices(), &out.faces)
        .map_err(|e| fail(format!("the repaired surface failed the final check: {e}")))?;
    let (_, n_comp) = crate::mesh::topology::face_components(&out);
    if n_comp != 1 {
        return Err(fail(format!(
            "the repaired surface has {n_comp} components; expected 1"
        )));
    }
    let volume = out.signed_volume();
    if volume.is_nan() || volume <= 0.0 {
        return Err(fail(format!(
            "the repaired surface encloses volume {volume} mm^3; expected a positive volume"
        )));
    }
    log.output_vertices = out.n_vertices();
    log.output_faces = out.n_faces();
    log.euler_characteristic = he.euler_characteristic();
    log.genus = (2 - log.euler_characteristic) / 2;
    log.area_mm2 = out.area();
    log.volume_mm3 = volume;
    Ok(Repaired {
        mesh: out,
        added,
        origin,
        log,
    })
}

#[cfg(test)]
mod tests;
