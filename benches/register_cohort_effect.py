"""Planted-effect sensitivity of the cohort pipeline with Moebius alignment
alone versus with the registration stage (`[register] enabled = true`).

Run by hand (slow; not part of CI), with a release binary:

    cargo build --release
    /work/venv/bin/python benches/register_cohort_effect.py \
        --bin target/release/horosphere --work /tmp/regeffect \
        [--subjects 40] [--vertices 6000] [--seed 2]

Steps: `horosphere demo` (no defects, planted thickness effect of
--effect-mm in a cap of --radius-deg, patients, left hemisphere); run 1:
the pipeline without registration (left hemisphere, target icosphere:5,
fwhm_mm = 20); `register-template` (level 5, depth) over the aligned spheres
of run 1 and the native depth maps; run 2: the same manifest with the
registration stage. For each run, `horosphere stats` (thickness ~ group,
contrast patient - control, Benjamini-Hochberg q). Sensitivity: fraction of
the target vertices inside the planted cap (direction of the target vertex
within the cap radius of the ground truth's centre) with q < 0.05;
false-positive rate: fraction of vertices more than --margin-deg outside the
cap with q < 0.05. Because the two runs may call different numbers of
vertices outside the cap, the sensitivity is also given at fixed
false-positive rates (0.1%, 1%, 5%): the p threshold is set on each run so
that that fraction of the outside vertices is called (points of the
receiver operating characteristic). The common sphere's frame is the landmark template's,
which approximates the generator's canonical frame, so the cap is taken
there as is.

Reads GIFTI with nibabel (tests/reference/requirements.txt).
"""

import argparse
import csv
import json
import math
import os
import subprocess
import sys

import nibabel as nib
import numpy as np

REPO = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))


def sh(args, **kw):
    print("+", " ".join(str(a) for a in args), file=sys.stderr, flush=True)
    subprocess.run([str(a) for a in args], check=True, **kw)


def manifest(path, root, out, register):
    tpl = os.path.join(REPO, "pipelines", "demo-template-{hemi}.toml")
    text = f"""[study]
root = "{root}"
output = "{out}"
hemispheres = ["L"]
[inputs]
surface = "white"
maps = ["thickness", "depth"]
landmarks = "landmarks"
template = "{tpl}"
[resample]
target = "icosphere:5"
fwhm_mm = 20.0
{register}
"""
    with open(path, "w") as f:
        f.write(text)


def stats(binary, out, participants, dest):
    matrix = os.path.join(out, "group", "space-icosphere5_desc-thickness_matrix.func.gii")
    sh([binary, "stats", "--matrix", matrix, "--participants", participants,
        "--formula", "thickness ~ group", "--contrast", "group[T.patient]",
        "--hemi", "L", "-o", dest])
    q, pv = [], []
    with open(os.path.join(dest, "hemi-L_stat-vertices.csv")) as f:
        for row in csv.DictReader(f):
            q.append(float(row["q"]) if row["q"] else math.nan)
            pv.append(float(row["p"]) if row["p"] else math.nan)
    return np.array(q), np.array(pv)


