"""Reference checks of `horosphere stats` against statsmodels and scipy.

Sources: statsmodels OLS and `OLSResults.t_test` (effects, t, p), scipy.stats.ttest_ind
with equal_var=True (pooled-variance two-group t test), and
statsmodels.stats.multitest.multipletests(method="fdr_bh") (Benjamini-Hochberg q).
The data are random, written here; the cohort matrix is a GIFTI with one FLOAT32
array per unit whose metadata holds `Subject` (what read_cohort_gifti reads).
Outputs are stored as float32, so comparisons are made relative to float32
rounding of values computed in float64 (about 1e-7 relative); the float64 values
themselves are checked to 1e-8 through the full-precision per-vertex CSV
(`stat-vertices.csv`).
"""

import os
import subprocess

import nibabel as nib
import numpy as np
import pytest
import scipy.stats
import statsmodels.api as sm
from statsmodels.stats.multitest import multipletests

BIN = os.path.abspath(os.environ.get("HOROSPHERE_BIN", "target/debug/horosphere"))


def write_matrix(path, labels, data):
    img = nib.gifti.GiftiImage()
    for lab, col in zip(labels, data):
        meta = nib.gifti.GiftiMetaData({"Name": lab, "Subject": lab})
        img.add_gifti_data_array(
            nib.gifti.GiftiDataArray(
                np.asarray(col, dtype=np.float32), intent="NIFTI_INTENT_SHAPE", meta=meta
            )
        )
    nib.save(img, str(path))


def write_participants(path, ids, group, age, sex):
    with open(path, "w") as fh:
        fh.write("participant_id\tgroup\tage\tsex\n")
        for r in zip(ids, group, age, sex):
            fh.write("\t".join(str(x) for x in r) + "\n")


def run(tmp, formula, contrast, extra=()):
    out = tmp / "out"
    cmd = [BIN, "stats", "--matrix", str(tmp / "m.func.gii"), "--participants",
           str(tmp / "p.tsv"), "--formula", formula, "--contrast", contrast,
           "-o", str(out), *extra]
    res = subprocess.run(cmd, capture_output=True, text=True)
    return res, out


def load_csv(out, prefix=""):
    import csv
    with open(out / f"{prefix}stat-vertices.csv") as fh:
        rows = list(csv.DictReader(fh))
    return {k: np.array([float(r[k]) if r[k] else np.nan for r in rows])
            for k in rows[0].keys()}


def load(out, name):
    return nib.load(str(out / f"stat-{name}.shape.gii")).darrays[0].data.astype(np.float64)


