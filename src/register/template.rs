//! The registration template: z-scored feature maps on the vertices of an
//! icosphere, built from a cohort by repeated registration.
//!
//! In: subjects (sphere + feature maps, features in one order) and
//! [`TemplateOptions`]. Out: a [`Template`] and a [`TemplateReport`]
//! (per round: the change of the template, the mean correlation of the
//! registered subjects with it, the size of the mean warp removed). On disk
//! (a folder, [`write_template`] / [`read_template`]): `sphere.surf.gii`
//! (the icosphere, unit radius), one `feature-<name>.shape.gii` per
//! feature, and `template.json` (level, feature names, subject count,
//! rounds).
//!
//! What stays true: feature maps are area-weighted z-scores on the
//! icosphere; the template is *recentred* each round, so the mean of the
//! subjects' velocity fields is (to first order) zero: the template is
//! moved by `exp(-vbar)` (`vbar` the mean velocity; averaging warps through
//! their velocity fields follows Arsigny, Commowick, Pennec, Ayache, MICCAI
//! 2006, and the unbiased template idea of Joshi, Davis, Jomier, Gerig,
//! "Unbiased diffeomorphic atlas construction for computational anatomy",
//! NeuroImage 23 (2004) S151-S160). Round 0 averages the subjects as
//! given; later rounds average their warped features; building stops when
//! the RMS change of the template (z units) falls below the tolerance or
//! after the most rounds. A template of one subject is that subject.

use super::field::VelocityField;
use super::grid::{n_vertices, IcoGrid};
use super::{register_sampled, sample_subject, zscore, RegisterOptions, RegisterReport};
use crate::error::{Error, Result};
use crate::io::gifti::{self, MetaData};
use crate::mesh::shapes::icosphere;
use crate::mesh::{dot, TriMesh};
use serde::{Deserialize, Serialize};
use std::path::Path;

/// Feature maps on an icosphere.
#[derive(Debug, Clone, PartialEq)]
pub struct Template {
    /// Icosphere level (`10 * 4^level + 2` vertices).
    pub level: u32,
    /// Feature names, in the order subjects give their maps.
    pub names: Vec<String>,
    /// One z-scored map per feature, on the icosphere's vertices.
    pub features: Vec<Vec<f64>>,
    /// Subjects it was built from.
    pub subjects: usize,
}

impl Template {
    /// Check the shape: level 1..=8, at least one feature, one name per
    /// map, every map of the icosphere's length and finite.
    pub fn check(&self) -> Result<()> {
        if !(1..=8).contains(&self.level) {
            return Err(Error::Invalid(format!(
                "template level {}; expected 1 to 8",
                self.level
            )));
        }
        if self.features.is_empty() || self.features.len() != self.names.len() {
            return Err(Error::Invalid(format!(
                "template has {} feature maps and {} names; expected at least one map, one name each",
                self.features.len(),
                self.names.len()
            )));
        }
        let n = n_vertices(self.level);
        for (f, name) in self.features.iter().zip(&self.names) {
            if f.len() != n {
                return Err(Error::Invalid(format!(
                    "template feature {name} has {} values; expected {n} (icosphere level {})",
                    f.len(),
                    self.level
                )));
            }
            if f.iter().any(|x| !x.is_finite()) {
                return Err(Error::Invalid(format!(
                    "template feature {name} has a non-finite value; expected finite values"
                )));
            }
        }
        Ok(())
    }
}

/// Options of [`build_template`].
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct TemplateOptions {
    /// Icosphere level of the template.
    pub level: u32,
    /// Most register-all rounds after round 0.
    pub rounds: usize,
    /// Stop when the RMS change of the template (z units) is below this.
    pub tolerance: f64,
    /// Options of each registration.
    pub register: RegisterOptions,
}

impl Default for TemplateOptions {
    fn default() -> Self {
        TemplateOptions {
            level: 5,
            rounds: 3,
            tolerance: 0.05,
            register: RegisterOptions::default(),
        }
    }
}

/// One round of [`build_template`].
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct RoundReport {
    pub round: usize,
    /// RMS change of the template maps from the previous round (z units).
    pub change: f64,
    /// Mean over subjects and features of the correlation with the
    /// previous template after registration.
    pub mean_correlation: f64,
    /// Root-mean-square speed over the control vertices of the mean
    /// velocity field removed by the recentring (degrees).
    pub mean_warp_rms_deg: f64,
    /// Its largest speed (degrees).
    pub mean_warp_max_deg: f64,
}

