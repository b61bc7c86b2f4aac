"""The Snakemake workflow (pipelines/Snakefile) against `horosphere run`.

The first test runs the bundled demo cohort (`pipelines/demo-cohort.toml`
on `demo-subjects/`, 14 subjects x 2 hemispheres) both ways. The second runs
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


def test_snakemake_on_the_bundled_demo_cohort(tmp_path):
    a, b = run_both(REPO / "pipelines" / "demo-cohort.toml", tmp_path)
    assert sorted(a) == sorted(b)
    # 14 subjects x 2 hemispheres, one unit record each.
    assert sum(1 for k in a if k.endswith("_desc-pipeline_record.json")) == 28
    qc = a["group/desc-cohort_qc.csv"].decode().splitlines()
    assert len(qc) == 1 + 28
    # The planted handle (ground truth: sub-kf14, right hemisphere) is found,
    # cut and the unit goes through; no unit fails.
    rows = list(csv.DictReader(qc))
    assert [r["subject"] for r in rows if r["status"] == "failed"] == []
    cut = [(r["subject"], r["hemi"]) for r in rows if r["handles_cut"] not in ("", "0")]
    assert cut == [("sub-kf14", "R")]
    kf14 = next(r for r in rows if (r["subject"], r["hemi"]) == ("sub-kf14", "R"))
    assert kf14["status"] == "repaired" and kf14["handles_found"] == "1"
    for k in a:
        assert a[k] == b[k], k
