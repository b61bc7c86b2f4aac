"""GIFTI files cross-checked against nibabel.

Reference: "GIFTI Surface Data Format Version 1.0", NIfTI Data Format Working
Group (2011), and its reference reader in nibabel (nibabel.gifti).

(a) nibabel writes surfaces, shape and label files with random data in each
    encoding (ASCII, Base64Binary, GZipBase64Binary) and both byte orders,
    with file and array metadata, a label table and a coordinate transform;
    `horosphere convert` re-writes each in each of our encodings and byte
    orders; nibabel loads ours and must find equal coordinates, faces, data
    arrays, intents, data types, metadata, label table and transform (exact
    equality for float32/int32).
(b) column-major arrays written by nibabel (`ordering='F'`) read correctly.
(c) an ExternalFileBinary file beside its data file reads the same in both.

nibabel 5 always writes the machine's byte order (GiftiDataArray's
`_to_xml_element` resets `endian` to `sys.byteorder`), so the big-endian
inputs are made from nibabel's own output by byte-swapping each binary
payload and setting Endian="BigEndian"; nibabel reading that file back equal
to the original shows that the construction is right.

The binary comes from HOROSPHERE_BIN (default target/debug/horosphere
relative to the repository).
"""

import base64
import os
import subprocess
import xml.etree.ElementTree as ET
import zlib
from pathlib import Path

import nibabel as nib
import numpy as np
import pytest
from nibabel.gifti import (
    GiftiCoordSystem,
    GiftiDataArray,
    GiftiImage,
    GiftiLabel,
    GiftiLabelTable,
    GiftiMetaData,
)

REPO = Path(__file__).resolve().parents[2]
BIN = Path(os.environ.get("HOROSPHERE_BIN", REPO / "target" / "debug" / "horosphere"))

NIB_ENCODINGS = ["GIFTI_ENCODING_ASCII", "GIFTI_ENCODING_B64BIN", "GIFTI_ENCODING_B64GZ"]
OUR_OPTIONS = [
    (["--encoding", enc] + (["--big-endian"] if big else []), enc, big)
    for enc in ("ascii", "base64", "gzip")
    for big in (False, True)
]
OUR_ENCODING_NAME = {"ascii": "ASCII", "base64": "Base64Binary", "gzip": "GZipBase64Binary"}


@pytest.fixture(scope="module")
def binary():
    if not BIN.exists():
        pytest.fail(f"horosphere binary not found at {BIN}; build it or set HOROSPHERE_BIN")
    return BIN


def convert(binary, src, dst, flags):
    r = subprocess.run(
        [str(binary), "convert", str(src), str(dst), *flags], capture_output=True, text=True
    )
    assert r.returncode == 0, r.stderr
    return dst


# ------------------------------------------------------------------ inputs


def surface_image(rng, encoding, ordering="C"):
    n, m = 240, 400
    coords = (rng.standard_normal((n, 3)) * 40).astype(np.float32)
    faces = rng.integers(0, n, size=(m, 3)).astype(np.int32)
    xform = np.eye(4)
    xform[:3, :3] += rng.standard_normal((3, 3)) * 0.1
    xform[:3, 3] = rng.standard_normal(3) * 10
    cs = GiftiCoordSystem(dataspace=1, xformspace=2, xform=xform)  # scanner -> aligned anatomy
    pts = GiftiDataArray(
        coords,
        intent="NIFTI_INTENT_POINTSET",
        datatype="NIFTI_TYPE_FLOAT32",
        encoding=encoding,
        coordsys=cs,
        ordering=ordering,
        meta=GiftiMetaData({"AnatomicalStructurePrimary": "CortexLeft", "Note": "a & b < c"}),
    )
    tris = GiftiDataArray(
        faces,
        intent="NIFTI_INTENT_TRIANGLE",
        datatype="NIFTI_TYPE_INT32",
        encoding=encoding,
        ordering=ordering,
    )
    meta = GiftiMetaData({"Subject": "sub-07", "Description": "random surface \u00e9"})
    return GiftiImage(darrays=[pts, tris], meta=meta)