/// Report of [`build_template`] (serde).
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct TemplateReport {
    pub level: u32,
    pub subjects: usize,
    pub features: Vec<String>,
    pub rounds: Vec<RoundReport>,
    /// The registration reports of the last round, in subject order.
    pub registrations: Vec<RegisterReport>,
}

/// One subject for [`build_template`].
#[derive(Debug, Clone)]
pub struct TemplateSubject {
    pub sphere: TriMesh,
    pub features: Vec<Vec<f64>>,
}

fn average(level: u32, maps: &[&Vec<Vec<f64>>], nf: usize, areas: &[f64]) -> Vec<Vec<f64>> {
    let n = n_vertices(level);
    (0..nf)
        .map(|f| {
            let mut m = vec![0.0; n];
            for s in maps {
                for (a, b) in m.iter_mut().zip(&s[f]) {
                    *a += b / maps.len() as f64;
                }
            }
            zscore(&m, areas).unwrap_or(m)
        })
        .collect()
}

fn rms_change(a: &[Vec<f64>], b: &[Vec<f64>]) -> f64 {
    let mut s = 0.0;
    let mut n = 0usize;
    for (x, y) in a.iter().zip(b) {
        for (p, q) in x.iter().zip(y) {
            s += (p - q) * (p - q);
            n += 1;
        }
    }
    (s / n.max(1) as f64).sqrt()
}

/// Build a template from `subjects` (features named `names`, in that
/// order); `progress(done, total)` is called after each registration.
pub fn build_template(
    subjects: &[TemplateSubject],
    names: &[String],
    opts: &TemplateOptions,
    progress: &mut dyn FnMut(usize, usize),
) -> Result<(Template, TemplateReport)> {
    if subjects.is_empty() {
        return Err(Error::Invalid(
            "no subjects; expected at least one to build a template".into(),
        ));
    }
    if names.is_empty() {
        return Err(Error::Invalid(
            "no feature names; expected at least one feature".into(),
        ));
    }
    if !(2..=7).contains(&opts.level) {
        return Err(Error::Invalid(format!(
            "template level {}; expected 2 to 7",
            opts.level
        )));
    }
    let grid = IcoGrid::new(opts.level);
    let areas = grid.vertex_areas(opts.level);
    let mut sampled = Vec::with_capacity(subjects.len());
    for (i, s) in subjects.iter().enumerate() {
        let one = sample_subject(
            &s.sphere,
            &s.features,
            names,
            &grid,
            opts.register.sphere_tolerance,
        )
        .map_err(|e| match e {
            Error::Invalid(m) => Error::Invalid(format!("subject {}: {m}", i + 1)),
            other => other,
        })?;
        sampled.push(one);
    }
    let nf = names.len();
    let mut template = Template {
        level: opts.level,
        names: names.to_vec(),
        features: average(
            opts.level,
            &sampled.iter().map(|s| &s.on_grid).collect::<Vec<_>>(),
            nf,
            &areas,
        ),
        subjects: subjects.len(),
    };
    let mut rounds = Vec::new();
    let mut last_reports = Vec::new();
    let total = opts.rounds * subjects.len();
    let mut done = 0;
    for round in 1..=opts.rounds {
        let mut warped = Vec::with_capacity(subjects.len());
        let mut fields = Vec::with_capacity(subjects.len());
        let mut reports = Vec::with_capacity(subjects.len());
        for (i, s) in subjects.iter().enumerate() {
            let r = register_sampled(
                &s.sphere,
                &sampled[i],
                &template,
                &grid,
                &opts.register,
                &|_| {},
            )?;
            warped.push(r.warped_features);
            fields.push(r.velocity);
            reports.push(r.report);
            done += 1;
            progress(done, total);
        }
        let mean_corr = reports
            .iter()
            .flat_map(|r| r.features.iter().map(|f| f.after))
            .sum::<f64>()
            / (reports.len() * nf) as f64;
        let avg = average(opts.level, &warped.iter().collect::<Vec<_>>(), nf, &areas);
        // Recentre: move the average by exp(-vbar).
        let refs: Vec<&VelocityField> = fields.iter().collect();
        let (recentred, mean_warp_rms_deg, mean_warp_max_deg) =
            match VelocityField::mean(&grid, &refs) {
                Some(vbar) if vbar.max_speed() > 0.0 => {
                    let steps = vbar.steps(&grid);
                    let moved = vbar.flow(&grid, &grid.points, -1.0, steps);
                    let maps: Vec<Vec<f64>> = avg
                        .iter()
                        .map(|m| {
                            let r: Vec<f64> = moved
                                .iter()
                                .map(|&p| grid.interpolate(m, opts.level, p))
                                .collect();
                            zscore(&r, &areas).unwrap_or(r)
                        })
                        .collect();
                    let rms = (vbar.vectors.iter().map(|v| dot(*v, *v)).sum::<f64>()
                        / vbar.vectors.len() as f64)
                        .sqrt();
                    (maps, rms.to_degrees(), vbar.max_speed().to_degrees())
                }
                _ => (avg, 0.0, 0.0),
            };
        let change = rms_change(&recentred, &template.features);
        template.features = recentred;
        rounds.push(RoundReport {
            round,
            change,
            mean_correlation: mean_corr,
            mean_warp_rms_deg,
            mean_warp_max_deg,
        });
        last_reports = reports;
        if change < opts.tolerance {
            break;
        }
    }
    let report = TemplateReport {
        level: opts.level,
        subjects: subjects.len(),
        features: names.to_vec(),
        rounds,
        registrations: last_reports,
    };
    Ok((template, report))
}

