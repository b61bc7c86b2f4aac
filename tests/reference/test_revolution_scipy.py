"""Surfaces of revolution: the classical conformal coordinate against scipy.

The Rust integration test `revolution_surfaces_converge_to_the_classical_map`
(tests/map.rs) builds each surface by placing the vertex of colatitude theta
at the profile parameter t with ln tan(theta/2) = int_{pi/2}^t ds/r(s)
(do Carmo, "Differential geometry of curves and surfaces", 1976: isothermal
coordinates of surfaces of revolution), with its own adaptive quadrature and
root finder, and leaves the pairs (t, theta) in
$HOROSPHERE_ARTIFACTS/map_revolution_profiles.json. Here the same integral is
evaluated with scipy.integrate.quad, independently of our code.
"""

import json
import math
import os
import pathlib

import pytest
from scipy.integrate import quad


def integrand(profile, t):
    if profile == "ellipsoid_1_1_2":
        # r = sin t, z = 2 cos t
        return math.sqrt(math.cos(t) ** 2 + 4.0 * math.sin(t) ** 2) / math.sin(t)
    if profile == "dumbbell_polar_1_plus_half_cos_2t":
        # polar R(t) = 1 + 0.5 cos 2t: r = R sin t, z = R cos t
        rr = 1.0 + 0.5 * math.cos(2.0 * t)
        dr = -math.sin(2.0 * t)
        return math.sqrt(rr * rr + dr * dr) / (rr * math.sin(t))
    raise ValueError(profile)


def load():
    folder = os.environ.get("HOROSPHERE_ARTIFACTS")
    if not folder:
        pytest.skip("HOROSPHERE_ARTIFACTS not set: run the Rust tests first (scripts/test.sh)")
    path = pathlib.Path(folder) / "map_revolution_profiles.json"
    assert path.exists(), f"{path} missing: the Rust revolution test did not run"
    return json.loads(path.read_text())


def test_colatitudes_match_scipy_quad():
    data = load()
    assert {d["profile"] for d in data} == {"ellipsoid_1_1_2", "dumbbell_polar_1_plus_half_cos_2t"}
    worst = 0.0
    count = 0
    for d in data:
        for t, theta in d["samples_t_theta"]:
            if theta < 1e-9 or theta > math.pi - 1e-9:
                continue  # the poles map to the profile's tips
            value, err = quad(lambda x: integrand(d["profile"], x), math.pi / 2, t, epsabs=1e-13, epsrel=1e-13, limit=200)
            worst = max(worst, abs(value - math.log(math.tan(theta / 2))))
            count += 1
    assert count > 100
    assert worst < 1e-9, worst


def test_discrete_map_error_is_small():
    # The exact discrete map of the level-3 meshes (642 vertices) lies within
    # a few 1e-3 (chordal) of the classical one (prototype figure 7.1e-4 for
    # the ellipsoid; the dumbbell's neck is harder).
    for d in load():
        assert 0 < d["chordal_error_after_moebius_fit"] < 3e-3, d["profile"]