def make_cohort(tmp, rng, n=30, nv=120):
    ids = [f"sub-r{i:02d}" for i in range(n)]
    group = rng.choice(["control", "patient"], size=n)
    group[:2] = ["control", "patient"]
    age = rng.integers(40, 80, size=n)
    sex = rng.choice(["F", "M"], size=n)
    g = (group == "patient").astype(float)
    s = (sex == "M").astype(float)
    effect = np.where(np.arange(nv) < nv // 2, -0.3, 0.0)
    y = (2.5 + np.outer(g, effect) - 0.01 * np.outer(age - 60, np.ones(nv))
         + 0.1 * np.outer(s, np.ones(nv)) + 0.2 * rng.standard_normal((n, nv)))
    y = y.astype(np.float32)
    y[5, 7] = np.nan  # one masked vertex
    write_matrix(tmp / "m.func.gii", [f"{i}_hemi-L" for i in ids], y)
    write_participants(tmp / "p.tsv", ids, group, age, sex)
    X = np.column_stack([np.ones(n), g, age.astype(float), s])
    return X, y.astype(np.float64), g


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_matches_statsmodels_ols(tmp_path, seed):
    rng = np.random.default_rng(seed)
    X, y, _ = make_cohort(tmp_path, rng)
    res, out = run(tmp_path, "thickness ~ group + age + sex", "group[T.patient]")
    assert res.returncode == 0, res.stderr
    eff, se, t, p, q = (load(out, k) for k in ["effect", "se", "t", "p", "q"])
    full = load_csv(out)
    assert np.isnan(eff[7]) and np.isnan(p[7]) and np.isnan(q[7])
    want_p = []
    for v in range(y.shape[1]):
        if v == 7:
            continue
        fit = sm.OLS(y[:, v], X).fit()
        tt = fit.t_test(np.array([[0.0, 1.0, 0.0, 0.0]]))
        e, s_, tv, pv = (float(np.ravel(tt.effect)[0]), float(np.ravel(tt.sd)[0]),
                         float(np.ravel(tt.tvalue)[0]), float(np.ravel(tt.pvalue)[0]))
        # Files hold float32: compare to float32 rounding (rel 1e-6 covers it).
        assert eff[v] == pytest.approx(e, rel=1e-6, abs=1e-7)
        assert se[v] == pytest.approx(s_, rel=1e-6)
        assert t[v] == pytest.approx(tv, rel=1e-6)
        assert p[v] == pytest.approx(pv, rel=1e-5, abs=1e-30)
        # The full-precision table matches to 1e-8 (relative; p absolute 1e-12 floor).
        assert full["effect"][v] == pytest.approx(e, rel=1e-8, abs=1e-12)
        assert full["se"][v] == pytest.approx(s_, rel=1e-8)
        assert full["t"][v] == pytest.approx(tv, rel=1e-8)
        assert full["p"][v] == pytest.approx(pv, rel=1e-8, abs=1e-300)
        want_p.append(pv)
    # Benjamini-Hochberg against statsmodels multipletests.
    ok = ~np.isnan(p)
    _, want_q, _, _ = multipletests(p[ok], method="fdr_bh")
    np.testing.assert_allclose(q[ok], want_q, rtol=1e-6)
    okf = ~np.isnan(full["p"])
    _, want_qf, _, _ = multipletests(full["p"][okf], method="fdr_bh")
    np.testing.assert_allclose(full["q"][okf], want_qf, rtol=1e-12)
    # Contrast as a vector gives the same effect.
    res2, out2 = run(tmp_path, "thickness ~ group + age + sex", "0,1,0,0")
    assert res2.returncode == 0, res2.stderr
    np.testing.assert_array_equal(load(out2, "effect"), eff)


def test_two_group_equals_ttest_ind(tmp_path):
    rng = np.random.default_rng(7)
    _, y, g = make_cohort(tmp_path, rng, n=24, nv=50)
    res, out = run(tmp_path, "thickness ~ group", "group[T.patient]")
    assert res.returncode == 0, res.stderr
    t, p, d = load(out, "t"), load(out, "p"), load(out, "d")
    n1, n2 = int((g == 0).sum()), int((g == 1).sum())
    for v in range(y.shape[1]):
        if v == 7:
            assert np.isnan(t[v])
            continue
        a, b = y[g == 1, v], y[g == 0, v]
        r = scipy.stats.ttest_ind(a, b, equal_var=True)
        assert t[v] == pytest.approx(r.statistic, rel=1e-6)
        assert p[v] == pytest.approx(r.pvalue, rel=1e-5)
        # Cohen's d from the pooled standard deviation (Cohen 1988).
        sp = np.sqrt(((n2 - 1) * a.var(ddof=1) + (n1 - 1) * b.var(ddof=1)) / (n1 + n2 - 2))
        assert d[v] == pytest.approx((a.mean() - b.mean()) / sp, rel=1e-5)
    full = load_csv(out)
    ok = ~np.isnan(full["t"])
    r = scipy.stats.ttest_ind(y[g == 1][:, ok], y[g == 0][:, ok], equal_var=True)
    np.testing.assert_allclose(full["t"][ok], r.statistic, rtol=1e-8)
    np.testing.assert_allclose(full["p"][ok], r.pvalue, rtol=1e-8)


def test_bad_input(tmp_path):
    rng = np.random.default_rng(3)
    make_cohort(tmp_path, rng, n=10, nv=20)
    res, _ = run(tmp_path, "thickness ~ group + weight", "group[T.patient]")
    assert res.returncode == 1 and "weight" in res.stderr
    res, _ = run(tmp_path, "thickness ~ group", "group[T.other]")
    assert res.returncode == 1 and "group[T.patient]" in res.stderr
    # A participants table missing a subject.
    lines = open(tmp_path / "p.tsv").read().splitlines()
    open(tmp_path / "p.tsv", "w").write("\n".join(lines[:-1]) + "\n")
    res, _ = run(tmp_path, "thickness ~ group", "group[T.patient]")
    assert res.returncode == 1 and "sub-r09_hemi-L" in res.stderr


def test_region_summary_matches_numpy(tmp_path):
    """`--labels`: per region, the mean effect over tested vertices equals the
    mean of statsmodels OLS effects there, and the count of q < 0.05 equals
    multipletests(fdr_bh) on the statsmodels p-values."""
    rng = np.random.default_rng(11)
    X, y, _ = make_cohort(tmp_path, rng, n=30, nv=120)
    keys = np.repeat(np.array([0, 1, 2, 3], dtype=np.int32), 30)
    rng.shuffle(keys)
    table = nib.gifti.GiftiLabelTable()
    for k, name in enumerate(["unlabelled", "prow", "crest, upper", "keel"]):
        lab = nib.gifti.GiftiLabel(key=k, red=0.1 * k, green=0.5, blue=0.5, alpha=1.0)
        lab.label = name
        table.labels.append(lab)
    img = nib.gifti.GiftiImage(labeltable=table)
    img.add_gifti_data_array(nib.gifti.GiftiDataArray(keys, intent="NIFTI_INTENT_LABEL"))
    nib.save(img, str(tmp_path / "regions.label.gii"))
    res, out = run(tmp_path, "thickness ~ group + age + sex", "group[T.patient]",
                   ["--labels", str(tmp_path / "regions.label.gii")])
    assert res.returncode == 0, res.stderr
    import csv
    with open(out / "stat-regions.csv") as fh:
        rows = list(csv.DictReader(fh))
    assert [int(r["key"]) for r in rows] == [0, 1, 2, 3]
    assert rows[2]["region"] == "crest  upper"  # a comma in a name cannot split the row
    effect = np.full(y.shape[1], np.nan)
    p = np.full(y.shape[1], np.nan)
    for v in range(y.shape[1]):
        ok = np.isfinite(y[:, v])
        if not ok.all():
            continue  # a vertex with a missing unit is masked
        fit = sm.OLS(y[:, v], X).fit()
        effect[v], p[v] = fit.params[1], fit.pvalues[1]
    tested = np.isfinite(p)
    q = np.full_like(p, np.nan)
    q[tested] = multipletests(p[tested], method="fdr_bh")[1]
    for r in rows:
        k = int(r["key"])
        sel = keys == k
        assert int(r["vertices"]) == sel.sum()
        assert int(r["tested"]) == (sel & tested).sum()
        np.testing.assert_allclose(float(r["mean_effect"]), effect[sel & tested].mean(), rtol=1e-6)
        assert int(r["significant"]) == int((q[sel & tested] < 0.05).sum())
    # The planted half (vertices < 60, effect -0.3) is where the findings are.
    assert sum(int(r["significant"]) for r in rows) > 20


def test_both_hemispheres_need_a_choice(tmp_path):
    """Two units of one participant would be counted as independent subjects:
    refused unless --hemi picks one."""
    rng = np.random.default_rng(5)
    n, nv = 12, 30
    ids = [f"sub-h{i:02d}" for i in range(n)]
    group = np.array(["control", "patient"] * (n // 2))
    write_participants(tmp_path / "p.tsv", ids, group, rng.integers(40, 80, n), ["F"] * n)
    labels = [f"{i}_hemi-{h}" for i in ids for h in ("L", "R")]
    write_matrix(tmp_path / "m.func.gii", labels, rng.standard_normal((2 * n, nv)))
    res, out = run(tmp_path, "thickness ~ group", "group[T.patient]")
    assert res.returncode == 1
    assert "more than one unit" in res.stderr and "--hemi" in res.stderr
    assert not out.exists()
    res, out = run(tmp_path, "thickness ~ group", "group[T.patient]", ["--hemi", "R"])
    assert res.returncode == 0, res.stderr
    assert (out / "hemi-R_stat-t.shape.gii").exists()
    t = load_csv(out, "hemi-R_")["t"]
    # The R columns only: scipy's pooled t test on them.
    data = nib.load(str(tmp_path / "m.func.gii"))
    r_cols = np.array([d.data for d, lab in zip(data.darrays, labels) if lab.endswith("_hemi-R")], float)
    ref = scipy.stats.ttest_ind(r_cols[group == "patient"], r_cols[group == "control"], equal_var=True)
    np.testing.assert_allclose(t, ref.statistic, rtol=1e-6, atol=1e-6)


def test_singular_design_and_constant_vertex(tmp_path):
    rng = np.random.default_rng(9)
    n, nv = 16, 10
    ids = [f"sub-s{i:02d}" for i in range(n)]
    group = np.array(["control", "patient"] * (n // 2))
    age = rng.integers(40, 80, n)
    with open(tmp_path / "p.tsv", "w") as fh:
        fh.write("participant_id\tgroup\tage\tage_months\n")
        for i in range(n):
            fh.write(f"{ids[i]}\t{group[i]}\t{age[i]}\t{12 * age[i]}\n")
    y = rng.standard_normal((n, nv)).astype(np.float32)
    y[:, 4] = 2.5  # constant data at one vertex
    write_matrix(tmp_path / "m.func.gii", [f"{i}_hemi-L" for i in ids], y)
    # age_months = 12 * age: the design is singular.
    res, out = run(tmp_path, "thickness ~ group + age + age_months", "group[T.patient]")
    assert res.returncode == 1
    assert "singular" in res.stderr.lower() or "collinear" in res.stderr.lower(), res.stderr
    assert not out.exists()
    # A constant vertex is reported, not fatal; its statistics are missing.
    res, out = run(tmp_path, "thickness ~ group + age", "group[T.patient]", ["--json"])
    assert res.returncode == 0, res.stderr
    import json
    summary = json.loads(res.stdout)
    assert summary["zero_variance_vertices"] == 1
    t = load_csv(out)["t"]
    assert np.isnan(t[4]) and np.isfinite(np.delete(t, 4)).all()
