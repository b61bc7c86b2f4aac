//! A synthetic study: participants, per-subject surfaces with maps,
//! landmarks and planted defects, and the ground truth of everything
//! planted.
//!
//! In: [`CohortParams`] (subject count, vertices per hemisphere, seed).
//! Out: the participants table, one [`SubjectData`] per subject (generated
//! one at a time, so a cohort never has to fit in memory at once), and a
//! [`GroundTruth`] that serialises to JSON. Invariants: subject `i` depends
//! only on the parameters and `i`; the same parameters give the same bits.
//!
//! The scenario is invented: the "Kestrel Fen cortical thickness pilot" at
//! the fictional "Kestrel Fen Imaging Unit", with controls and patients.
//! Patients are thinner by a known amount in a known cap of the left
//! hemisphere ([`CapEffect`]); everyone thins with age by a known slope; a
//! few subjects carry one planted defect each ([`DefectKind`]).

use super::defects::{plant, DefectKind, DefectRecord};
use super::maps::{
    landmark_template, place_landmarks, region_labels, region_table, thickness, CapEffect,
    Landmark, PlacedLandmark, Region, ThicknessModel,
};
use super::rng::Rng;
use super::surface::{folded_surface, Hemi, SurfaceParams};
use crate::error::{Error, Result};
use crate::mesh::{TriMesh, Vec3};
use serde::Serialize;

/// Name of the invented study.
pub const STUDY_NAME: &str = "Kestrel Fen cortical thickness pilot (synthetic)";
/// Name of the invented site.
pub const SITE_NAME: &str = "Kestrel Fen Imaging Unit (fictional)";

/// Options of a synthetic cohort.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct CohortParams {
    /// Number of subjects (1 to 999).
    pub subjects: usize,
    /// Vertices per hemisphere (overrides `surface.vertices`).
    pub vertices: usize,
    /// Master seed.
    pub seed: u64,
    /// Surface options (the hemisphere and vertex count are set per surface).
    pub surface: SurfaceParams,
    /// Thickness model.
    pub thickness: ThicknessModel,
    /// The planted group effect (left hemisphere, patients).
    pub effect: CapEffect,
    /// Thickness change per year of age, mm, around `age_reference`.
    pub age_slope_mm_per_year: f64,
    /// Age at which the age term is zero.
    pub age_reference: f64,
    /// Landmark jitter, degrees (standard deviation per tangent component).
    pub landmark_jitter_deg: f64,
    /// Region border jitter, degrees.
    pub region_jitter_deg: f64,
    /// Plant one defect of each kind in four subjects.
    pub defects: bool,
}

impl Default for CohortParams {
    fn default() -> Self {
        CohortParams {
            subjects: 14,
            vertices: 150_000,
            seed: 1,
            surface: SurfaceParams::default(),
            thickness: ThicknessModel::default(),
            effect: CapEffect::default(),
            age_slope_mm_per_year: -0.005,
            age_reference: 60.0,
            landmark_jitter_deg: 3.0,
            region_jitter_deg: 2.0,
            defects: true,
        }
    }
}

impl CohortParams {
    /// Check ranges; the error names the option.
    pub fn validate(&self) -> Result<()> {
        if !(1..=999).contains(&self.subjects) {
            return Err(Error::Invalid(format!(
                "subject count is {}; expected 1 to 999",
                self.subjects
            )));
        }
        let mut s = self.surface.clone();
        s.vertices = self.vertices;
        s.validate()?;
        let finite = [
            ("age slope", self.age_slope_mm_per_year, -0.1, 0.1),
            ("effect size", self.effect.change_mm, -2.0, 2.0),
            ("effect radius", self.effect.angular_radius_deg, 0.0, 180.0),
            ("landmark jitter", self.landmark_jitter_deg, 0.0, 30.0),
            ("region jitter", self.region_jitter_deg, 0.0, 30.0),
        ];
        for (name, v, lo, hi) in finite {
            if !(v.is_finite() && lo <= v && v <= hi) {
                return Err(Error::Invalid(format!(
                    "{name} is {v}; expected {lo} to {hi}"
                )));
            }
        }
        Ok(())
    }
}