/// `template.json` of a template folder.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct TemplateDescription {
    /// What the folder holds.
    pub kind: String,
    /// Icosphere level.
    pub level: u32,
    /// Vertices of the icosphere.
    pub vertices: usize,
    /// Feature names; the maps are `feature-<name>.shape.gii`.
    pub features: Vec<String>,
    /// Subjects it was built from.
    pub subjects: usize,
    /// Version of horosphere that wrote it.
    pub generator: String,
}

/// Kind string of `template.json`.
pub const TEMPLATE_KIND: &str = "horosphere registration template";

fn check_name(name: &str) -> Result<()> {
    if name.is_empty()
        || !name
            .chars()
            .all(|c| c.is_ascii_alphanumeric() || c == '_' || c == '-')
    {
        return Err(Error::Invalid(format!(
            "feature name '{name}'; expected letters, digits, '-' or '_'"
        )));
    }
    Ok(())
}

/// File name of feature `name` in a template folder.
pub fn feature_file(name: &str) -> String {
    format!("feature-{name}.shape.gii")
}

/// Write `template` into folder `dir` (created if needed; each file
/// written atomically).
pub fn write_template(dir: &Path, template: &Template) -> Result<()> {
    template.check()?;
    for n in &template.names {
        check_name(n)?;
    }
    std::fs::create_dir_all(dir).map_err(|e| Error::io(dir, e))?;
    let sphere = icosphere(template.level, 1.0);
    gifti::write_mesh(&dir.join("sphere.surf.gii"), &sphere)?;
    for (name, f) in template.names.iter().zip(&template.features) {
        let mut meta = MetaData::new();
        meta.set("Name", name.as_str());
        let values: Vec<f32> = f.iter().map(|&x| x as f32).collect();
        gifti::write_shape(&dir.join(feature_file(name)), &values, &meta)?;
    }
    let desc = TemplateDescription {
        kind: TEMPLATE_KIND.into(),
        level: template.level,
        vertices: n_vertices(template.level),
        features: template.names.clone(),
        subjects: template.subjects,
        generator: format!("horosphere {}", env!("CARGO_PKG_VERSION")),
    };
    let json = serde_json::to_string_pretty(&desc)
        .map_err(|e| Error::Invalid(format!("template description: {e}")))?;
    let path = dir.join("template.json");
    crate::io::atomic::write_atomic(&path, |w| {
        w.write_all(json.as_bytes())
            .and_then(|_| w.write_all(b"\n"))
            .map_err(|e| Error::io(&path, e))
    })
}

