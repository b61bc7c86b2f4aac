"""The Snakemake workflow (pipelines/Snakefile) against `horosphere run`.

The first test runs the bundled demo cohort (`pipelines/demo-cohort.toml`
on `demo-subjects/`, 40 subjects x 2 hemispheres) both ways; a third test
runs `horosphere stats` on that run's thickness matrix and measures how much
of the planted effect (ground_truth.json) is found. The second runs
a small synthetic demo cohort (our generator: 3 subjects, 2,000
vertices per hemisphere, planted defects) twice: natively with
`horosphere run --jobs 2`, and through Snakemake (one job per subject and
hemisphere plus the cohort job, `snakemake --cores 2`, the reference
workflow engine from PyPI). Every output file must be byte-identical
(compared by content), including the QC table and the cohort matrices.
The binary comes from HOROSPHERE_BIN (default target/debug/horosphere).
"""

import csv
import os
import pathlib
import subprocess
import sys

import json

import nibabel as nib
import numpy as np
import pytest
import snakemake  # noqa: F401  (a missing workflow engine is a failure, not a skip)

REPO = pathlib.Path(__file__).resolve().parents[2]
BIN = os.path.abspath(os.environ.get("HOROSPHERE_BIN", str(REPO / "target" / "debug" / "horosphere")))


def tree(root):
    return {
        str(p.relative_to(root)): p.read_bytes()
        for p in sorted(root.rglob("*"))
        if p.is_file()
    }


def test_snakemake_outputs_equal_the_native_run(tmp_path):
    study = tmp_path / "study"
    subprocess.run(
        [BIN, "demo", "--out", str(study), "--subjects", "3", "--vertices", "2000", "--seed", "5"],
        check=True,
        capture_output=True,
    )
    pipelines = REPO / "pipelines"
    manifest = tmp_path / "cohort.toml"
    manifest.write_text(
        f"""[study]
root = "{study}"
output = "{tmp_path / 'native'}"
[inputs]
surface = "white"
maps = ["thickness", "depth", "regions"]
landmarks = "landmarks"
template = "{pipelines}/demo-template-{{hemi}}.toml"
[map]
pole = "repair-added"
[resample]
target = "icosphere:3"
"""
    )
    native = subprocess.run([BIN, "run", str(manifest), "--jobs", "2"], capture_output=True, text=True)
    assert native.returncode in (0, 1), native.stderr
    work = tmp_path / "work"
    work.mkdir()
    smk = subprocess.run(
        [
            sys.executable, "-m", "snakemake",
            "-s", str(pipelines / "Snakefile"),
            "--cores", "2",
            "--directory", str(work),
            "--config", f"manifest={manifest}", f"bin={BIN}", f"output={tmp_path / 'snakemake'}",
        ],
        capture_output=True,
        text=True,
    )
    assert smk.returncode == 0, smk.stdout + smk.stderr
    a = tree(tmp_path / "native")
    b = tree(tmp_path / "snakemake")
    assert sorted(a) == sorted(b)
    assert "group/desc-cohort_qc.csv" in a
    assert sum(1 for k in a if k.endswith("_desc-pipeline_record.json")) == 6
    for k in a:
        assert a[k] == b[k], k


def run_both(manifest, tmp_path):
    """Native `horosphere run --jobs 2` and Snakemake (`--cores 2`) on one
    manifest, each into its own output folder; returns both trees."""
    native = subprocess.run(
        [BIN, "run", str(manifest), "--jobs", "2", "--output", str(tmp_path / "native")],
        capture_output=True,
        text=True,
    )
    assert native.returncode in (0, 1), native.stderr
    work = tmp_path / "work"
    work.mkdir()
    smk = subprocess.run(
        [
            sys.executable, "-m", "snakemake",
            "-s", str(REPO / "pipelines" / "Snakefile"),
            "--cores", "2",
            "--directory", str(work),
            "--config", f"manifest={manifest}", f"bin={BIN}", f"output={tmp_path / 'snakemake'}",
        ],
        capture_output=True,
        text=True,
    )
    assert smk.returncode == 0, smk.stdout + smk.stderr
    return tree(tmp_path / "native"), tree(tmp_path / "snakemake")


@pytest.fixture(scope="module")
def bundled(tmp_path_factory):
    """The bundled demo cohort run both ways, once for this module."""
    root = tmp_path_factory.mktemp("bundled")
    a, b = run_both(REPO / "pipelines" / "demo-cohort.toml", root)
    return root, a, b


def ground_truth():
    return json.loads((REPO / "demo-subjects" / "ground_truth.json").read_text())