/// Study group.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "lowercase")]
pub enum Group {
    Control,
    Patient,
}

impl Group {
    pub fn label(self) -> &'static str {
        match self {
            Group::Control => "control",
            Group::Patient => "patient",
        }
    }
}

/// One row of the participants table.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Participant {
    /// BIDS participant label without the `sub-` prefix, e.g. `kf03`.
    pub label: String,
    pub group: Group,
    /// Age in years.
    pub age: u32,
    /// `F` or `M`.
    pub sex: char,
}

/// The participants: half controls, half patients (in random order), ages
/// 45 to 79, sex at random.
pub fn participants(params: &CohortParams) -> Vec<Participant> {
    let n = params.subjects;
    let mut rng = Rng::stream(params.seed, "participants");
    let mut groups: Vec<Group> = (0..n)
        .map(|i| {
            if i < n.div_ceil(2) {
                Group::Control
            } else {
                Group::Patient
            }
        })
        .collect();
    rng.shuffle(&mut groups);
    groups
        .into_iter()
        .enumerate()
        .map(|(i, group)| Participant {
            label: format!("kf{:02}", i + 1),
            group,
            age: 45 + rng.below(35) as u32,
            sex: if rng.uniform() < 0.5 { 'F' } else { 'M' },
        })
        .collect()
}

/// The participants table as TSV (BIDS `participants.tsv`).
pub fn participants_tsv(people: &[Participant]) -> String {
    let mut s = String::from("participant_id\tgroup\tage\tsex\n");
    for p in people {
        s.push_str(&format!(
            "sub-{}\t{}\t{}\t{}\n",
            p.label,
            p.group.label(),
            p.age,
            p.sex
        ));
    }
    s
}

/// Which subject (index) carries which defect, and on which hemisphere.
pub fn defect_plan(params: &CohortParams) -> Vec<(usize, Hemi, DefectKind)> {
    if !params.defects {
        return Vec::new();
    }
    let n = params.subjects;
    let mut rng = Rng::stream(params.seed, "defect-plan");
    let mut order: Vec<usize> = (0..n).collect();
    rng.shuffle(&mut order);
    DefectKind::ALL
        .iter()
        .zip(order)
        .enumerate()
        .map(|(k, (&kind, subject))| {
            let hemi = if k % 2 == 0 { Hemi::Left } else { Hemi::Right };
            (subject, hemi, kind)
        })
        .collect()
}

/// One hemisphere of one subject, ready to write.
#[derive(Debug, Clone)]
pub struct HemiData {
    pub hemi: Hemi,
    pub mesh: TriMesh,
    /// Thickness, mm.
    pub thickness: Vec<f32>,
    /// Depth below the envelope, mm.
    pub depth: Vec<f32>,
    /// Region keys (see [`region_table`]).
    pub labels: Vec<i32>,
    /// Landmarks with vertex indices into `mesh`.
    pub landmarks: Vec<PlacedLandmark>,
    /// The planted defect, if any.
    pub defect: Option<DefectRecord>,
}

/// One subject.
#[derive(Debug, Clone)]
pub struct SubjectData {
    pub participant: Participant,
    pub hemis: Vec<HemiData>,
}

/// Seed of subject `index`.
pub fn subject_seed(params: &CohortParams, index: usize) -> u64 {
    super::rng::derive_seed(params.seed, &format!("subject-{index}"))
}