/// Read a template folder written by [`write_template`]; the sphere must be
/// the icosphere of the stated level and every map must match it.
pub fn read_template(dir: &Path) -> Result<Template> {
    let path = dir.join("template.json");
    let text = std::fs::read_to_string(&path).map_err(|e| Error::io(&path, e))?;
    let desc: TemplateDescription = serde_json::from_str(&text).map_err(|e| {
        Error::bad_file(
            &path,
            "JSON",
            format!("{e}; expected a template description"),
        )
    })?;
    if desc.kind != TEMPLATE_KIND {
        return Err(Error::bad_file(
            &path,
            "kind",
            format!("'{}'; expected '{TEMPLATE_KIND}'", desc.kind),
        ));
    }
    if !(1..=8).contains(&desc.level) || desc.vertices != n_vertices(desc.level) {
        return Err(Error::bad_file(
            &path,
            "level",
            format!(
                "level {} with {} vertices; expected level 1 to 8 with 10 * 4^level + 2 vertices",
                desc.level, desc.vertices
            ),
        ));
    }
    let spath = dir.join("sphere.surf.gii");
    let sphere = gifti::read_mesh(&spath)?;
    let want = icosphere(desc.level, 1.0);
    if sphere.n_vertices() != want.n_vertices() || sphere.faces != want.faces {
        return Err(Error::bad_file(
            &spath,
            "mesh",
            format!(
                "{} vertices, {} faces; expected the icosphere of level {} ({} vertices) in its documented order",
                sphere.n_vertices(),
                sphere.n_faces(),
                desc.level,
                want.n_vertices()
            ),
        ));
    }
    if let Some(i) = sphere
        .positions
        .iter()
        .zip(&want.positions)
        .position(|(a, b)| (0..3).any(|d| (a[d] - b[d]).abs() > 1e-5))
    {
        return Err(Error::bad_file(
            &spath,
            format!("vertex {i}"),
            "position differs from the unit icosphere; expected the template sphere as written",
        ));
    }
    let mut features = Vec::with_capacity(desc.features.len());
    for name in &desc.features {
        check_name(name).map_err(|e| e.in_file(&path, "features"))?;
        let fpath = dir.join(feature_file(name));
        let shape = gifti::read_shape(&fpath)?;
        let values: Vec<f64> = shape.values.iter().map(|&x| f64::from(x)).collect();
        if values.len() != desc.vertices {
            return Err(Error::bad_file(
                &fpath,
                "DataArray 0",
                format!(
                    "{} values; expected {} (one per template vertex)",
                    values.len(),
                    desc.vertices
                ),
            ));
        }
        features.push(values);
    }
    let t = Template {
        level: desc.level,
        names: desc.features,
        features,
        subjects: desc.subjects,
    };
    t.check().map_err(|e| e.in_file(&path, "template"))?;
    Ok(t)
}

/// One row of a registration cohort table.
#[derive(Debug, Clone, PartialEq)]
pub struct TableRow {
    pub subject: String,
    pub sphere: std::path::PathBuf,
    /// One map file per feature, in the header's order.
    pub features: Vec<std::path::PathBuf>,
    /// 1-based line number in the table.
    pub line: usize,
}

/// Read a cohort table for [`build_template`]: CSV with the header
/// `subject,sphere,<feature>,...` (at least one feature column, the
/// column names being the feature names), one row per subject, paths
/// relative to the table's folder. Returns the feature names and the rows.
pub fn read_table(path: &Path) -> Result<(Vec<String>, Vec<TableRow>)> {
    let (mut rdr, header) = crate::align::open_csv(path)?;
    if header.len() < 3 || header[0] != "subject" || header[1] != "sphere" {
        return Err(Error::bad_file(
            path,
            "header",
            format!("found columns {header:?}; expected `subject,sphere,<feature>,...` with at least one feature column"),
        ));
    }
    let names: Vec<String> = header[2..].to_vec();
    for (i, n) in names.iter().enumerate() {
        check_name(n).map_err(|e| e.in_file(path, "header"))?;
        if names[..i].contains(n) {
            return Err(Error::bad_file(
                path,
                "header",
                format!("feature column `{n}` appears twice"),
            ));
        }
    }
    let resolve = |s: &str| crate::align::table_path(path, s);
    let required: Vec<(usize, &str)> = header
        .iter()
        .enumerate()
        .map(|(i, h)| (i, h.as_str()))
        .collect();
    let rows = crate::align::subject_rows(path, &mut rdr, &required)?
        .into_iter()
        .map(|(line, rec)| {
            let field = |i: usize| rec.get(i).unwrap_or("");
            TableRow {
                subject: field(0).to_string(),
                sphere: resolve(field(1)),
                features: (2..header.len()).map(|i| resolve(field(i))).collect(),
                line,
            }
        })
        .collect();
    Ok((names, rows))
}

/// Read one feature map (the first per-vertex array of a GIFTI file) as
/// `f64`.
pub fn read_feature(path: &Path) -> Result<Vec<f64>> {
    let s = gifti::read_shape(path)?;
    Ok(s.values.iter().map(|&x| f64::from(x)).collect())
}
