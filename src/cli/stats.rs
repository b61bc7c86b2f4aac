//! `horosphere stats --matrix M.func.gii --participants P.tsv --formula F
//! --contrast C -o OUTDIR [--hemi L] [--labels L.label.gii] [--q 0.05] [--json]`:
//! a vertex-wise linear model on a cohort matrix (`horosphere::stats`).
//!
//! Writes into OUTDIR, one FLOAT32 shape array per file on the common
//! sphere: `<hemi-H_>stat-effect.shape.gii`, `stat-se`, `stat-t`, `stat-p`,
//! `stat-q` and (two-level group contrasts) `stat-d`; with `--labels`, a
//! per-region CSV `<hemi-H_>stat-regions.csv` (label key, name, vertices,
//! tested vertices, mean effect, vertices with q below the threshold); and
//! a full-precision per-vertex CSV `<hemi-H_>stat-vertices.csv`
//! (vertex,effect,se,t,p,q[,d]; empty = NaN); and
//! a JSON summary `<hemi-H_>stat-summary.json` (also printed with --json).

use clap::Args;
use horosphere::io::atomic::write_atomic;
use horosphere::io::gifti::{self, MetaData};
use horosphere::resample::matrix::read_cohort_gifti;
use horosphere::stats::{design, fdr, formula, glm};
use horosphere::{Error, Result};
use std::path::PathBuf;
use std::process::ExitCode;

/// Flags of `stats`.
#[derive(Debug, Args)]
pub struct StatsArgs {
    /// Cohort matrix GIFTI (one data array per unit, labelled in its metadata).
    #[arg(long, value_name = "FILE")]
    pub matrix: PathBuf,
    /// Participants table (tab-separated, first column participant_id).
    #[arg(long, value_name = "FILE")]
    pub participants: PathBuf,
    /// Model formula, e.g. "thickness ~ group + age + sex".
    #[arg(long)]
    pub formula: String,
    /// Contrast: a coefficient name (e.g. "group[T.patient]") or numbers "0,1,0,0".
    #[arg(long)]
    pub contrast: String,
    /// Output folder.
    #[arg(short = 'o', long = "output", value_name = "DIR")]
    pub output: PathBuf,
    /// Keep only units of this hemisphere (label containing `_hemi-<H>`).
    #[arg(long)]
    pub hemi: Option<String>,
    /// Region labels on the common sphere, for the per-region summary.
    #[arg(long, value_name = "FILE")]
    pub labels: Option<PathBuf>,
    /// q threshold for counting significant vertices.
    #[arg(long = "q", default_value_t = 0.05)]
    pub q: f64,
    /// Print the summary as JSON on stdout.
    #[arg(long)]
    pub json: bool,
}

fn f32s(v: &[f64]) -> Vec<f32> {
    v.iter().map(|&x| x as f32).collect()
}