/// Generate subject `index` (0-based) of the cohort.
pub fn generate_subject(
    params: &CohortParams,
    people: &[Participant],
    index: usize,
) -> Result<SubjectData> {
    let participant = people
        .get(index)
        .cloned()
        .ok_or_else(|| Error::Invalid(format!("subject index {index} is beyond the cohort")))?;
    let seed = subject_seed(params, index);
    let plan = defect_plan(params);
    let mut hemis = Vec::with_capacity(2);
    for hemi in [Hemi::Left, Hemi::Right] {
        let mut sp = params.surface.clone();
        sp.vertices = params.vertices;
        sp.hemi = hemi;
        let surface = folded_surface(&sp, seed)?;
        let patient = participant.group == Group::Patient;
        let age_term =
            params.age_slope_mm_per_year * (f64::from(participant.age) - params.age_reference);
        let effect = &params.effect;
        let thick = thickness(&surface, &params.thickness, seed, |u: Vec3| {
            let group = if patient && hemi == Hemi::Left && effect.contains(u) {
                effect.change_mm
            } else {
                0.0
            };
            age_term + group
        });
        let labels = region_labels(&surface, seed, params.region_jitter_deg);
        let mut landmarks = place_landmarks(&surface, seed, params.landmark_jitter_deg);
        let depth = surface.depth.clone();
        let kind = plan
            .iter()
            .find(|(s, h, _)| *s == index && *h == hemi)
            .map(|p| p.2);
        let data = match kind {
            None => HemiData {
                hemi,
                mesh: surface.mesh.clone(),
                thickness: thick.iter().map(|&t| t as f32).collect(),
                depth: depth.iter().map(|&d| d as f32).collect(),
                labels,
                landmarks,
                defect: None,
            },
            Some(kind) => {
                let mut rng = Rng::stream(seed, &format!("defect-{}", hemi.label()));
                let avoid: Vec<u32> = landmarks.iter().map(|l| l.vertex).collect();
                let edited = plant(&surface, kind, &mut rng, &avoid)?;
                // Carry the maps over; new vertices get 0 and "unlabelled".
                let gather = |src: &Option<u32>, f: &dyn Fn(usize) -> f32| {
                    src.map_or(0.0, |v| f(v as usize))
                };
                let thickness = edited
                    .source
                    .iter()
                    .map(|s| gather(s, &|v| thick[v] as f32))
                    .collect();
                let depth = edited
                    .source
                    .iter()
                    .map(|s| gather(s, &|v| depth[v] as f32))
                    .collect();
                let labels = edited
                    .source
                    .iter()
                    .map(|s| s.map_or(super::maps::UNLABELLED, |v| labels[v as usize]))
                    .collect();
                // Landmark vertices are kept clear of the defect; renumber them.
                let mut new_id = vec![u32::MAX; surface.mesh.n_vertices()];
                for (i, s) in edited.source.iter().enumerate() {
                    if let Some(v) = s {
                        if new_id[*v as usize] == u32::MAX {
                            new_id[*v as usize] = i as u32;
                        }
                    }
                }
                for l in &mut landmarks {
                    let v = new_id[l.vertex as usize];
                    if v == u32::MAX {
                        return Err(Error::Algorithm {
                            stage: "synth",
                            message: format!(
                                "landmark {} was removed by the planted defect",
                                l.name
                            ),
                        });
                    }
                    l.vertex = v;
                }
                HemiData {
                    hemi,
                    mesh: edited.mesh,
                    thickness,
                    depth,
                    labels,
                    landmarks,
                    defect: Some(edited.record),
                }
            }
        };
        hemis.push(data);
    }
    Ok(SubjectData { participant, hemis })
}

/// Landmarks of one hemisphere as CSV (`name,vertex`, header row).
pub fn landmarks_csv(landmarks: &[PlacedLandmark]) -> String {
    let mut s = String::from("name,vertex\n");
    for l in landmarks {
        s.push_str(&format!("{},{}\n", l.name, l.vertex));
    }
    s
}