def test_snakemake_on_the_bundled_demo_cohort(bundled):
    _, a, b = bundled
    truth = ground_truth()
    units = 2 * len(truth["subjects"])
    assert sorted(a) == sorted(b)
    # Every subject x 2 hemispheres, one unit record each.
    assert sum(1 for k in a if k.endswith("_desc-pipeline_record.json")) == units
    qc = a["group/desc-cohort_qc.csv"].decode().splitlines()
    assert len(qc) == 1 + units
    # Every planted defect is repaired, the handle included (found and cut):
    # no unit fails, and the handle is cut exactly where the ground truth
    # planted one.
    rows = list(csv.DictReader(qc))
    assert [r["subject"] for r in rows if r["status"] == "failed"] == []
    planted = sorted(
        (s["participant_id"], h["hemi"])
        for s in truth["subjects"]
        for h in s["hemispheres"]
        if (h.get("defect") or {}).get("kind") == "handle"
    )
    assert len(planted) == 1
    cut = sorted((r["subject"], r["hemi"]) for r in rows if r["handles_cut"] not in ("", "0"))
    assert cut == planted
    unit = next(r for r in rows if (r["subject"], r["hemi"]) == planted[0])
    assert unit["status"] == "repaired" and unit["handles_found"] == "1"
    for k in a:
        assert a[k] == b[k], k


def test_planted_effect_is_recovered_on_the_bundled_demo(bundled, tmp_path):
    """Group statistics on the bundled run find the planted thinning.

    Ground truth (ground_truth.json, written by our generator): patients'
    left-hemisphere thickness is changed by `thickness_change_mm` inside a
    cap of `angular_radius_deg` around `centre` (directions in the
    canonical frame). The aligned common sphere is in that frame, so the
    planted region on `icosphere:5` is the set of target vertices within the
    cap. Model `thickness ~ group + age + sex`, contrast patient - control,
    Benjamini-Hochberg q < 0.05 (checked against statsmodels multipletests
    here too). Issue #8 asks for >= 80% of the region found and <= 5% of the
    vertices outside it; measured when written: 96.4% and 2.13% (left);
    0 vertices on the right hemisphere, which carries no effect.
    """
    from statsmodels.stats.multitest import multipletests

    root, _, _ = bundled
    truth = ground_truth()["effect"]
    matrix = root / "native" / "group" / "space-icosphere5_desc-thickness_matrix.func.gii"
    ico = tmp_path / "ico5.surf.gii"
    subprocess.run([BIN, "sphere", "icosphere:5", "-o", str(ico)], check=True, capture_output=True)
    v = nib.load(str(ico)).darrays[0].data.astype(float)
    v /= np.linalg.norm(v, axis=1)[:, None]
    angle = np.degrees(np.arccos(np.clip(v @ np.asarray(truth["centre"]), -1.0, 1.0)))
    inside = angle < truth["angular_radius_deg"]
    found = {}
    for hemi in ("L", "R"):
        out = tmp_path / hemi
        r = subprocess.run(
            [
                BIN, "stats", "--matrix", str(matrix),
                "--participants", str(REPO / "demo-subjects" / "participants.tsv"),
                "--formula", "thickness ~ group + age + sex",
                "--contrast", "group[T.patient]", "--hemi", hemi, "-o", str(out), "--json",
            ],
            capture_output=True,
            text=True,
        )
        assert r.returncode == 0, r.stderr
        p = nib.load(str(out / f"hemi-{hemi}_stat-p.shape.gii")).darrays[0].data.astype(float)
        q = nib.load(str(out / f"hemi-{hemi}_stat-q.shape.gii")).darrays[0].data.astype(float)
        assert len(q) == len(v) == 10242
        # Our q-values equal statsmodels' Benjamini-Hochberg on our p-values.
        ref = multipletests(p, method="fdr_bh")[1]
        np.testing.assert_allclose(q, ref, rtol=1e-5, atol=1e-7)
        found[hemi] = q < 0.05
        effect = nib.load(str(out / f"hemi-{hemi}_stat-effect.shape.gii")).darrays[0].data
        if hemi == truth["hemi"]:
            # Thinning, not thickening, at the cap's core.
            assert np.mean(effect[angle < 10]) < 0.5 * truth["thickness_change_mm"]
    sensitivity = found["L"][inside].mean()
    false_positive = found["L"][~inside].mean()
    print(f"sensitivity {sensitivity:.3f}, false positives {false_positive:.4f}, right {found['R'].sum()}")
    assert sensitivity >= 0.80, sensitivity
    assert false_positive <= 0.05, false_positive
    # No effect was planted on the right hemisphere.
    assert found["R"].mean() <= 0.01