def shape_image(rng, encoding):
    n = 300
    vals = (rng.standard_normal(n) * 3).astype(np.float32)
    two = rng.standard_normal((n, 2)).astype(np.float32)
    bytes_ = rng.integers(0, 256, size=n).astype(np.uint8)
    arrays = [
        GiftiDataArray(vals, intent="NIFTI_INTENT_SHAPE", encoding=encoding, meta={"Name": "thickness"}),
        GiftiDataArray(two, intent="NIFTI_INTENT_VECTOR", encoding=encoding, meta={"Name": "pair"}),
        GiftiDataArray(bytes_, intent="NIFTI_INTENT_NONE", encoding=encoding),
    ]
    return GiftiImage(darrays=arrays, meta=GiftiMetaData({"Kind": "shape"}))


def label_image(rng, encoding):
    n = 300
    keys = rng.integers(0, 4, size=n).astype(np.int32)
    table = GiftiLabelTable()
    for k, name in enumerate(["unassigned", "north cap", "band & belt", "south"]):
        lab = GiftiLabel(k, *[float(x) for x in rng.random(4)])
        lab.label = name
        table.labels.append(lab)
    arr = GiftiDataArray(keys, intent="NIFTI_INTENT_LABEL", encoding=encoding, meta={"Name": "regions"})
    return GiftiImage(darrays=[arr], labeltable=table, meta=GiftiMetaData({"Kind": "label"}))


def make_big_endian(src, dst):
    """Byte-swap every binary payload of `src` and mark it BigEndian."""
    tree = ET.parse(src)
    for da in tree.getroot().iter("DataArray"):
        enc = da.get("Encoding")
        size = {"NIFTI_TYPE_UINT8": 1, "NIFTI_TYPE_INT32": 4, "NIFTI_TYPE_FLOAT32": 4}[da.get("DataType")]
        data = da.find("Data")
        if enc in ("Base64Binary", "GZipBase64Binary"):
            raw = base64.b64decode(data.text)
            if enc == "GZipBase64Binary":
                raw = zlib.decompress(raw)
            swapped = np.frombuffer(raw, dtype=f"<u{size}").astype(f">u{size}").tobytes()
            if enc == "GZipBase64Binary":
                swapped = zlib.compress(swapped)
            data.text = base64.b64encode(swapped).decode()
        da.set("Endian", "BigEndian")
    tree.write(dst, encoding="UTF-8", xml_declaration=True)
    return dst


# ------------------------------------------------------------------ comparison


def assert_same(a, b, what):
    """nibabel image `b` holds exactly what nibabel image `a` holds."""
    assert dict(a.meta) == dict(b.meta), what
    la = [(l.key, l.label, l.rgba) for l in a.labeltable.labels]
    lb = [(l.key, l.label, l.rgba) for l in b.labeltable.labels]
    assert la == lb, what
    assert len(a.darrays) == len(b.darrays), what
    for i, (x, y) in enumerate(zip(a.darrays, b.darrays)):
        w = f"{what} DataArray {i}"
        assert x.intent == y.intent, w
        assert x.datatype == y.datatype, w
        assert list(x.dims) == list(y.dims), w
        assert x.data.dtype.kind == y.data.dtype.kind and x.data.dtype.itemsize == y.data.dtype.itemsize, w
        assert x.data.shape == y.data.shape, w
        assert np.array_equal(np.asarray(x.data), np.asarray(y.data)), w  # exact
        assert dict(x.meta) == dict(y.meta), w
        if x.intent == nib.nifti1.intent_codes["NIFTI_INTENT_POINTSET"]:
            assert x.coordsys.dataspace == y.coordsys.dataspace, w
            assert x.coordsys.xformspace == y.coordsys.xformspace, w
            assert np.array_equal(x.coordsys.xform, y.coordsys.xform), w