/// Ground truth of one hemisphere of one subject.
#[derive(Debug, Clone, Serialize)]
pub struct HemiTruth {
    pub hemi: Hemi,
    pub vertices: usize,
    pub faces: usize,
    pub landmarks: Vec<PlacedLandmark>,
    pub defect: Option<DefectRecord>,
}

/// Ground truth of one subject.
#[derive(Debug, Clone, Serialize)]
pub struct SubjectTruth {
    pub participant_id: String,
    pub group: Group,
    pub age: u32,
    pub sex: char,
    pub hemispheres: Vec<HemiTruth>,
}

impl SubjectTruth {
    /// The truth of a generated subject.
    pub fn of(s: &SubjectData) -> Self {
        SubjectTruth {
            participant_id: format!("sub-{}", s.participant.label),
            group: s.participant.group,
            age: s.participant.age,
            sex: s.participant.sex,
            hemispheres: s
                .hemis
                .iter()
                .map(|h| HemiTruth {
                    hemi: h.hemi,
                    vertices: h.mesh.n_vertices(),
                    faces: h.mesh.n_faces(),
                    landmarks: h.landmarks.clone(),
                    defect: h.defect.clone(),
                })
                .collect(),
        }
    }
}

/// The planted group effect as stated in the ground truth.
#[derive(Debug, Clone, Serialize)]
pub struct EffectTruth {
    pub hemi: Hemi,
    pub group: Group,
    pub centre: Vec3,
    pub angular_radius_deg: f64,
    pub thickness_change_mm: f64,
    pub note: &'static str,
}

/// Everything planted in a cohort.
#[derive(Debug, Clone, Serialize)]
pub struct GroundTruth {
    pub study: &'static str,
    pub site: &'static str,
    pub synthetic: bool,
    pub generator: String,
    pub seed: u64,
    pub vertices_per_hemisphere: usize,
    pub frame: &'static str,
    pub hemisphere_centres_mm: Vec<(Hemi, Vec3)>,
    pub effect: EffectTruth,
    pub age_slope_mm_per_year: f64,
    pub age_reference_years: f64,
    pub thickness_model: ThicknessModel,
    pub landmark_template: Vec<Landmark>,
    pub landmark_jitter_deg: f64,
    pub regions: Vec<Region>,
    pub subjects: Vec<SubjectTruth>,
}

/// Assemble the ground truth from the per-subject truths.
pub fn ground_truth(params: &CohortParams, subjects: Vec<SubjectTruth>) -> GroundTruth {
    let centre = |hemi| {
        let mut sp = params.surface.clone();
        sp.hemi = hemi;
        (hemi, super::surface::hemisphere_centre(&sp))
    };
    GroundTruth {
        study: STUDY_NAME,
        site: SITE_NAME,
        synthetic: true,
        generator: format!("horosphere {} synth", env!("CARGO_PKG_VERSION")),
        seed: params.seed,
        vertices_per_hemisphere: params.vertices,
        frame: "Directions are unit vectors from the hemisphere centre in the canonical frame: \
                the left hemisphere's RAS+ axes (x towards the midline for the left hemisphere, \
                y anterior, z superior). For the right hemisphere the world direction is (-x, y, z). \
                A vertex's direction is the unit vector from its hemisphere centre to it.",
        hemisphere_centres_mm: vec![centre(Hemi::Left), centre(Hemi::Right)],
        effect: EffectTruth {
            hemi: Hemi::Left,
            group: Group::Patient,
            centre: params.effect.centre,
            angular_radius_deg: params.effect.angular_radius_deg,
            thickness_change_mm: params.effect.change_mm,
            note: "added to the thickness of every vertex whose direction lies within the cap, \
                   in patients, before clamping to the thickness range",
        },
        age_slope_mm_per_year: params.age_slope_mm_per_year,
        age_reference_years: params.age_reference,
        thickness_model: params.thickness.clone(),
        landmark_template: landmark_template(),
        landmark_jitter_deg: params.landmark_jitter_deg,
        regions: region_table(),
        subjects,
    }
}