def sensitivity_at_fp(p, inside, outside, rate):
    """Sensitivity when the p threshold is set so that at most `rate` of the
    vertices outside the cap are called (the empirical false-positive rate
    fixed, as on a receiver operating characteristic)."""
    po = np.sort(np.nan_to_num(p[outside], nan=1.0))
    k = int(math.floor(rate * len(po)))
    thr = po[k - 1] if k > 0 else -1.0
    if k < len(po) and k > 0 and po[k] == thr:
        thr = np.nextafter(thr, -1.0)
    pi = np.nan_to_num(p[inside], nan=1.0)
    return float((pi <= thr).mean()), float((np.nan_to_num(p[outside], nan=1.0) <= thr).mean())


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--bin", required=True)
    ap.add_argument("--work", required=True)
    ap.add_argument("--subjects", type=int, default=40)
    ap.add_argument("--vertices", type=int, default=6000)
    ap.add_argument("--seed", type=int, default=2)
    ap.add_argument("--effect-mm", type=float, default=-0.4)
    ap.add_argument("--radius-deg", type=float, default=30.0)
    ap.add_argument("--margin-deg", type=float, default=10.0)
    ap.add_argument("--jobs", type=int, default=2)
    ap.add_argument("--rounds", type=int, default=2)
    ap.add_argument("--features", default="depth",
                    help="comma-separated registration features: depth and/or mean_curvature")
    a = ap.parse_args()
    b = os.path.abspath(a.bin)
    w = os.path.abspath(a.work)
    os.makedirs(w, exist_ok=True)
    study = os.path.join(w, "study")
    if not os.path.exists(os.path.join(study, "ground_truth.json")):
        sh([b, "demo", "--out", study, "--subjects", a.subjects, "--vertices", a.vertices,
            "--seed", a.seed, "--effect-mm", a.effect_mm, "--effect-radius-deg",
            a.radius_deg, "--no-defects"])
    plain = os.path.join(w, "plain")
    manifest(os.path.join(w, "plain.toml"), study, plain, "")
    sh([b, "run", os.path.join(w, "plain.toml"), "--jobs", a.jobs])
    subs = sorted(d for d in os.listdir(study) if d.startswith("sub-"))
    feats = [f.strip() for f in a.features.split(",") if f.strip()]
    tag = "-".join(feats)
    table = os.path.join(w, f"table-{tag}.csv")
    with open(table, "w") as f:
        f.write("subject,sphere," + ",".join(feats) + "\n")
        for s in subs:
            cols = []
            for feat in feats:
                if feat == "mean_curvature":
                    curv = os.path.join(w, "curv", f"{s}_hemi-L_curv.shape.gii")
                    if not os.path.exists(curv):
                        os.makedirs(os.path.dirname(curv), exist_ok=True)
                        sh([b, "curvature", f"{study}/{s}/{s}_hemi-L_white.surf.gii", "-o", curv])
                    cols.append(curv)
                else:
                    cols.append(f"{study}/{s}/{s}_hemi-L_{feat}.shape.gii")
            f.write(f"{s},{plain}/{s}/{s}_hemi-L_space-individual_desc-aligned_sphere.surf.gii,"
                    + ",".join(cols) + "\n")
    tdir = os.path.join(w, f"tpl-{tag}-L")
    if not os.path.exists(os.path.join(tdir, "template.json")):
        sh([b, "register-template", "--cohort", table, "-o", tdir,
            "--level", "5", "--rounds", a.rounds])
    reg = os.path.join(w, f"reg-{tag}")
    flist = ", ".join(f'"{x}"' for x in feats)
    manifest(os.path.join(w, f"reg-{tag}.toml"), study, reg,
             f'[register]\nenabled = true\ntemplate = "tpl-{tag}-{{hemi}}"\nfeatures = [{flist}]\n')
    sh([b, "run", os.path.join(w, f"reg-{tag}.toml"), "--jobs", a.jobs])

    g = json.load(open(os.path.join(study, "ground_truth.json")))
    eff = g["effect"]
    centre = np.array(eff["centre"], dtype=float)
    radius = eff["angular_radius_deg"]
    sph = os.path.join(w, "ico5.surf.gii")
    sh([b, "sphere", "icosphere:5", "-o", sph])
    pts = nib.load(sph).darrays[0].data.astype(float)
    dirs = pts / np.linalg.norm(pts, axis=1)[:, None]
    ang = np.degrees(np.arccos(np.clip(dirs @ centre, -1, 1)))
    inside = ang <= radius
    outside = ang > radius + a.margin_deg
    participants = os.path.join(study, "participants.tsv")
    result = {"subjects": a.subjects, "vertices": a.vertices, "seed": a.seed,
              "features": feats,
              "effect_mm": eff["thickness_change_mm"], "radius_deg": radius,
              "in_cap": int(inside.sum()), "outside": int(outside.sum())}
    corr = []
    for s in subs:
        r = json.load(open(os.path.join(reg, s, f"{s}_hemi-L_desc-pipeline_record.json")))
        if r.get("register"):
            corr.append((r["register"]["corr_before"], r["register"]["corr_after"],
                         r["register"]["folded"], r["register"].get("softened_triangles", 0),
                         r["register"].get("identity_fallback", False)))
    result["register_corr_before_mean"] = float(np.mean([c[0] for c in corr]))
    result["register_corr_after_mean"] = float(np.mean([c[1] for c in corr]))
    result["register_rose_for"] = sum(1 for c in corr if c[1] > c[0])
    result["register_folded_total"] = sum(c[2] for c in corr)
    result["register_units_softened"] = sum(1 for c in corr if c[3] > 0)
    result["register_softened_triangles_total"] = sum(c[3] for c in corr)
    result["register_identity_fallbacks"] = sum(1 for c in corr if c[4])
    for name, out in (("moebius", plain), ("registered", reg)):
        q, pv = stats(b, out, participants, os.path.join(w, f"stats-{name}-{tag}"))
        sig = np.nan_to_num(q, nan=1.0) < 0.05
        result[name] = {"sensitivity": float(sig[inside].mean()),
                        "false_positive_rate": float(sig[outside].mean()),
                        "significant": int(sig.sum())}
        for rate in (0.001, 0.01, 0.05):
            sens, fp = sensitivity_at_fp(pv, inside, outside, rate)
            result[name][f"sensitivity_at_fp_{rate}"] = sens
            result[name][f"achieved_fp_{rate}"] = fp
    print(json.dumps(result, indent=2))


if __name__ == "__main__":
    main()