BUILDERS = {"surf": surface_image, "shape": shape_image, "label": label_image}


@pytest.mark.parametrize("kind", sorted(BUILDERS))
@pytest.mark.parametrize("nib_encoding", NIB_ENCODINGS)
@pytest.mark.parametrize("big_input", [False, True])
def test_nibabel_files_survive_our_convert(binary, tmp_path, kind, nib_encoding, big_input):
    rng = np.random.default_rng(zlib.crc32(f"{kind}-{nib_encoding}-{big_input}".encode()))
    img = BUILDERS[kind](rng, nib_encoding)
    src = tmp_path / f"in.{kind}.gii"
    nib.save(img, src)
    if big_input:
        src = make_big_endian(src, tmp_path / f"in-be.{kind}.gii")
    ref = nib.load(src)
    if big_input:
        # The byte-swapped file must still hold the original values.
        assert_same(nib.load(tmp_path / f"in.{kind}.gii"), ref, "byte-swap construction")
    if kind == "label":
        assert len(ref.labeltable.labels) == 4
    for flags, enc, big in OUR_OPTIONS:
        out = convert(binary, src, tmp_path / f"out-{enc}-{int(big)}.{kind}.gii", flags)
        text = out.read_text(encoding="utf-8")
        endian = "BigEndian" if big else "LittleEndian"
        assert f'Encoding="{OUR_ENCODING_NAME[enc]}" Endian="{endian}"' in text
        assert_same(ref, nib.load(out), f"{kind} {nib_encoding} big_input={big_input} -> {flags}")


@pytest.mark.parametrize("nib_encoding", ["GIFTI_ENCODING_B64BIN", "GIFTI_ENCODING_B64GZ"])
def test_column_major_from_nibabel(binary, tmp_path, nib_encoding):
    # nibabel's ASCII writer ignores `ordering` (it always prints rows), so
    # column-major input is checked with the binary encodings, where nibabel
    # writes `tobytes('F')`.
    rng = np.random.default_rng(11)
    img = surface_image(rng, nib_encoding, ordering="F")
    src = tmp_path / "cm.surf.gii"
    nib.save(img, src)
    assert 'ArrayIndexingOrder="ColumnMajorOrder"' in src.read_text()
    ref = nib.load(src)
    # The reference itself reads back the arrays nibabel was given.
    assert np.array_equal(ref.darrays[1].data, img.darrays[1].data)
    out = convert(binary, src, tmp_path / "rm.surf.gii", [])
    text = out.read_text()
    assert 'ArrayIndexingOrder="RowMajorOrder"' in text and "ColumnMajorOrder" not in text
    assert_same(ref, nib.load(out), "column-major")
    # The faces in row-major order: row i of the array is triangle i.
    assert np.array_equal(nib.load(out).darrays[1].data[5], img.darrays[1].data[5])


def test_external_file_binary(binary, tmp_path):
    rng = np.random.default_rng(5)
    coords = rng.standard_normal((10, 3)).astype(">f4")
    faces = rng.integers(0, 10, size=(6, 3)).astype(">i4")
    (tmp_path / "payload.bin").write_bytes(b"\0" * 7 + coords.tobytes() + faces.tobytes())
    xml = f"""<?xml version="1.0" encoding="UTF-8"?>
<GIFTI Version="1.0" NumberOfDataArrays="2">
 <DataArray Intent="NIFTI_INTENT_POINTSET" DataType="NIFTI_TYPE_FLOAT32" ArrayIndexingOrder="RowMajorOrder"
  Dimensionality="2" Dim0="10" Dim1="3" Encoding="ExternalFileBinary" Endian="BigEndian"
  ExternalFileName="payload.bin" ExternalFileOffset="7"><Data></Data></DataArray>
 <DataArray Intent="NIFTI_INTENT_TRIANGLE" DataType="NIFTI_TYPE_INT32" ArrayIndexingOrder="RowMajorOrder"
  Dimensionality="2" Dim0="6" Dim1="3" Encoding="ExternalFileBinary" Endian="BigEndian"
  ExternalFileName="payload.bin" ExternalFileOffset="{7 + coords.nbytes}"><Data></Data></DataArray>
</GIFTI>
"""
    src = tmp_path / "ext.surf.gii"
    src.write_text(xml)
    ref = nib.load(src, mmap=False)
    assert np.array_equal(ref.darrays[0].data, coords)
    out = convert(binary, src, tmp_path / "inline.surf.gii", [])
    got = nib.load(out)
    assert np.array_equal(got.darrays[0].data, coords)
    assert np.array_equal(got.darrays[1].data, faces)