/// Run `stats`.
pub fn run(args: &StatsArgs) -> Result<ExitCode> {
    if !(args.q > 0.0 && args.q < 1.0) {
        return Err(Error::Invalid(format!(
            "--q {}; expected a threshold between 0 and 1",
            args.q
        )));
    }
    let f = formula::parse(&args.formula)?;
    let mut cols = read_cohort_gifti(&args.matrix)?;
    if let Some(h) = &args.hemi {
        let tag = format!("_hemi-{h}");
        cols.retain(|c| c.subject.contains(&tag));
        if cols.is_empty() {
            return Err(Error::bad_file(
                &args.matrix,
                "DataArray",
                format!("no unit labelled with '{tag}'; expected labels such as sub-01{tag}"),
            ));
        }
    }
    let units: Vec<String> = cols.iter().map(|c| c.subject.clone()).collect();
    // Two units of one participant (e.g. both hemispheres) would be counted
    // as independent subjects: refuse.
    let bases: Vec<&str> = units
        .iter()
        .map(|u| u.split('_').next().unwrap_or(u))
        .collect();
    for (k, b) in bases.iter().enumerate() {
        if bases[..k].contains(b) {
            return Err(Error::bad_file(
                &args.matrix,
                "DataArray",
                format!(
                    "participant '{b}' has more than one unit; choose one hemisphere with --hemi"
                ),
            ));
        }
    }
    let table = design::read_participants(&args.participants)?;
    let d = design::build(&args.participants, &table, &f, &units)?;
    let c = glm::contrast(&d, &args.contrast)?;
    let y: Vec<Vec<f32>> = cols.into_iter().map(|c| c.values).collect();
    let r = glm::fit(&d, &c, &y)?;
    let q = fdr::bh_q(&r.p);
    let nv = q.len();

    std::fs::create_dir_all(&args.output).map_err(|e| Error::io(&args.output, e))?;
    let prefix = args
        .hemi
        .as_ref()
        .map_or(String::new(), |h| format!("hemi-{h}_"));
    let mut maps: Vec<(&str, &[f64])> = vec![
        ("effect", &r.effect),
        ("se", &r.se),
        ("t", &r.t),
        ("p", &r.p),
        ("q", &q),
    ];
    if let Some(dv) = &r.d {
        maps.push(("d", dv));
    }
    let mut written = Vec::new();
    for (name, v) in &maps {
        let mut meta = MetaData::new();
        meta.set("Name", format!("stat-{name}"));
        meta.set(
            "Description",
            format!("{} ; contrast {}", args.formula, args.contrast),
        );
        let p = args.output.join(format!("{prefix}stat-{name}.shape.gii"));
        gifti::write_shape(&p, &f32s(v), &meta)?;
        written.push(p.display().to_string());
    }
    // Full-precision per-vertex table (shortest round-trip f64; empty = NaN).
    {
        let cell = |x: f64| {
            if x.is_finite() {
                format!("{x}")
            } else {
                String::new()
            }
        };
        let mut t = String::from("vertex,effect,se,t,p,q");
        if r.d.is_some() {
            t.push_str(",d");
        }
        t.push('\n');
        for v in 0..nv {
            t.push_str(&format!(
                "{v},{},{},{},{},{}",
                cell(r.effect[v]),
                cell(r.se[v]),
                cell(r.t[v]),
                cell(r.p[v]),
                cell(q[v])
            ));
            if let Some(dv) = &r.d {
                t.push(',');
                t.push_str(&cell(dv[v]));
            }
            t.push('\n');
        }
        let p = args.output.join(format!("{prefix}stat-vertices.csv"));
        write_atomic(&p, |w| {
            w.write_all(t.as_bytes()).map_err(|e| Error::io(&p, e))
        })?;
        written.push(p.display().to_string());
    }
    let n_sig = q.iter().filter(|&&x| x < args.q).count();

    if let Some(lp) = &args.labels {
        let lab = gifti::read_labels(lp)?;
        if lab.values.len() != nv {
            return Err(Error::bad_file(
                lp,
                "DataArray",
                format!(
                    "{} vertices; expected {nv} like the matrix",
                    lab.values.len()
                ),
            ));
        }
        let mut keys: Vec<i32> = lab.values.clone();
        keys.sort_unstable();
        keys.dedup();
        let mut s = String::from("key,region,vertices,tested,mean_effect,significant\n");
        for k in keys {
            let name = lab
                .table
                .get(k)
                .map_or(String::new(), |l| l.name.replace([',', '\n'], " "));
            let idx: Vec<usize> = (0..nv).filter(|&v| lab.values.get(v) == Some(&k)).collect();
            let tested: Vec<usize> = idx.iter().copied().filter(|&v| q[v].is_finite()).collect();
            let mean = if tested.is_empty() {
                f64::NAN
            } else {
                tested.iter().map(|&v| r.effect[v]).sum::<f64>() / tested.len() as f64
            };
            let sig = tested.iter().filter(|&&v| q[v] < args.q).count();
            let mean_s = if mean.is_finite() {
                format!("{mean}")
            } else {
                String::new()
            };
            s.push_str(&format!(
                "{k},{name},{},{},{mean_s},{sig}\n",
                idx.len(),
                tested.len()
            ));
        }
        let p = args.output.join(format!("{prefix}stat-regions.csv"));
        write_atomic(&p, |w| {
            w.write_all(s.as_bytes()).map_err(|e| Error::io(&p, e))
        })?;
        written.push(p.display().to_string());
    }

    let summary = serde_json::json!({
        "formula": args.formula,
        "contrast": args.contrast,
        "contrast_vector": c,
        "columns": d.names,
        "units": d.rows,
        "df": r.df,
        "vertices": nv,
        "masked_vertices": r.masked,
        "zero_variance_vertices": r.degenerate,
        "q_threshold": args.q,
        "significant_vertices": n_sig,
        "cohens_d": r.d.is_some(),
        "files": written,
    });
    let text = serde_json::to_string_pretty(&summary)
        .map_err(|e| Error::Invalid(format!("summary JSON: {e}")))?;
    let p = args.output.join(format!("{prefix}stat-summary.json"));
    write_atomic(&p, |w| {
        w.write_all(text.as_bytes()).map_err(|e| Error::io(&p, e))
    })?;
    if args.json {
        println!("{text}");
    } else {
        println!(
            "stats: {} units, {} columns, df {}; {nv} vertices ({} masked, {} zero variance); {n_sig} with q < {}",
            d.rows,
            d.cols(),
            r.df,
            r.masked,
            r.degenerate,
            args.q
        );
    }
    Ok(ExitCode::SUCCESS)
}