def test_bad_input_is_refused_with_the_file_named(binary, tmp_path):
    rng = np.random.default_rng(3)
    src = tmp_path / "ok.surf.gii"
    nib.save(surface_image(rng, "GIFTI_ENCODING_B64GZ"), src)
    text = src.read_text()
    bad = tmp_path / "bad.surf.gii"
    bad.write_text(text.replace('Dim0="240"', 'Dim0="241"', 1))
    r = subprocess.run([str(binary), "convert", str(bad), str(tmp_path / "o.gii")], capture_output=True, text=True)
    assert r.returncode == 1
    assert "bad.surf.gii" in r.stderr and "DataArray 0 (NIFTI_INTENT_POINTSET)" in r.stderr
    assert not (tmp_path / "o.gii").exists()


ARTIFACTS = os.environ.get("HOROSPHERE_ARTIFACTS")


@pytest.mark.skipif(not ARTIFACTS, reason="HOROSPHERE_ARTIFACTS not set (run `cargo test --test gifti` with it first)")
def test_our_files_in_every_option_read_alike_in_nibabel():
    """Files written by tests/gifti.rs (artifacts_for_reference_checks) in
    each encoding, byte order and index order (including column-major ASCII,
    one value per line) hold the same arrays for nibabel, and values whose
    layout is known in advance sit where they should."""
    folder = Path(ARTIFACTS) / "gifti"
    files = sorted(folder.glob("rich_*.gii"))
    assert len(files) == 12, files
    ref = nib.load(folder / "rich_GZipBase64Binary_LittleEndian_RowMajorOrder.gii")
    for f in files:
        assert_same(ref, nib.load(f), f.name)
    # Vertex 0 of the icosahedral sphere of radius 100 is (-1, t, 0) scaled
    # to length 100, t the golden ratio (the generator's documented order).
    t = (1 + 5**0.5) / 2
    v0 = np.array([-1.0, t, 0.0]) / np.sqrt(1 + t * t) * 100
    assert np.allclose(ref.darrays[0].data[0], v0, rtol=0, atol=1e-5)
    assert ref.darrays[0].data.shape == (162, 3) and ref.darrays[1].data.shape == (320, 3)
    # The 2 x 3 x 4 array holds 0.5 * (row-major flat index) - 3.
    cube = ref.darrays[-1].data
    assert cube.shape == (2, 3, 4)
    assert cube[1, 2, 3] == 0.5 * 23 - 3 and cube[0, 1, 0] == 0.5 * 4 - 3
    # The label table and the non-trivial transform.
    assert [l.label for l in ref.labeltable.labels] == ["unassigned", "north & cap", "band"]
    assert ref.labeltable.labels[1].rgba == (0.123456789012345, 0.5, 1.0, 1.0)
    assert ref.labeltable.labels[2].rgba == (None, None, None, None)
    cs = ref.darrays[0].coordsys
    assert cs.dataspace == 1 and cs.xformspace == 2
    assert cs.xform[1, 3] == 3.5 and cs.xform[2, 3] == 7.0e-3
    assert ref.darrays[5].data.dtype.kind == "f" and ref.darrays[5].data.dtype.itemsize == 8
